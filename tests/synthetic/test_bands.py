"""Band positions of the pure-component spectra.

Expected ranges are group frequencies from standard correlation tables (Socrates,
*Infrared and Raman Characteristic Group Frequencies*, 3rd ed., Wiley 2001; from
memory); "~X" positions are taken as X ± 4 cm⁻¹ (one resolution element at 4 cm⁻¹,
common practice). Finer positions from the same tables are marked "from memory".
"""

import pytest
from scipy.signal import find_peaks

from seed_demo.synthetic import (BAND_LIBRARY, REFERENCE_ANALYZER, default_axis,
                                 pure_component_spectra)

from ._peaks import strongest_peak

AXIS = default_axis()


def spectrum(name):
    return pure_component_spectra([name], REFERENCE_ANALYZER, AXIS)[0]


# (component, search window, expected range) — every expected range is the
# correlation-table group frequency unless the comment says otherwise
CASES = [
    ("benzene", (650, 720), (670, 678)),           # benzene ~674 sharp
    ("toluene", (715, 760), (726, 734)),           # toluene ~730
    ("toluene", (680, 712), (691, 699)),           # toluene ~695
    ("o_xylene", (700, 820), (735, 770)),          # o-xylene 770–735
    ("m_xylene", (750, 800), (766, 774)),          # m-xylene ~770
    ("m_xylene", (670, 720), (686, 694)),          # m-xylene ~690
    ("p_xylene", (700, 900), (791, 799)),          # p-xylene ~795
    ("toluene", (3000, 3120), (3000, 3100)),       # aromatic C–H 3100–3000
    ("benzene", (3000, 3120), (3000, 3100)),
    ("toluene", (1560, 1640), (1585, 1620)),       # aromatic ring 1620–1585
    ("toluene", (1470, 1540), (1470, 1525)),       # aromatic ring 1525–1470
    ("ethanol", (1000, 1200), (1030, 1150)),       # ethanol C–O 1150–1030
    ("ethanol", (3100, 3800), (3300, 3650)),       # ethanol O–H 3650–3300 broad
    ("mtbe", (1190, 1215), (1200, 1206)),          # MTBE 1203
    ("mtbe", (1070, 1100), (1082, 1088)),          # MTBE 1085
    ("mtbe", (840, 865), (849, 855)),              # MTBE 852
    ("fame", (1650, 1850), (1735, 1750)),          # ester C=O 1750–1735
    ("olefins", (1600, 1700), (1630, 1680)),       # olefin C=C 1680–1630
    ("olefins", (980, 1000), (986, 994)),          # vinyl 990
    ("olefins", (900, 920), (906, 914)),           # vinyl 910
    ("olefins", (955, 975), (961, 969)),           # trans 965
    ("isooctane", (2940, 2990), (2952, 2972)),     # CH₃ asym stretch 2972–2952
    ("isooctane", (2850, 2890), (2862, 2882)),     # CH₃ sym stretch 2882–2862
    ("naphthenes", (2900, 2945), (2916, 2936)),    # CH₂ asym stretch 2936–2916
    ("naphthenes", (2830, 2870), (2843, 2863)),    # CH₂ sym stretch 2863–2843
    ("n_paraffins", (1440, 1490), (1450, 1475)),   # CH bend 1475–1450
    ("n_paraffins", (1370, 1390), (1377, 1383)),   # CH₃ umbrella 1383–1377
    ("n_paraffins", (700, 760), (722, 726)),       # CH₂ rock 726–722
    ("diesel_paraffins", (700, 760), (722, 726)),  # CH₂ rock 726–722
    # 1,2,4-trisubstituted benzene wags 885–870 and 825–805 (correlation tables, from memory)
    ("heavy_aromatics", (860, 895), (870, 885)),
    ("heavy_aromatics", (795, 830), (805, 825)),
]


@pytest.mark.parametrize("name, window, expected", CASES,
                         ids=[f"{c[0]}-{c[2][0]}" for c in CASES])
def test_band_maximum_inside_correlation_table_range(name, window, expected):
    position = strongest_peak(AXIS, spectrum(name), *window)
    assert expected[0] <= position <= expected[1], (name, position)


def test_fame_has_a_prominent_c_o_c_band_in_range():
    # FAME C–O–C 1290–1180 (correlation tables): at least one band there is
    # strong (≥ 30 % of the ester C=O band)
    y = spectrum("fame")
    idx, _ = find_peaks(y)
    inside = idx[(AXIS[idx] >= 1180) & (AXIS[idx] <= 1290)]
    carbonyl = y[(AXIS > 1700) & (AXIS < 1780)].max()
    assert inside.size and y[inside].max() >= 0.3 * carbonyl


def test_ethanol_c_o_band_is_where_hydrocarbons_are_quiet():
    # C–O 1150–1030 (correlation tables) is the best band for ethanol in gasoline,
    # i.e. ethanol absorbs there far more than the main hydrocarbon streams
    window = (AXIS >= 1030) & (AXIS <= 1150)
    ethanol = spectrum("ethanol")[window].max()
    for name in ("isooctane", "n_paraffins", "naphthenes", "olefins", "toluene"):
        assert spectrum(name)[window].max() < 0.25 * ethanol, name


def test_every_component_stays_below_the_linear_range_limit():
    # neat component in the thickest usual cell (100 µm; common practice) stays
    # below absorbance 2, where Beer–Lambert stays linear (common practice)
    pure = pure_component_spectra(list(BAND_LIBRARY), REFERENCE_ANALYZER, AXIS)
    assert (pure * 100.0).max() < 2.0
    assert pure.min() >= 0.0
