"""Blending rules against independent computations and the shapes known from practice.

Sources: CRC Handbook of Chemistry and Physics for densities, molar masses, boiling points
and vapour pressures (from memory); the RVP blending index (RVP^1.25, common practice);
ethanol's effect on gasoline vapour pressure — a rise of about 1 psi (6.9 kPa) at E10, a
maximum near 5–10 vol %, E85 at about 40–70 kPa (common practice).
"""

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from registry.errors import InputError
from seed_demo.synthetic import blend_properties
from seed_demo.synthetic.blending import (ETHANOL_SYNERGY, density, molar_fraction,
                                          octane_number, t50, vapour_pressure)
from seed_demo.synthetic.components import COMPONENTS

# handbook values typed here, independent of the component table
# (CRC Handbook of Chemistry and Physics, from memory)
ETHANOL_RHO, ETHANOL_M = 0.789, 46.07
ISOOCTANE_RHO, ISOOCTANE_M = 0.692, 114.23
TOLUENE_RHO, TOLUENE_M = 0.867, 92.14


def mix(**fractions):
    return pd.DataFrame({k: np.atleast_1d(v).astype(float) for k, v in fractions.items()})


def molar_ethanol(v_e, others):
    """x_e from volume fractions: moles per volume = v·ρ/M (ideal mixing)."""
    n_e = v_e * ETHANOL_RHO / ETHANOL_M
    n_rest = sum(v * rho / m for v, rho, m in others)
    return n_e / (n_e + n_rest)


def test_component_table_matches_handbook_values():
    # CRC Handbook (from memory): densities to ±0.003 g/mL, molar masses to ±0.01 g/mol
    for name, rho, m in (("ethanol", ETHANOL_RHO, ETHANOL_M),
                         ("isooctane", ISOOCTANE_RHO, ISOOCTANE_M),
                         ("toluene", TOLUENE_RHO, TOLUENE_M),
                         ("benzene", 0.879, 78.11), ("mtbe", 0.741, 88.15)):
        assert COMPONENTS[name].density == pytest.approx(rho, abs=0.003)
        assert COMPONENTS[name].molar_mass == pytest.approx(m, abs=0.01)


def test_isooctane_is_100_on_both_scales():
    # the octane scale is defined by isooctane = 100 (ASTM D2699 / D2700)
    pure = mix(isooctane=1.0)
    assert octane_number(pure, "RON")[0] == pytest.approx(100.0)
    assert octane_number(pure, "MON")[0] == pytest.approx(100.0)


@pytest.mark.parametrize("v_e", [0.05, 0.10, 0.30, 0.85])
@pytest.mark.parametrize("kind", ["RON", "MON"])
def test_ethanol_blending_follows_the_molar_synergy_formula(kind, v_e):
    # Anderson & Wallington, Energy Fuels 2020: ON = (1−x)·ON_g + x·ON_e + Z·x(1−x),
    # x the molar ethanol fraction. Base: isooctane, ON_g = 100 by definition.
    blend = mix(isooctane=1.0 - v_e, ethanol=v_e)
    x = molar_ethanol(v_e, [(1.0 - v_e, ISOOCTANE_RHO, ISOOCTANE_M)])
    on_e = getattr(COMPONENTS["ethanol"], kind.lower())
    expected = (1 - x) * 100.0 + x * on_e + ETHANOL_SYNERGY[kind] * x * (1 - x)
    assert octane_number(blend, kind)[0] == pytest.approx(expected, abs=0.01)


