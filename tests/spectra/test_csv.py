"""CSV spectra: streaming reader, writer, format detection.

Outside references: IEEE-754 binary32 needs 9 significant decimal digits to
round-trip (Goldberg, "What every computer scientist should know about
floating-point arithmetic", ACM Comput. Surv. 23:5, 1991); pandas.read_csv
as the reference parser.
"""

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from registry.errors import FormatError, InputError
from registry.spectra.formats import (detect_format, iter_csv_spectra, read_spectra_file,
                                      write_csv_spectra, write_jcamp)
from registry.spectra.record import SpectrumRecord
from registry.spectra.formats import csv_matrix

float32s = arrays(np.float32, st.integers(1, 40),
                  elements=st.floats(width=32, allow_nan=False, allow_infinity=False))


@settings(max_examples=60, deadline=None)
@given(data=st.data())
def test_float32_round_trip_is_exact(tmp_path_factory, data):
    # 9 significant digits identify every binary32 value (Goldberg 1991)
    y = data.draw(float32s)
    n = y.size
    x = np.linspace(4000.0, 400.0, n) if n > 1 else np.array([1000.0])
    recs = [SpectrumRecord("A", x, y), SpectrumRecord("B", x, y[::-1].copy())]
    path = tmp_path_factory.mktemp("rt") / "s.csv"
    write_csv_spectra(recs, path)
    [chunk] = list(iter_csv_spectra(path))
    order = np.argsort(x)
    np.testing.assert_array_equal(chunk.axis, x[order])  # axis header: shortest repr, exact
    assert chunk.Y.dtype == np.float32
    np.testing.assert_array_equal(chunk.Y, np.stack([y[order], y[::-1][order]]))


def test_values_and_metadata_match_pandas(tmp_path, ir_record):
    recs = [ir_record, SpectrumRecord("FUEL-0002", ir_record.x, ir_record.y * 3,
                                      metadata={"grade": "diesel, B7", "operator": 'o"k'})]
    path = tmp_path / "m.csv"
    write_csv_spectra(recs, path)
    reference = pd.read_csv(path, dtype={"sample_id": str}, keep_default_na=False)
    [chunk] = list(iter_csv_spectra(path))
    assert chunk.sample_ids == list(reference["sample_id"])
    np.testing.assert_array_equal(chunk.Y, reference.iloc[:, 5:].to_numpy(np.float32))
    assert chunk.metadata[1] == {"grade": "diesel, B7", "operator": 'o"k'}
    assert chunk.metadata[0]["acquired_at"] == ir_record.metadata["acquired_at"]
    assert chunk.first_line == [2, 3]


def test_descending_axis_is_flipped_and_chunks_stream(tmp_path):
    axis = np.array([4000.0, 3000.0, 2000.0])
    rows = [f"S{i},{i},{i + 0.5},{i + 0.25}" for i in range(7)]
    path = tmp_path / "d.tsv"
    path.write_text("\n".join(["sample_id\t4000\t3000\t2000"] +
                              [r.replace(",", "\t") for r in rows]) + "\n")
    chunks = list(iter_csv_spectra(path, chunk_rows=3))
    assert [len(c) for c in chunks] == [3, 3, 1]
    np.testing.assert_array_equal(chunks[0].axis, axis[::-1])
    np.testing.assert_array_equal(chunks[1].Y[0], [3.25, 3.5, 3.0])
    assert chunks[2].first_line == [8] and chunks[2].sample_ids == ["S6"]
    records = chunks[1].records()
    assert records[0].source_line == 5 and records[0].x_unit == "1/CM"


def test_long_form(tmp_path):
    path = tmp_path / "long.csv"
    path.write_text("sample_id,x,y,grade\nA,2,0.5,RON95\nA,1,0.25,RON95\n"
                    "B,1,1.5,\nB,2,1.75,\nC,5,9,E10\n")
    chunks = list(iter_csv_spectra(path, chunk_rows=10))
    assert [c.sample_ids for c in chunks] == [["A", "B"], ["C"]]  # C is on another axis
    np.testing.assert_array_equal(chunks[0].Y, [[0.25, 0.5], [1.5, 1.75]])
    assert chunks[0].metadata == [{"grade": "RON95"}, {}]
    assert chunks[0].first_line == [2, 4] and chunks[1].first_line == [6]


HEADER = "sample_id,grade,1000,1002,1004\n"
CSV_ERRORS = [
    ("non-numeric", "A,x,1,2,3\nB,y,1,abc,3\n", 3, "1002"),
    ("empty cell", "A,x,1,2,3\nB,y,1,,3\n", 3, "1002"),
    ("short row", "A,x,1,2,3\nB,y,1,2\n", 3, "1004"),
    ("NaN", "A,x,1,2,3\nB,y,1,2,nan\n", 3, "1004"),
    ("Inf", "A,x,1,inf,3\n", 2, "1002"),
    ("float32 overflow", "A,x,1,1e39,3\n", 2, "1002"),
    ("long row", "A,x,1,2,3\nB,y,1,2,3,4\n", 3, None),
    ("empty sample id", "A,x,1,2,3\n,y,1,2,3\n", 3, "sample_id"),
]


