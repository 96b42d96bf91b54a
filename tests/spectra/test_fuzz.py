"""Fuzzing both readers: any input parses or raises FormatError, nothing else.

Property under test (from the project's input rules): bad input raises
registry.errors.FormatError naming where the problem is; a reader never
crashes with another exception type.
"""

import tempfile
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from registry.errors import FormatError
from registry.spectra.formats import iter_csv_spectra, read_jcamp, write_csv_spectra, write_jcamp
from registry.spectra.record import SpectrumRecord

FUZZ = settings(max_examples=150, deadline=None,
                suppress_health_check=[HealthCheck.too_slow])


def _valid_jcamp_texts():
    x = np.linspace(600.0, 700.0, 41)
    y = (0.5 + 0.4 * np.sin(x / 7)).astype(np.float32)
    y[10:14] = y[10]
    rec = SpectrumRecord("F-1", x, y, metadata={"instrument": "i", "grade": "g"})
    return [write_jcamp(rec, form) for form in ("AFFN", "DIFDUP", "XYPOINTS")]


VALID_JCAMP = _valid_jcamp_texts()
JCAMP_ALPHABET = st.sampled_from(list("0123456789.+-, \n#=$?%@ABCDEFGHIJKLMNOPQRSTUVWXYZ"
                                      "abcdefghijklmnopqrsXYZ\x1a\t()/;eE"))


def _check_jcamp(text):
    try:
        records = read_jcamp(None, text=text, file_label="fuzz.jdx")
    except FormatError as exc:
        assert exc.file == "fuzz.jdx"
        assert exc.line is not None, str(exc)  # every JCAMP problem is on a line
        return
    for rec in records:
        assert rec.x.dtype == np.float64 and rec.y.dtype == np.float32
        assert rec.x.shape == rec.y.shape and np.all(np.diff(rec.x) > 0)
        assert np.all(np.isfinite(rec.y))


@FUZZ
@given(st.text())
def test_jcamp_arbitrary_text(text):
    _check_jcamp(text)


@FUZZ
@given(st.binary())
def test_jcamp_arbitrary_bytes(data):
    _check_jcamp(data)


@st.composite
def mutated(draw, valid, alphabet):
    text = draw(st.sampled_from(valid))
    for _ in range(draw(st.integers(1, 4))):
        lines = text.split("\n")
        action = draw(st.sampled_from(["replace", "insert", "delete_char", "delete_line",
                                       "duplicate_line", "swap_lines"]))
        i = draw(st.integers(0, len(lines) - 1))
        line = lines[i]
        j = draw(st.integers(0, len(line)))
        if action == "replace" and line:
            j = min(j, len(line) - 1)
            lines[i] = line[:j] + draw(alphabet) + line[j + 1:]
        elif action == "insert":
            lines[i] = line[:j] + "".join(draw(st.lists(alphabet, max_size=5))) + line[j:]
        elif action == "delete_char" and line:
            j = min(j, len(line) - 1)
            lines[i] = line[:j] + line[j + 1:]
        elif action == "delete_line":
            del lines[i]
        elif action == "duplicate_line":
            lines.insert(i, line)
        elif action == "swap_lines":
            k = draw(st.integers(0, len(lines) - 1))
            lines[i], lines[k] = lines[k], lines[i]
        text = "\n".join(lines)
    return text


@settings(max_examples=400, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(mutated(VALID_JCAMP, JCAMP_ALPHABET))
def test_jcamp_mutated_valid_files(text):
    _check_jcamp(text)


def _valid_csv_texts():
    x = np.linspace(4000.0, 3990.0, 6)
    recs = [SpectrumRecord(f"S{i}", x, np.arange(6, dtype=np.float32) * (i + 1) / 7,
                           metadata={"grade": "RON95", "operator": "o"}) for i in range(4)]
    out = []
    for delimiter in (",", "\t"):
        with tempfile.TemporaryDirectory() as tmp:
            path = Path(tmp) / "v.csv"
            write_csv_spectra(recs, path, delimiter=delimiter)
            out.append(path.read_text())
    out.append("sample_id,x,y\nA,1,0.5\nA,2,0.75\nB,1,1\nB,2,2\n")
    return out


VALID_CSV = _valid_csv_texts()
CSV_ALPHABET = st.sampled_from(list("0123456789.+-,;\t \n\"'abcxyzEe_") + ["nan", "inf", "é"])


def _check_csv(text):
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "fuzz.csv"
        if isinstance(text, bytes):
            path.write_bytes(text)
        else:
            path.write_text(text, encoding="utf-8")
        try:
            for chunk in iter_csv_spectra(path, chunk_rows=2):
                assert chunk.Y.dtype == np.float32 and chunk.Y.shape[1] == chunk.axis.size
                assert np.all(np.isfinite(chunk.Y)) and np.all(np.diff(chunk.axis) > 0)
                assert len(chunk.first_line) == len(chunk.sample_ids) == chunk.Y.shape[0]
        except FormatError as exc:
            assert exc.file == str(path)


@FUZZ
@given(st.text())
def test_csv_arbitrary_text(text):
    _check_csv(text)


@FUZZ
@given(st.binary())
def test_csv_arbitrary_bytes(data):
    _check_csv(data)


@settings(max_examples=250, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(mutated(VALID_CSV, CSV_ALPHABET))
def test_csv_mutated_valid_files(text):
    _check_csv(text)


def test_ordinate_beyond_float32_is_a_format_error():
    # Found by the mutation fuzzer above: 12100E46 × YFACTOR 1e-8 is finite in float64 but
    # overflows the float32 storage type; it must be refused, not stored as inf.
    from registry.spectra.record import SpectrumRecord
    from registry.spectra.formats import write_jcamp

    x = np.linspace(600.0, 700.0, 5)
    text = write_jcamp(SpectrumRecord("F-1", x, np.full(5, 0.5, np.float32)), form="AFFN")
    lines = ["##YFACTOR=1e40" if ln.startswith("##YFACTOR") else ln for ln in text.splitlines()]
    with pytest.raises(FormatError, match="float32") as err:
        read_jcamp(None, text="\n".join(lines) + "\n", file_label="big.jdx")
    assert err.value.line is not None
