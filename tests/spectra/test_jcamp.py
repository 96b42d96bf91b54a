"""JCAMP-DX reader and writer.

Format source: McDonald & Wilks, Appl. Spectrosc. 42:151 (1988), the
JCAMP-DX 4.24 infrared specification (character tables for SQZ, DIF and DUP,
the Y-check rule, required labels).  Second opinion: the general-purpose
``jcamp`` package 1.3.2 (``jcamp.read``).
"""

import io

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import jcamp as jcamp_pkg
from registry.errors import FormatError
from registry.spectra.formats import jcamp as jcamp_module
from registry.spectra.formats.asdf import decode_table
from registry.spectra.formats.jcamp import normalise_label, read_jcamp, write_jcamp
from registry.spectra.record import SpectrumRecord


def header(npoints, firstx, lastx, *, extra="", yunits="ABSORBANCE", title="T1"):
    return (f"##TITLE={title}\n##JCAMP-DX=4.24\n##DATA TYPE=INFRARED SPECTRUM\n"
            f"##XUNITS=1/CM\n##YUNITS={yunits}\n##XFACTOR=1\n##YFACTOR=1\n"
            f"##FIRSTX={firstx}\n##LASTX={lastx}\n##NPOINTS={npoints}\n{extra}")


def yfactor_of(text):
    return float(next(line for line in text.splitlines()
                      if line.startswith("##YFACTOR=")).split("=")[1])


# --------------------------------------------------------------------------- ASDF forms
# From memory: the 1988 paper shows one row of ordinates written in AFFN, PAC,
# SQZ, DIF and DIFDUP forms.  The values below are our own; each form was
# encoded by hand from the spec's character tables (SQZ @=0 A–I=1–9 a–i=−1…−9;
# DIF %=0 J–R=1–9 j–r=−1…−9; DUP S–Z=1–8 s=9, the count includes the value).
HAND_Y = [1002, 1001, 1001, 1002, 1003, 1003, 1003, 995, -12, -12, 7, 0]
HAND_FORMS = {
    "AFFN": ["450 1002 1001 1001 1002 1003 1003 1003 995 -12 -12 7 0"],
    "AFFN commas and exponent": ["450, 1.002E+03, 1001, 1001, 1002, 1003, 1003, 1003, 995, "
                                 "-12, -12, 7, 0"],
    "PAC": ["450+1002+1001+1001+1002+1003+1003+1003+995-12-12+7+0"],
    "SQZ": ["450A002A001A001A002A003A003A003I95a2a2G@"],
    "SQZ with DUP": ["450A002A001TA002A003UI95a2TG@"],
    "DIF": ["450A002j%JJ%%qj007%J9p"],
    "DIFDUP": ["450A002j%JT%Tqj007%J9p"],
    # split after the 7th ordinate: the next line repeats 1003 (x = 456) as the Y-check
    "DIFDUP two lines": ["450A002j%JT%T", "456A003qj007%J9p"],
}


@pytest.mark.parametrize("form", sorted(HAND_FORMS))
def test_hand_encoded_asdf_forms_decode_to_the_same_ordinates(form):
    text = header(12, 450, 461, extra="##XYDATA=(X++(Y..Y))\n") + \
        "\n".join(HAND_FORMS[form]) + "\n##END=\n"
    [record] = read_jcamp(None, text=text)
    assert record.y.tolist() == HAND_Y
    assert record.x.tolist() == list(range(450, 462))


def test_multi_digit_dup_count():
    # spec: a DUP count is a number whose first digit is the DUP character ("S1" = 11)
    text = header(12, 1, 12, extra="##XYDATA=(X++(Y..Y))\n") + "1@%S1\n##END=\n"
    [record] = read_jcamp(None, text=text)
    assert record.y.tolist() == [0.0] * 12


def test_y_check_mismatch_is_an_error_on_that_line():
    text = header(12, 450, 461, extra="##XYDATA=(X++(Y..Y))\n") + \
        "450A002j%JT%T\n456A004qj007%J9p\n##END=\n"
    with pytest.raises(FormatError) as err:
        read_jcamp(None, text=text, file_label="ycheck.jdx")
    assert err.value.line == 13 and "Y-check" in str(err.value)
    assert "ycheck.jdx" in str(err.value)


