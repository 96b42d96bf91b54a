"""`specledger select`, `selection list`, `selection show` end to end."""

from __future__ import annotations

import csv
import json

from typer.testing import CliRunner

from registry import catalog
from registry.cli import app
from registry.storage.engine import dispose_engines
from tests.conftest import PASSWORD

runner = CliRunner()


def cli(args, url, user="lena"):
    try:
        return runner.invoke(app, [*args, "--db", url, "--as", user],
                             env={"SPECLEDGER_PASSWORD": PASSWORD})
    finally:
        dispose_engines()


def test_select_with_a_budget_writes_a_send_list(sel_registry, tmp_path):
    engine, actors, info, url = sel_registry
    out = tmp_path / "send.csv"
    res = cli(["select", "--property", "RON", "--property", "MON", "--grade", "PREM95",
               "--method", "kennard-stone", "--budget", "3000", "--out", str(out)], url)
    assert res.exit_code == 0, res.output
    per_sample = sum(float(m["cost"]) for m in catalog.METHODS if m["property"] in ("RON", "MON"))
    with out.open() as fh:
        rows = list(csv.DictReader(fh))
    assert len(rows) == int(3000 // per_sample)
    assert float(rows[-1]["cumulative_cost"]) <= 3000
    assert rows[0]["sample_id"] in res.output and "selection run 1" in res.output
    assert "inside the calibration space: now" in res.output
    assert "largest mahalanobis distance" in res.output

    listed = cli(["selection", "list", "--format", "json"], url, user="otto")
    assert listed.exit_code == 0, listed.output
    runs = json.loads(listed.stdout)
    assert len(runs) == 1 and runs[0]["picks"] == len(rows) and runs[0]["state"] == "open"

    shown = cli(["selection", "show", "1", "--format", "json"], url, user="otto")
    assert shown.exit_code == 0, shown.output
    doc = json.loads(shown.stdout)
    assert [p["sample_id"] for p in doc["picks"]] == [r["sample_id"] for r in rows]
    text = cli(["selection", "show", "1"], url, user="otto")
    assert text.exit_code == 0 and rows[0]["sample_id"] in text.output


def test_json_output_and_dry_run_store_nothing(sel_registry):
    engine, actors, info, url = sel_registry
    res = cli(["select", "--property", "RON", "--grade", "PREM95", "--method", "d-optimal",
               "--n", "4", "--dry-run", "--format", "json"], url)
    assert res.exit_code == 0, res.output
    doc = json.loads(res.stdout)
    assert doc["run_id"] is None and len(doc["picks"]) == 4
    assert all(p["reason"] for p in doc["picks"])
    listed = cli(["selection", "list", "--format", "json"], url)
    assert json.loads(listed.stdout) == []


def test_cli_errors_are_one_clear_line(sel_registry):
    engine, actors, info, url = sel_registry
    res = cli(["select", "--property", "RON", "--grade", "PREM95", "--method", "kennard-stone"], url)
    assert res.exit_code == 2 and "a number of samples or a budget" in res.output
    res = cli(["select", "--property", "RON", "--grade", "PREM95", "--method", "kennard-stone",
               "--n", "3"], url, user="anton")
    assert res.exit_code == 2 and "error:" in res.output
    res = cli(["select", "--property", "RON", "--grade", "PREM95", "--method", "kennard-stone",
               "--n", "3", "--components", "many"], url)
    assert res.exit_code == 2 and "--components" in res.output
    res = cli(["selection", "show", "99"], url)
    assert res.exit_code == 2 and "no selection run 99" in res.output


def test_an_unwritable_send_list_stores_no_run(sel_registry, tmp_path, monkeypatch):
    """The send list is part of the action: a path that cannot be written is refused before
    anything runs, and a write that fails during the action rolls the run back."""
    engine, actors, info, url = sel_registry
    args = ["select", "--property", "RON", "--grade", "PREM95", "--method", "kennard-stone",
            "--n", "3", "--out"]
    res = cli([*args, str(tmp_path / "no-such-folder" / "send.csv")], url)
    assert res.exit_code == 2 and "does not exist" in res.output
    res = cli([*args, str(tmp_path)], url)  # a folder, not a file
    assert res.exit_code == 2 and "folder" in res.output

    import registry.commands.common as common

    def disk_full(*a, **kw):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(common.tempfile, "mkstemp", disk_full)
    out = tmp_path / "send.csv"
    res = cli([*args, str(out)], url)
    assert res.exit_code == 2 and "No space left" in res.output
    assert not out.exists()
    listed = cli(["selection", "list", "--format", "json"], url)
    assert json.loads(listed.stdout) == []

    monkeypatch.undo()
    res = cli([*args, str(out)], url)
    assert res.exit_code == 0, res.output
    assert out.exists() and [p.name for p in tmp_path.iterdir() if p.name.endswith(".part")] == []
    assert len(json.loads(cli(["selection", "list", "--format", "json"], url).stdout)) == 1


def test_choices_are_refused_by_the_parser(sel_registry):
    engine, actors, info, url = sel_registry
    for extra in (["--method", "random", "--n", "3"], ["--method", "kennard-stone", "--n", "3",
                                                      "--metric", "manhattan"]):
        res = cli(["select", "--property", "RON", "--grade", "PREM95", *extra], url)
        assert res.exit_code == 2 and "is not one of" in res.output