def test_ethanol_blends_onto_the_octane_of_its_ethanol_free_base():
    # same formula with a two-component base: ON_g is the rating of the base
    # alone (the "gasoline" of Anderson & Wallington 2020), x counts all moles
    base = mix(isooctane=0.7, toluene=0.3)
    on_g = octane_number(base, "RON")[0]
    v_e = 0.10
    e10 = mix(isooctane=0.7 * (1 - v_e), toluene=0.3 * (1 - v_e), ethanol=v_e)
    x = molar_ethanol(v_e, [(0.7 * (1 - v_e), ISOOCTANE_RHO, ISOOCTANE_M),
                            (0.3 * (1 - v_e), TOLUENE_RHO, TOLUENE_M)])
    # ethanol RON ≈ 109 (Anderson & Wallington 2020, from memory)
    expected = (1 - x) * on_g + x * 109.0 + ETHANOL_SYNERGY["RON"] * x * (1 - x)
    assert octane_number(e10, "RON")[0] == pytest.approx(expected, abs=0.02)
    # the molar basis makes 10 vol % ethanol count as ~20 mol %, so E10 gains
    # more than volume-linear blending would give (Anderson & Wallington 2020)
    assert x > 2 * v_e * 0.9
    assert octane_number(e10, "RON")[0] - on_g > v_e * (109.0 - on_g)


@given(st.floats(0.0, 1.0))
@settings(max_examples=40, deadline=None)
def test_molar_fraction_from_volumes(v_e):
    blend = mix(isooctane=1.0 - v_e, ethanol=v_e)
    x = molar_ethanol(v_e, [(1.0 - v_e, ISOOCTANE_RHO, ISOOCTANE_M)])
    assert molar_fraction(blend)[0] == pytest.approx(x, rel=5e-3, abs=1e-12)


def test_density_is_linear_by_volume():
    # density linear by volume (ideal mixing, common practice); handbook densities typed above
    blend = mix(isooctane=0.6, toluene=0.25, ethanol=0.15)
    expected = 0.6 * ISOOCTANE_RHO + 0.25 * TOLUENE_RHO + 0.15 * ETHANOL_RHO
    assert density(blend)[0] == pytest.approx(expected, abs=0.002)


def test_vapour_pressure_averages_rvp_to_the_1_25_and_inverts():
    # blending index (common practice): average RVP^1.25 by volume, then invert;
    # isooctane 11.8 kPa and isopentane 138 kPa (RVP at 37.8 °C, from memory)
    blend = mix(isooctane=0.5, isopentane=0.5)
    expected = (0.5 * 11.8 ** 1.25 + 0.5 * 138.0 ** 1.25) ** (1 / 1.25)
    assert vapour_pressure(blend)[0] == pytest.approx(expected, rel=0.01)
    # a pure component keeps its own RVP (the inversion undoes the index)
    assert vapour_pressure(mix(isopentane=1.0))[0] == pytest.approx(138.0, rel=1e-12)
    # the index is convex, so the blend lies above the volume-average RVP
    assert vapour_pressure(blend)[0] > 0.5 * (11.8 + 138.0)


def _base_of(vp_kpa):
    """Isopentane/isooctane base with the given vapour pressure, by the index rule."""
    a = (vp_kpa ** 1.25 - 11.8 ** 1.25) / (138.0 ** 1.25 - 11.8 ** 1.25)
    return {"isopentane": a, "isooctane": 1.0 - a}


def _splash(base, v_e):
    """Ethanol splash-blended into ``base`` at volume fractions ``v_e``."""
    v_e = np.asarray(v_e, dtype=float)
    return mix(ethanol=v_e, **{k: f * (1.0 - v_e) for k, f in base.items()})


ETHANOL_GRID = np.round(np.arange(0.0, 1.0001, 0.0025), 4)


@pytest.mark.parametrize("base_kpa", [50.0, 60.0, 70.0])
def test_ethanol_vapour_pressure_peaks_near_5_to_10_percent(base_kpa):
    # common practice: ethanol raises a gasoline's vapour pressure most at 5–10 vol %,
    # by about 1 psi (6.9 kPa) at E10, and less again as more ethanol is added
    vp = vapour_pressure(_splash(_base_of(base_kpa), ETHANOL_GRID))
    assert vp[0] == pytest.approx(base_kpa, rel=1e-9)
    peak = ETHANOL_GRID[np.argmax(vp)]
    assert 0.05 <= peak <= 0.10, peak
    e10 = vp[ETHANOL_GRID == 0.10][0]
    assert 3.0 < e10 - base_kpa < 10.0
    # one maximum: from the peak to neat ethanol the vapour pressure only falls
    assert (np.diff(vp[np.argmax(vp):]) < 0).all()