# --------------------------------------------------------------------------- round trips

@pytest.mark.parametrize("form", ["AFFN", "DIFDUP", "XYPOINTS"])
def test_round_trip(ir_record, form):
    text = write_jcamp(ir_record, form=form)
    assert max(len(line) for line in text.splitlines()) <= 80  # spec line length
    [back] = read_jcamp(None, text=text)
    np.testing.assert_array_equal(back.x, ir_record.x)  # FIRSTX/LASTX written exactly
    # each ordinate is the nearest multiple of YFACTOR: within YFACTOR/2 before the
    # float32 cast, within YFACTOR after it
    assert np.max(np.abs(back.y - ir_record.y)) <= yfactor_of(text)
    assert back.sample_id == ir_record.sample_id
    for key in ("instrument", "operator", "grade", "acquired_at"):
        assert back.metadata[key] == ir_record.metadata[key]


def test_round_trip_descending_and_micrometre_axis():
    x = np.linspace(2.5, 25.0, 301)
    y = (0.1 + 0.05 * np.sin(x)).astype(np.float32)
    rec = SpectrumRecord("UM", x[::-1], y[::-1], x_unit="MICROMETERS")
    [back] = read_jcamp(None, text=write_jcamp(rec, "DIFDUP"))
    assert back.x_unit == "MICROMETERS"
    np.testing.assert_allclose(back.x, x, rtol=1e-15)
    # wavenumber = 1e4 / wavelength in µm (definition of the units)
    np.testing.assert_allclose(back.to_wavenumber().x, np.sort(1e4 / x), rtol=1e-12)


def test_explicit_yfactor_bounds_the_error(ir_record):
    text = write_jcamp(ir_record, "DIFDUP", yfactor=1e-4)
    [back] = read_jcamp(None, text=text)
    assert np.max(np.abs(back.y - ir_record.y)) <= 0.5e-4 + 1e-7


# --------------------------------------------------------------------------- second opinion

def _pkg_read(text, capsys):
    parsed = jcamp_pkg.read(io.BytesIO(text.encode()))
    printed = capsys.readouterr().out
    assert "failed" not in printed.lower() and "mismatch" not in printed.lower(), printed
    order = np.argsort(parsed["x"])
    return parsed["x"][order], parsed["y"][order]


@pytest.mark.parametrize("form", ["AFFN", "DIFDUP", "XYPOINTS"])
def test_matches_the_jcamp_package(form, capsys):
    rng = np.random.default_rng(7)
    x = np.linspace(400.0, 4000.0, 901)
    y = rng.uniform(0.0, 1.5, x.size).astype(np.float32)
    y[100:105] = y[100]  # a short run: the jcamp package reads single-digit DUP counts only
    text = write_jcamp(SpectrumRecord("S", x, y), form=form)
    [ours] = read_jcamp(None, text=text)
    px, py = _pkg_read(text, capsys)
    np.testing.assert_allclose(ours.x, px, rtol=1e-12)
    np.testing.assert_allclose(ours.y, py, rtol=0, atol=yfactor_of(text))


@pytest.mark.parametrize("scale, unit", [(1.0, "TRANSMITTANCE"), (100.0, "% TRANSMITTANCE"),
                                         (100.0, "TRANSMITTANCE")])
def test_transmittance_matches_the_jcamp_package(scale, unit, capsys):
    x = np.arange(1000.0, 1100.0)
    t = np.linspace(0.05, 0.95, x.size) * scale
    ints = np.rint(t / 1e-4).astype(int)
    text = header(x.size, 1000.0, 1099.0, yunits=unit,
                  extra="##XYDATA=(X++(Y..Y))\n").replace("##YFACTOR=1", "##YFACTOR=0.0001")
    text += "".join(f"{1000 + i} {' '.join(map(str, ints[i:i + 10]))}\n"
                    for i in range(0, x.size, 10)) + "##END=\n"
    [ours] = read_jcamp(None, text=text)
    _, py = _pkg_read(text, capsys)
    # absorbance A = -log10(T), T as a fraction (definition)
    np.testing.assert_allclose(ours.y, -np.log10(py / scale), rtol=1e-6)