@pytest.mark.parametrize("what, body, line, field", CSV_ERRORS, ids=[e[0] for e in CSV_ERRORS])
def test_errors_name_file_line_and_column(tmp_path, what, body, line, field):
    path = tmp_path / "bad.csv"
    path.write_text(HEADER + body)
    with pytest.raises(FormatError) as err:
        list(iter_csv_spectra(path, chunk_rows=1))
    assert err.value.file == str(path) and str(path) in str(err.value)
    assert err.value.line == line, str(err.value)
    assert err.value.field == field, str(err.value)


@pytest.mark.parametrize("header, field", [
    ("sample_id,1000,1000\n", "1000"),           # repeated axis value
    ("sample_id,1000,1004,1002\n", "1002"),      # axis changes direction
    ("id,1000,1002\n", "sample_id"),             # no sample id column
])
def test_header_errors(tmp_path, header, field):
    path = tmp_path / "h.csv"
    path.write_text(header + "A,1,2,3\n")
    with pytest.raises(FormatError) as err:
        list(iter_csv_spectra(path))
    assert err.value.line == 1 and err.value.field == field


def test_header_only_and_empty_files(tmp_path):
    for text in ("sample_id,1,2\n", ""):
        path = tmp_path / "e.csv"
        path.write_text(text)
        with pytest.raises(FormatError):
            list(iter_csv_spectra(path))


def test_blank_lines_keep_line_numbers(tmp_path):
    path = tmp_path / "b.csv"
    path.write_text("sample_id,1,2\nA,1,2\n\nB,3,4\nC,5,x\n")
    with pytest.raises(FormatError) as err:
        list(iter_csv_spectra(path))
    assert err.value.line == 5


def test_writer_refuses_mixed_axes(tmp_path):
    a = SpectrumRecord("A", [1.0, 2.0], [1, 2])
    b = SpectrumRecord("B", [1.0, 3.0], [1, 2])
    with pytest.raises(InputError):
        write_csv_spectra([a, b], tmp_path / "x.csv")


def test_detect_format_and_read_spectra_file(tmp_path, ir_record):
    jdx = tmp_path / "a.txt"
    jdx.write_text(write_jcamp(ir_record))
    csv_path = tmp_path / "b.txt"
    write_csv_spectra([ir_record], csv_path)
    assert detect_format(jdx) == "jcamp" and detect_format(csv_path) == "csv"
    assert detect_format(tmp_path / "c.dx") == "jcamp"  # by extension, not opened
    assert detect_format(tmp_path / "c.TSV") == "csv"
    [[from_jdx]] = list(read_spectra_file(jdx))
    [[from_csv]] = list(read_spectra_file(csv_path))
    assert from_jdx.sample_id == from_csv.sample_id == ir_record.sample_id
    np.testing.assert_array_equal(from_csv.y, ir_record.y)
    odd = tmp_path / "d.txt"
    odd.write_text("hello\n")
    with pytest.raises(FormatError):
        detect_format(odd)


@pytest.mark.parametrize("trouble", ["none", "blank line", "inf", "text"])
def test_blocks_after_a_troubled_one_read_as_pandas_reads_them(tmp_path, monkeypatch, trouble):
    """Numbers are parsed straight to float32 until a block holds something that needs
    the cell-by-cell check (a blank row, a non-finite value, text); from that block on the
    checked parse runs. Either way the spectra and their file lines are those of the
    reference parser, pandas.read_csv (float64, then rounded to float32), and a bad cell
    is named by its file line and column."""
    monkeypatch.setattr(csv_matrix, "_PARSE_BYTES", 7 * (8 * 40 + 64 * 2))  # 7-row blocks
    rng = np.random.default_rng(5)
    axis = np.linspace(4000.0, 650.0, 40)
    records = [SpectrumRecord(f"S{k:03d}", axis, rng.random(40).astype(np.float32),
                              metadata={"grade": "G1"}) for k in range(97)]
    path = tmp_path / "w.csv"
    write_csv_spectra(records, path)
    lines = path.read_text().splitlines()
    # file line 60 is lines[59]: the 59th spectrum, in the ninth 7-row block
    if trouble == "blank line":
        lines.insert(59, "")
    elif trouble in ("inf", "text"):
        cells = lines[59].split(",")
        cells[7] = "inf" if trouble == "inf" else "n/a"
        lines[59] = ",".join(cells)
    path.write_text("\n".join(lines) + "\n")
    if trouble in ("inf", "text"):
        with pytest.raises(FormatError) as err:
            list(iter_csv_spectra(path, chunk_rows=10))
        assert (err.value.line, err.value.field) == (60, lines[0].split(",")[7])
        assert ("not a number" if trouble == "text" else "infinite") in err.value.message
        return
    chunks = list(iter_csv_spectra(path, chunk_rows=10))
    reference = pd.read_csv(path, dtype={"sample_id": str}, skip_blank_lines=True)
    assert [i for c in chunks for i in c.sample_ids] == list(reference["sample_id"])
    expected = reference.iloc[:, :1:-1].to_numpy(np.float32)  # axis columns, ascending
    np.testing.assert_array_equal(np.vstack([c.Y for c in chunks]), expected)
    first_lines = [n for c in chunks for n in c.first_line]
    assert first_lines == (list(range(2, 99)) if trouble == "none"
                           else list(range(2, 60)) + list(range(61, 100)))
