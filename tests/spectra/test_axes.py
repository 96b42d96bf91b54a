"""Axes, unit conversion, resampling, transmittance, content hashes.

References: unit definitions (1 cm = 10⁴ µm = 10⁷ nm, so ν̃/cm⁻¹ = 10⁴/(λ/µm));
absorbance A = −log10 T (Beer–Lambert, IUPAC Gold Book "absorbance");
scipy's CubicSpline and numpy.interp as reference interpolators; Python's
struct module for IEEE-754 little-endian byte layouts.
"""

import hashlib
import struct

import numpy as np
import pytest
from scipy.interpolate import CubicSpline

from registry.errors import InputError
from registry.spectra.axes import (axis_sha256, canonical_x_unit, convert_axis_to_wavenumber,
                                   normalise_ascending, resample, same_axis,
                                   transmittance_to_absorbance)
from registry.spectra.record import SpectrumRecord, content_sha256, content_sha256_rows


def test_descending_axis_is_flipped_with_the_spectra():
    x = np.array([4000.0, 3000.0, 2000.0])
    Y = np.array([[1, 2, 3], [4, 5, 6]], dtype=np.float32)
    ax, Yo = normalise_ascending(x, Y)
    assert ax.tolist() == [2000, 3000, 4000]
    assert Yo.tolist() == [[3, 2, 1], [6, 5, 4]] and Yo.dtype == np.float32
    assert Yo.flags.c_contiguous


@pytest.mark.parametrize("x, index", [([1, 2, 2, 3], 2), ([1, 2, 3, 2.5], 3), ([5, 4, 6], 2),
                                      ([1, np.nan, 3], 1)])
def test_bad_axes_name_the_index(x, index):
    with pytest.raises(InputError) as err:
        normalise_ascending(x, np.zeros(len(x)), file="f.csv", line=1)
    assert f"index {index}" in str(err.value) and "f.csv" in str(err.value)


def test_unit_conversion():
    # 2.5 µm = 4000 cm⁻¹, 10 µm = 1000 cm⁻¹, 1000 nm = 10000 cm⁻¹ (unit definitions)
    np.testing.assert_allclose(convert_axis_to_wavenumber([2.5, 10.0], "MICROMETERS"),
                               [4000.0, 1000.0])
    np.testing.assert_allclose(convert_axis_to_wavenumber([1000.0], "nm"), [10000.0])
    assert canonical_x_unit("cm-1") == "1/CM"
    with pytest.raises(InputError):
        convert_axis_to_wavenumber([0.0, 1.0], "MICROMETERS")
    with pytest.raises(InputError):
        canonical_x_unit("hertz")


def test_axis_hash_is_sha256_of_unit_nul_and_float64_le():
    x = [650.0, 652.0, 654.5]
    expected = hashlib.sha256(b"1/CM\x00" + struct.pack("<3d", *x)).hexdigest()
    assert axis_sha256(np.array(x, dtype=">f8"), "1/cm") == expected
    assert axis_sha256(x, "NANOMETERS") != expected


def test_content_hash_layout():
    x = [1000.0, 1001.0]
    y = [0.25, -1.5]
    expected = hashlib.sha256(struct.pack("<2d", *x) + struct.pack("<2f", *y)).hexdigest()
    assert content_sha256(np.array(x), np.array(y, dtype=">f4")) == expected
    assert SpectrumRecord("A", x, y).content_sha256() == expected
    y2 = np.array(y, dtype=np.float32)
    y2[0] = np.nextafter(y2[0], np.float32(1))  # one float32 ulp changes the digest
    assert content_sha256(x, y2) != expected
    # Many rows on one axis at once (the axis hashed once): the same layout, row by row.
    rows = np.array([y, y2], dtype=">f4")
    assert content_sha256_rows(np.array(x), rows) == [
        expected, hashlib.sha256(struct.pack("<2d", *x) + struct.pack("<2f", *y2)).hexdigest()]
    with pytest.raises(InputError):
        content_sha256_rows(x, np.zeros((2, 3), dtype=np.float32))


def test_same_axis():
    a = np.linspace(400, 4000, 10)
    assert same_axis(a, a * (1 + 1e-9))
    assert not same_axis(a, a * (1 + 1e-5))
    assert not same_axis(a, a[:-1])


def test_linear_resample_matches_numpy_interp():
    rng = np.random.default_rng(3)
    src = np.linspace(4000, 650, 200)  # descending source
    Y = rng.normal(size=(5, 200))
    tgt = np.sort(rng.uniform(650, 4000, 50))
    out = resample(Y, src, tgt, kind="linear")
    ref = np.stack([np.interp(tgt, src[::-1], row[::-1]) for row in Y])
    np.testing.assert_allclose(out, ref, rtol=1e-12, atol=1e-12)


def test_cubic_resample_matches_scipy_not_a_knot_and_is_exact_for_cubics():
    src = np.linspace(0.0, 10.0, 30)
    tgt = np.linspace(0.5, 9.5, 17)
    poly = 0.3 * src ** 3 - src ** 2 + 2
    out = resample(poly, src, tgt, kind="cubic")
    # a not-a-knot cubic spline reproduces any cubic polynomial (de Boor 1978)
    np.testing.assert_allclose(out, 0.3 * tgt ** 3 - tgt ** 2 + 2, rtol=1e-10)
    wiggly = np.sin(src) * np.exp(-src / 5)
    np.testing.assert_allclose(resample(wiggly, src, tgt, kind="cubic"),
                               CubicSpline(src, wiggly, bc_type="not-a-knot")(tgt), rtol=1e-10)
    assert resample(wiggly.astype(np.float32), src, tgt).dtype == np.float32


def test_resample_refuses_extrapolation():
    with pytest.raises(InputError) as err:
        resample(np.zeros(3), [1.0, 2.0, 3.0], [0.5, 2.0])
    assert err.value.field == "target_axis" and "index 0" in str(err.value)
    with pytest.raises(InputError):
        resample(np.zeros(3), [1.0, 2.0, 3.0], [2.0], kind="quintic")


def test_transmittance_to_absorbance():
    # A = -log10 T: T = 10 % → A = 1, T = 1 % → A = 2, T = 100 % → A = 0
    np.testing.assert_allclose(transmittance_to_absorbance([0.1, 0.01, 1.0]), [1, 2, 0],
                               atol=1e-15)
    np.testing.assert_allclose(transmittance_to_absorbance([10.0, 1.0, 100.0]), [1, 2, 0],
                               atol=1e-15)  # max > 1.5 → percent
    np.testing.assert_allclose(transmittance_to_absorbance([1.0], percent=True), [2.0])
    with pytest.raises(InputError) as err:
        transmittance_to_absorbance([0.5, 0.0, 0.2])
    assert "index 1" in str(err.value)


def test_record_to_wavenumber_reorders():
    rec = SpectrumRecord("A", [2.5, 5.0, 10.0], [1, 2, 3], x_unit="um")
    wn = rec.to_wavenumber()
    assert wn.x.tolist() == [1000.0, 2000.0, 4000.0] and wn.y.tolist() == [3, 2, 1]
    assert wn.x_unit == "1/CM" and rec.x_unit == "MICROMETERS"
    with pytest.raises(InputError):
        SpectrumRecord("B", [1.0, 2.0], [1.0])