# --------------------------------------------------------------------------- tolerance

def test_labels_comments_whitespace_ctrl_z_and_trailing_text():
    text = ("\ufeff  ##title = Sample 7 $$ name of the sample\r\n"
            "##JCAMP-DX= 4.24\r\n##Data_Type= INFRARED SPECTRUM\r\n"
            " ##x units=1/cm\r\n##Y-UNITS=absorbance\r\n##FIRST X=100\r\n##last_x=103\r\n"
            "##N POINTS=4\r\n##X/FACTOR=1\r\n##YFACTOR=0.5\r\n"
            "$$ a whole-line comment\r\n"
            "##XYDATA=(X++(Y..Y))  $$ data follow\r\n"
            "100 2 4 $$ comment inside the data\r\n"
            "102 6 8\r\n##END=\r\n\x1a garbage after the end ##\r\n")
    [rec] = read_jcamp(None, text=text.encode("utf-8"))
    assert rec.sample_id == "Sample 7"
    assert rec.y.tolist() == [1.0, 2.0, 3.0, 4.0]
    assert normalise_label(" X-Units ") == normalise_label("xunits") == "XUNITS"


def test_link_block_with_two_spectra(ir_record):
    other = SpectrumRecord("FUEL-0002", ir_record.x, ir_record.y * 2)
    text = ("##TITLE=two fuels\n##JCAMP-DX=4.24\n##DATA TYPE=LINK\n##BLOCKS=2\n"
            + write_jcamp(ir_record, "DIFDUP") + write_jcamp(other, "AFFN") + "##END=\n")
    first, second = read_jcamp(None, text=text)
    assert [first.sample_id, second.sample_id] == ["FUEL-0001", "FUEL-0002"]
    assert second.source_line > first.source_line > 1
    np.testing.assert_allclose(second.y, ir_record.y * 2, atol=1e-6)


def test_link_block_count_must_match():
    text = ("##TITLE=set\n##JCAMP-DX=4.24\n##DATA TYPE=LINK\n##BLOCKS=3\n"
            + header(2, 1, 2, extra="##XYDATA=(X++(Y..Y))\n1 5 6\n##END=\n") + "##END=\n")
    with pytest.raises(FormatError) as err:
        read_jcamp(None, text=text)
    assert err.value.field == "BLOCKS" and err.value.line == 4


def test_sample_id_from_another_header():
    text = header(2, 1, 2, extra="##$SAMPLE ID=LAB-42\n##XYDATA=(X++(Y..Y))\n1 5 6\n##END=\n")
    [rec] = read_jcamp(None, text=text, sample_id_field="$SAMPLE_ID")
    assert rec.sample_id == "LAB-42"


# --------------------------------------------------------------------------- errors

