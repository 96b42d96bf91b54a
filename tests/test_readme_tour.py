"""The README's CLI tour, run as written (so the README stays true).

Every `specledger` line of the tour's code block is run in order with the CLI runner;
`export` lines set the environment. Data files are made from the synthetic generator.
"""

from __future__ import annotations

import re
import shlex
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

from registry.cli import app
from registry.spectra.formats import write_jcamp
from registry.spectra.record import SpectrumRecord
from registry.storage.engine import dispose_engines
from seed_demo.synthetic import generate_population, reference_noise
from tests.factories import write_population_csv, write_reference_csv

README = Path(__file__).resolve().parents[1] / "README.md"
PASSWORD = "tour-password-1"


def tour_lines() -> list[str]:
    text = README.read_text()
    block = text[text.index("## A short CLI tour"):]
    block = block[block.index("```sh") + 5:]
    block = block[:block.index("```")]
    return [re.sub(r"\s+#.*$", "", ln).strip() for ln in block.strip().splitlines()]


@pytest.mark.slow  # the whole tour: ~10 s of CPU
def test_the_readme_tour_runs_as_written(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)  # relative paths of the tour (./spectra/, send.csv, ...) land here
    # 220 referenced samples: the 25 % validation part (55) lets a model of up to 13 components
    # meet the size rule n ≥ 4·A
    pop = generate_population(250, family="gasoline", grade="premium", seed=21)
    (tmp_path / "spectra").mkdir()
    ids = write_population_csv(tmp_path / "spectra" / "batch-1.csv", pop, "T", "PREM95")
    ron = reference_noise("RON", pop.properties["RON"].to_numpy()[:220], np.random.default_rng(1))
    write_reference_csv(tmp_path / "engine-results.csv", ids[:220], ron, "RON", "ASTM D2699")
    new = generate_population(1, family="gasoline", grade="premium", seed=22)
    (tmp_path / "new.jdx").write_text(write_jcamp(SpectrumRecord(
        "NEW-1", new.axis, new.spectra[0].astype(np.float32), metadata={"grade": "PREM95"})))

    env = {"SPECLEDGER_PASSWORD": PASSWORD}
    runner = CliRunner()
    lines = tour_lines()
    assert len(lines) > 20
    try:
        for line in lines:
            if line.startswith("export "):
                key, value = line[len("export "):].split("=", 1)
                env[key] = value
                continue
            args = shlex.split(line)
            assert args[0] == "specledger", line
            stdin = f"{PASSWORD}\n{PASSWORD}\n" if args[1:3] == ["user", "add"] else None
            res = runner.invoke(app, args[1:], env=env, input=stdin)
            assert res.exit_code == 0, f"{line}\n{res.output}"
        assert (tmp_path / "send.csv").read_text().startswith("rank,sample_id")
        assert "<html" in (tmp_path / "trace.html").read_text().lower()
    finally:
        dispose_engines()