@pytest.mark.parametrize("base_kpa", [60.0, 85.0])
def test_e85_and_neat_ethanol_vapour_pressures(base_kpa):
    vp = vapour_pressure(_splash(_base_of(base_kpa), [0.85, 1.0]))
    # E85 about 40–70 kPa (common practice), from a summer and a winter base
    assert 40.0 <= vp[0] <= 70.0
    # neat ethanol: its own vapour pressure at 37.8 °C, 15.9 kPa (CRC Handbook, from memory)
    assert vp[1] == pytest.approx(15.9, abs=0.05)


def test_t50_of_a_pure_compound_is_its_boiling_point():
    # toluene boils at 110.6 °C (CRC Handbook, from memory)
    assert t50(mix(toluene=1.0))[0] == pytest.approx(110.6)


def test_t50_reads_the_half_distilled_point_of_the_idealised_curve():
    # 70 % light n-paraffins distilling evenly from n-pentane (36.1 °C) to n-octane
    # (125.7 °C) and 30 % toluene at 110.6 °C (boiling points: CRC Handbook, from
    # memory): half the volume is over when 0.7·(T − 36.1)/89.6 = 0.5, below 110.6 °C
    expected = 36.1 + 0.5 / 0.7 * (125.7 - 36.1)
    assert t50(mix(n_paraffins=0.7, toluene=0.3))[0] == pytest.approx(expected, abs=1e-9)
    # 40 % of the lump is only 0.4·(110.6 − 36.1)/89.6 < 0.5 when toluene boils: T50 is
    # then toluene's boiling point, where its volume carries the curve past one half
    assert t50(mix(n_paraffins=0.4, toluene=0.6))[0] == pytest.approx(110.6)


def test_ethanol_lowers_t50_and_heavy_aromatics_raise_it():
    # ethanol distils early with the hydrocarbons as azeotropes, so E10 has a lower T50
    # than its base (hence ASTM D4814's lower T50 minimum for ethanol blends, from
    # memory); a C9 aromatic stream boils near 160–176 °C and raises T50
    base = {"isopentane": 0.15, "n_paraffins": 0.25, "naphthenes": 0.2, "isooctane": 0.15,
            "toluene": 0.15, "o_xylene": 0.1}
    plain = t50(mix(**base))[0]
    assert t50(_splash(base, [0.10]))[0] < plain - 2.0
    heavy = {k: f * 0.88 for k, f in base.items()} | {"heavy_aromatics": 0.12}
    assert t50(mix(**heavy))[0] > plain + 2.0


def test_cetane_is_linear_by_volume_for_diesel():
    # cetane near-linear by volume without ignition improvers (from memory)
    fractions = dict(diesel_paraffins=0.5, diesel_naphthenes=0.25, diesel_aromatics=0.2, fame=0.05)
    props = blend_properties(mix(**fractions), "diesel")
    expected = sum(v * COMPONENTS[k].cetane for k, v in fractions.items())
    assert props["CN"].iloc[0] == pytest.approx(expected)
    assert props["FAME"].iloc[0] == pytest.approx(5.0)
    assert props["AROMATICS"].iloc[0] == pytest.approx(20.0)


def test_blending_refuses_components_of_the_other_family():
    with pytest.raises(InputError) as err:
        blend_properties(mix(isooctane=0.5, fame=0.5), "gasoline")
    assert err.value.field == "fame"
    with pytest.raises(InputError) as err:
        blend_properties(mix(isooctane=1.0), "jet")
    assert err.value.field == "family"
    with pytest.raises(InputError):
        octane_number(mix(isooctane=1.0), "AKI")