GOOD = header(4, 100, 103, extra="##XYDATA=(X++(Y..Y))\n100 1 2\n102 3 4\n##END=\n")
# (what is broken, replacement, expected line, expected field); line numbers are
# those of the 15-line GOOD file above
BROKEN = [
    ("NPOINTS", ("##NPOINTS=4", "##NPOINTS=5"), 11, "NPOINTS"),
    ("non-numeric ordinate", ("102 3 4", "102 3 x4"), 13, None),
    ("NaN ordinate", ("102 3 4", "102 3 NaN"), 13, None),
    ("Inf ordinate", ("100 1 2", "100 1 inf"), 12, None),
    ("missing value", ("100 1 2", "100 1 ?"), 12, None),
    ("missing XUNITS", ("##XUNITS=1/CM\n", ""), 1, "XUNITS"),
    ("missing JCAMP-DX", ("##JCAMP-DX=4.24\n", ""), 1, "JCAMPDX"),
    ("missing FIRSTX", ("##FIRSTX=100\n", ""), 1, "FIRSTX"),
    ("non-numeric FIRSTX", ("##FIRSTX=100", "##FIRSTX=abc"), 8, "FIRSTX"),
    ("inconsistent FIRSTX", ("##FIRSTX=100", "##FIRSTX=90"), 8, "FIRSTX"),
    # three data lines that agree with each other but not with LASTX
    ("inconsistent LASTX", [("##LASTX=103", "##LASTX=113"), ("100 1 2", "100 1\n101 2")], 9,
     "LASTX"),
    ("inconsistent DELTAX", ("##NPOINTS=4", "##NPOINTS=4\n##DELTAX=2"), 11, "DELTAX"),
    ("X-check", ("102 3 4", "105 3 4"), 13, None),
    ("unknown YUNITS", ("##YUNITS=ABSORBANCE", "##YUNITS=COUNTS"), 5, "YUNITS"),
    ("unknown XUNITS", ("##XUNITS=1/CM", "##XUNITS=SECONDS"), 4, "XUNITS"),
    ("missing END", ("##END=\n", ""), 1, "END"),
    ("zero transmittance", [("##YUNITS=ABSORBANCE", "##YUNITS=TRANSMITTANCE"),
                            ("100 1 2", "100 0 2")], 12, "YUNITS"),
]


@pytest.mark.parametrize("what, change, line, field", BROKEN, ids=[b[0] for b in BROKEN])
def test_errors_name_file_line_and_field(what, change, line, field):
    text = GOOD
    for old, new in (change if isinstance(change, list) else [change]):
        assert old in text
        text = text.replace(old, new)
    with pytest.raises(FormatError) as err:
        read_jcamp(None, text=text, file_label="lab/run7.jdx")
    assert err.value.file == "lab/run7.jdx" and "lab/run7.jdx" in str(err.value)
    assert err.value.line == line, str(err.value)
    assert err.value.field == field, str(err.value)


def test_good_file_reads():
    [rec] = read_jcamp(None, text=GOOD)
    assert rec.y.tolist() == [1, 2, 3, 4] and rec.source_line == 1


def test_reads_from_a_path(tmp_path, ir_record):
    path = tmp_path / "a.jdx"
    path.write_text(write_jcamp(ir_record))
    [rec] = read_jcamp(path)
    assert rec.source_file == str(path)


def test_writer_refuses_uneven_axis_for_xydata():
    rec = SpectrumRecord("U", [1.0, 2.0, 4.0], [0.1, 0.2, 0.3])
    with pytest.raises(Exception) as err:
        write_jcamp(rec, "AFFN")
    assert "XYPOINTS" in str(err.value)
    [back] = read_jcamp(None, text=write_jcamp(rec, "XYPOINTS"))
    assert back.x.tolist() == [1.0, 2.0, 4.0]


def test_xfactor_yfactor_and_descending_axis_by_hand():
    # spec: actual x = X·XFACTOR, actual y = Y·YFACTOR; each line's X is the
    # abscissa of its first ordinate.  Decoded by hand: x = 4000…3996, y = 0.1…0.5
    text = ("##TITLE=hand\n##JCAMP-DX=4.24\n##XUNITS=1/CM\n##YUNITS=ABSORBANCE\n"
            "##XFACTOR=0.5\n##YFACTOR=0.001\n##FIRSTX=4000\n##LASTX=3996\n##DELTAX=-1\n"
            "##NPOINTS=5\n##XYDATA=(X++(Y..Y))\n8000 100 200 300\n7994 400 500\n##END=\n")
    [rec] = read_jcamp(None, text=text)
    assert rec.x.tolist() == [3996.0, 3997.0, 3998.0, 3999.0, 4000.0]
    np.testing.assert_allclose(rec.y, [0.5, 0.4, 0.3, 0.2, 0.1], rtol=1e-7)


# --------------------------------------------------------------------------- whole-table decoding
# registry.spectra.formats.asdf decodes a whole (X++(Y..Y)) table at once and leaves
# anything unusual to the line decoder (which names the problem). The encodings are those
# of the spec's character tables (McDonald & Wilks 1988); the reference for the decoded
# values is the integers that were encoded.

