"""Reference-method noise: σ = r/2.77 within a lab, R/2.77 between labs.

r and R are 95 % limits on the difference of two results, r = 1.96·√2·σ_r ≈ 2.77·σ_r
(ISO 5725-6; ASTM E177). The generator reads them from the registry's method catalog;
the figures typed below are the methods' precision statements as recalled (from memory).
"""

import math

import numpy as np
import pytest

from registry import catalog
from registry.errors import InputError
from seed_demo.synthetic import PROPERTY_CODES, reference_noise, reference_sigma

FACTOR = 1.96 * math.sqrt(2.0)  # ISO 5725-6, ASTM E177


@pytest.mark.parametrize("code, value, r, R", [
    ("RON", 95.0, 0.2, 0.7),         # ASTM D2699 at RON 90-100 (from memory)
    ("MON", 85.0, 0.2, 0.9),         # ASTM D2700 at MON 80-90 (from memory)
    ("DENSITY", 0.75, 0.0002, 0.0005),  # ISO 12185: 0.2 and 0.5 kg/m³ (from memory)
    ("VP", 60.0, 0.5, 2.75),         # ASTM D5191 (from memory)
])
def test_noise_has_the_method_standard_deviation(code, value, r, R):
    rng = np.random.default_rng(11)
    values = np.full(40_000, value)
    within = reference_noise(code, values, rng) - values
    between = reference_noise(code, values, rng, between_labs=True) - values
    # 40,000 draws pin σ to ~1 %
    assert within.std() == pytest.approx(r / FACTOR, rel=0.03)
    assert between.std() == pytest.approx(R / FACTOR, rel=0.03)
    assert abs(within.mean()) < 5 * r / FACTOR / np.sqrt(values.size)


def test_cetane_precision_follows_the_d613_table():
    # ASTM D613 precision table (from memory): r and R at CN 40, 44, 48, 52, 56
    cn = np.array([40.0, 44.0, 48.0, 52.0, 56.0])
    np.testing.assert_allclose(reference_sigma("CN", cn, between_labs=True) * FACTOR,
                               [2.8, 3.3, 3.8, 4.3, 4.8], atol=1e-9)
    np.testing.assert_allclose(reference_sigma("CN", cn) * FACTOR, [0.8, 0.9, 0.9, 0.9, 1.0],
                               atol=0.05)


@pytest.mark.parametrize("code", sorted({c for codes in PROPERTY_CODES.values() for c in codes}))
def test_generator_draws_from_the_registry_catalog(code):
    # one table: the synthetic reference results carry the precision the registry will
    # judge models against, for every property the generator produces
    rows = [m for m in catalog.METHODS if m["property"] == code]
    assert len(rows) == 1, f"{code} needs exactly one primary method in the catalog"
    limits = next(p for p in catalog.PROPERTIES if p["code"] == code)
    levels = np.linspace(limits["lower_limit"], limits["upper_limit"], 7)
    for between, key in ((False, "repeatability"), (True, "reproducibility")):
        expected = [max(catalog.precision_at(rows[0][key], v), 0.0) for v in levels]
        np.testing.assert_allclose(reference_sigma(code, levels, between) * FACTOR, expected,
                                   rtol=1e-12)


def test_noise_is_reproducible_for_a_seed_and_keeps_the_shape():
    values = np.linspace(88.0, 100.0, 12).reshape(3, 4)
    a = reference_noise("RON", values, np.random.default_rng(3))
    b = reference_noise("RON", values, np.random.default_rng(3))
    assert a.shape == values.shape and a.dtype == np.float64
    assert a.tobytes() == b.tobytes()
    assert not np.array_equal(a, values)


def test_unknown_property_and_bad_values_are_refused():
    rng = np.random.default_rng(0)
    with pytest.raises(InputError) as err:
        reference_noise("OCTANE", [95.0], rng)
    assert err.value.field == "property_code"
    with pytest.raises(InputError) as err:
        reference_noise("RON", [95.0, np.nan], rng)
    assert err.value.field == "RON"
