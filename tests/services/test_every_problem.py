"""A refused spectrum file lists every bad row, not only the first;
messages that reach the front end use no command-line option names.

The files are written here, so the expected line numbers are read off the files themselves.
"""

from __future__ import annotations

import ast
import re
from pathlib import Path

import numpy as np
import pytest


from registry.services import intake
from registry.services.references import ImportRejected
from registry.storage.engine import session_scope

AXIS = np.linspace(650.0, 4000.0, 120)
ROOT = Path(__file__).resolve().parents[2]


def wide_csv(path: Path, rows: list[list[str]]) -> Path:
    head = "sample_id,acquired_at," + ",".join(f"{v:.10g}" for v in AXIS)
    path.write_text("\n".join([head] + [",".join(r) for r in rows]) + "\n")
    return path


def good_row(k: int) -> list[str]:
    rng = np.random.default_rng(k)
    return [f"S{k}", "2027-01-02T08:00"] + [f"{v:.6f}" for v in rng.random(AXIS.size)]


def test_each_bad_row_of_a_csv_file_is_reported_with_its_line(registry, tmp_path):
    engine, actors = registry
    rows = [good_row(k) for k in range(8)]
    rows[1][5] = "n/a"      # line 3
    rows[4][2] = ""         # line 6, the first absorbance left empty
    rows[6][40] = "1e999"   # line 8: beyond float32 once parsed
    rows[6][7] = "x"        # the same line again: reported once, at its leftmost bad cell
    path = wide_csv(tmp_path / "bench.csv", rows)
    with pytest.raises(ImportRejected) as err, session_scope(engine) as s:
        intake.import_spectra(s, actors["analyst"], [path], instrument="IR-100")
    got = [(e.line, e.field, e.message) for e in err.value.errors]
    header = path.read_text().splitlines()[0].split(",")
    assert got == [(3, header[5], "value 'n/a' is not a number"),
                   (6, header[2], "empty value"),
                   (8, header[7], "value 'x' is not a number")]
    assert all(e.file == str(path) for e in err.value.errors)


def test_values_beyond_float32_are_listed_row_by_row(registry, tmp_path):
    engine, actors = registry
    rows = [good_row(k) for k in range(5)]
    rows[0][10] = "1e39"   # float32 ends near 3.4e38 (IEEE 754 binary32)
    rows[3][20] = "-1e40"
    path = wide_csv(tmp_path / "big.csv", rows)
    with pytest.raises(ImportRejected) as err, session_scope(engine) as s:
        intake.import_spectra(s, actors["analyst"], [path], instrument="IR-100")
    assert [e.line for e in err.value.errors] == [2, 5]


def _messages(tree: ast.AST):
    """The text parts of the first argument of every ``...Error(...)`` raised."""
    for node in ast.walk(tree):
        if isinstance(node, ast.Call) and getattr(node.func, "id", "").endswith(("Error", "Denied")):
            if node.args:
                for part in ast.walk(node.args[0]):
                    if isinstance(part, ast.Constant) and isinstance(part.value, str):
                        yield node.lineno, part.value


@pytest.mark.parametrize("folder", ["registry/services", "registry/lineage"])
def test_error_messages_name_no_command_line_options(folder):
    found = [f"{path.name}:{line}: {text}"
             for path in sorted((ROOT / folder).glob("*.py"))
             for line, text in _messages(ast.parse(path.read_text()))
             if re.search(r"(^|\s)--[a-z]", text)]
    assert not found, found