@pytest.mark.parametrize("form", sorted(HAND_FORMS))
def test_hand_encoded_forms_decode_as_whole_tables(form):
    decoded = decode_table(HAND_FORMS[form], 12)
    if "exponent" in form:  # E+ is an exponent or SQZ E then +: the line decoder decides
        assert decoded is None
        return
    ys, abscissas, starts = decoded
    assert ys.tolist() == HAND_Y
    if form == "DIFDUP two lines":  # the second line starts at the repeated 7th ordinate
        assert (abscissas, starts) == ([450.0, 456.0], [0, 6])
    else:
        assert (abscissas, starts) == ([450.0], [0])


def test_a_written_minus_zero_stays_negative_zero():
    # IEEE 754 keeps the sign of zero, and float("-0") reads it so (Python reference);
    # a DUP copy is "the previous ordinate + 0", which is +0 (IEEE 754 round to nearest).
    ys, _, _ = decode_table(["450 -0 0 -0T"], 4)  # T: DUP count 2
    assert np.signbit(ys).tolist() == [True, False, True, False]
    assert np.signbit(ys).tolist() == [np.signbit(v) for v in (float("-0"), 0.0, -0.0,
                                                               -0.0 + 0.0)]


@st.composite
def _runs(draw):
    """Integers made of runs with a constant step (plateaus and ramps give DUP counts,
    of one or more digits), crossing zero and reaching 15-digit magnitudes."""
    value = draw(st.integers(-10**14, 10**14))
    out = [value]
    for step, length in draw(st.lists(st.tuples(st.integers(-10**6, 10**6) | st.just(0),
                                                st.integers(1, 40)), max_size=12)):
        for _ in range(length):
            value += step
            out.append(value)
    return out


@settings(max_examples=120, deadline=None)
@given(ints=_runs(), form=st.sampled_from(["DIFDUP", "AFFN"]))
def test_whole_table_decoding_returns_the_integers_written(ints, form):
    x = 400.0 + 2.0 * np.arange(len(ints))
    lines = (jcamp_module._difdup_lines if form == "DIFDUP" else jcamp_module._affn_lines)(x, ints)
    ys, abscissas, starts = decode_table(lines, len(ints))
    assert ys.tolist() == ints
    # every line's abscissa is the x of the ordinate it starts at (the X-check rule)
    assert [x[i] for i in starts] == abscissas


@settings(max_examples=150, deadline=None)
@given(data=st.data())
def test_whole_table_and_line_decoding_agree_on_edited_tables(data):
    """Characters of the spec's alphabet put into, or taken out of, the data lines: the
    table decoder either declines or reads exactly what the line decoder reads."""
    rng = np.random.default_rng(data.draw(st.integers(0, 2**32 - 1)))
    x = np.linspace(600.0, 700.0, 41)
    y = np.round(0.5 + 0.4 * np.sin(x / 7), 2).astype(np.float32)
    y[10:16] = y[10]
    lines = write_jcamp(SpectrumRecord("E-1", x, y), data.draw(st.sampled_from(
        ["DIFDUP", "AFFN"])), yfactor=rng.choice([1e-2, 1e-4])).split("\n")
    body = [k for k, line in enumerate(lines) if line and not line.startswith("##")]
    for _ in range(data.draw(st.integers(1, 3))):
        k = data.draw(st.sampled_from(body))
        j = data.draw(st.integers(0, len(lines[k])))
        lines[k] = lines[k][:j] + data.draw(st.sampled_from(
            list("0123456789.+-, ;%@ABCIJKRSTZabcijrs?eE") + [""])) + lines[k][j + 1:]
    text = "\n".join(lines)

    def outcome():
        try:
            return [(r.x.tobytes(), r.y.tobytes()) for r in read_jcamp(None, text=text)]
        except FormatError as exc:
            return (exc.message, exc.line, exc.field)

    whole = outcome()
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(jcamp_module, "decode_table", lambda texts, n: None)
        assert outcome() == whole
