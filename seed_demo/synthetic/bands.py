"""Mid-IR absorption bands of the pure blend components of the synthetic demo.

Everything here is invented data for the demo and the benchmarks. Band
*positions* follow standard group-frequency correlation tables (Socrates,
*Infrared and Raman Characteristic Group Frequencies*, 3rd ed., Wiley 2001;
Colthup, Daly & Wiberley, *Introduction to Infrared and Raman Spectroscopy*,
3rd ed., Academic Press 1990; ranges from memory): CH₃/CH₂ stretches and
bends, aromatic ring and out-of-plane bands, olefin C=C and vinyl/trans wags,
ethanol O–H and C–O, the three ether bands 1203/1085/852, ester C=O and
C–O–C. Comments marked "(tables)" below cite these ranges; the finer positions
(for example the 1,2,4-trisubstituted benzene wags 885–870 and 825–805, the
gem-dimethyl doublets near 1385/1365) are from the same tables, from memory.

Band *heights* are invented. They are absorbances of the neat component per
µm of path length at the band maximum (before the instrument line shape), so a
neat fuel in a 25–100 µm cell stays mostly in the 0–1.5 range. Every pure
component peaks at or below 0.019 µm⁻¹, so even a neat component in a 100 µm
cell stays below 1.9; a blend is a volume-weighted average of its components
(Beer–Lambert with volume fractions), so it cannot exceed its strongest
component. Widths (full width at half maximum, cm⁻¹) are typical of
liquid-phase spectra: 12–20 for C–H stretches, 5–12 for sharp fingerprint
bands, a few hundred for hydrogen-bonded O–H.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: Shapes a band may take; pseudo-Voigt mixes Lorentzian (fraction ``eta``) and Gaussian.
SHAPES = ("gauss", "lorentz", "pvoigt")


@dataclass(frozen=True)
class Band:
    """One absorption band of a pure component.

    Parameters
    ----------
    center : float
        Band maximum in cm⁻¹.
    fwhm : float
        Full width at half maximum in cm⁻¹.
    height : float
        Peak absorbance of the neat component per µm path length.
    shape : {"gauss", "lorentz", "pvoigt"}
        Line shape; every shape has height 1 at ``center`` before scaling.
    eta : float
        Lorentzian fraction of a pseudo-Voigt band (ignored otherwise).
    """

    center: float
    fwhm: float
    height: float
    shape: str = "pvoigt"
    eta: float = 0.5


def default_axis() -> np.ndarray:
    """The demo wavenumber axis: 650–4000 cm⁻¹ every 2 cm⁻¹, ascending float64.

    1,676 points; 4000–650 cm⁻¹ is the usual mid-IR range for fuels (common
    practice).
    """
    return np.linspace(650.0, 4000.0, 1676, dtype=np.float64)


def band_profile(nu: np.ndarray, band: Band) -> np.ndarray:
    """Evaluate one band (peak height ``band.height``) on the wavenumbers ``nu``."""
    u = (nu - band.center) / band.fwhm
    gauss = np.exp(-4.0 * np.log(2.0) * u * u)
    if band.shape == "gauss":
        shape = gauss
    else:
        lorentz = 1.0 / (1.0 + 4.0 * u * u)
        if band.shape == "lorentz":
            shape = lorentz
        else:
            shape = band.eta * lorentz + (1.0 - band.eta) * gauss
    return band.height * shape


def _b(center, fwhm, height, shape="pvoigt", eta=0.5) -> Band:
    return Band(float(center), float(fwhm), float(height), shape, eta)


# Aliphatic C–H stretches (tables): CH₃ asym 2972–2952, CH₃ sym
# 2882–2862, CH₂ asym 2936–2916, CH₂ sym 2863–2843; bends 1475–1450 and the
# CH₃ umbrella 1383–1377; CH₂ rock 726–722 for chains of four or more CH₂.
BAND_LIBRARY: dict[str, tuple[Band, ...]] = {
    # light n-paraffins (C5–C8 straight chains): CH₂ rich, with the chain rock
    "n_paraffins": (
        _b(2962, 18, 0.0120), _b(2927, 20, 0.0160), _b(2873, 14, 0.0065),
        _b(2858, 14, 0.0085), _b(1467, 16, 0.0032), _b(1379, 10, 0.0014),
        _b(724, 10, 0.0016),
    ),
    # n-butane: mostly CH₃; the butane share sets the seasonal vapour pressure
    "n_butane": (
        _b(2964, 18, 0.0165), _b(2934, 18, 0.0075), _b(2876, 14, 0.0085),
        _b(1464, 16, 0.0030), _b(1380, 10, 0.0018), _b(954, 10, 0.0007),
    ),
    # light isoparaffins (isopentane-like): isopropyl doublet 1385/1368 (from memory)
    "isopentane": (
        _b(2961, 18, 0.0170), _b(2931, 20, 0.0090), _b(2875, 14, 0.0088),
        _b(1463, 16, 0.0030), _b(1384, 8, 0.0017), _b(1368, 8, 0.0011),
        _b(1145, 10, 0.0005),
    ),
    # alkylate isoparaffins (isooctane-like): tert-butyl doublet 1395/1366 and
    # skeletal band near 1247 (from memory)
    "isooctane": (
        _b(2955, 18, 0.0178), _b(2906, 20, 0.0072), _b(2870, 14, 0.0090),
        _b(1470, 16, 0.0031), _b(1395, 8, 0.0013), _b(1366, 8, 0.0022),
        _b(1247, 10, 0.0009), _b(1209, 10, 0.0005),
    ),
    # naphthenes (cyclohexane / methylcyclohexane-like): CH₂ scissor ~1450,
    # ring bands ~903 and ~862 (from memory)
    "naphthenes": (
        _b(2962, 16, 0.0040), _b(2926, 18, 0.0180), _b(2853, 14, 0.0120),
        _b(1450, 10, 0.0040), _b(1378, 8, 0.0007), _b(1260, 10, 0.0007),
        _b(903, 8, 0.0011), _b(862, 8, 0.0008),
    ),
    # FCC olefins (1-hexene-like plus internal trans): =C–H stretch ~3080,
    # C=C 1680–1630, vinyl 990 & 910, trans 965 (tables)
    "olefins": (
        _b(3080, 12, 0.0022), _b(2962, 18, 0.0100), _b(2928, 20, 0.0120),
        _b(2860, 14, 0.0060), _b(1642, 10, 0.0028), _b(1462, 16, 0.0025),
        _b(1380, 10, 0.0010), _b(991, 8, 0.0030), _b(965, 8, 0.0022),
        _b(910, 8, 0.0050),
    ),
    # aromatics: C–H 3100–3000, ring 1620–1585 and 1525–1470, out-of-plane
    # 900–690 (tables): toluene ~730 & ~695. The ~695 band here and m-xylene's ~691
    # are Gaussian (an invented choice) so their wings stay off benzene's 674 band:
    # benzene in gasoline is read from that band alone by mid-IR (ASTM D6277, from
    # memory), so the demo's band calibration sees a well-separated band
    "toluene": (
        _b(3063, 12, 0.0020), _b(3030, 14, 0.0035), _b(2921, 16, 0.0040),
        _b(2870, 14, 0.0020), _b(1605, 8, 0.0020), _b(1496, 8, 0.0045),
        _b(1460, 10, 0.0020), _b(1030, 8, 0.0008), _b(729, 8, 0.0150),
        _b(695, 8, 0.0110, "gauss"),
    ),
    # o-xylene 770–735 (tables)
    "o_xylene": (
        _b(3020, 14, 0.0030), _b(2925, 16, 0.0060), _b(2870, 14, 0.0025),
        _b(1606, 8, 0.0010), _b(1495, 8, 0.0045), _b(1466, 10, 0.0025),
        _b(1120, 8, 0.0006), _b(742, 8, 0.0170),
    ),
    # m-xylene ~770 & ~690 (tables)
    "m_xylene": (
        _b(3020, 14, 0.0030), _b(2922, 16, 0.0060), _b(2868, 14, 0.0025),
        _b(1614, 8, 0.0015), _b(1490, 8, 0.0040), _b(1460, 10, 0.0020),
        _b(769, 8, 0.0150), _b(691, 8, 0.0110, "gauss"),
    ),
    # p-xylene ~795 (tables); ring band near 1517 (from memory)
    "p_xylene": (
        _b(3020, 14, 0.0030), _b(2920, 16, 0.0060), _b(2866, 14, 0.0025),
        _b(1517, 8, 0.0050), _b(1450, 10, 0.0015), _b(795, 8, 0.0170),
    ),
    # benzene ~674 sharp (tables); 1479 and 1036 (from memory)
    "benzene": (
        _b(3070, 12, 0.0020), _b(3036, 12, 0.0030), _b(1479, 8, 0.0050),
        _b(1036, 8, 0.0030), _b(674, 5, 0.0185, "gauss"),
    ),
    # ethanol: O–H 3650–3300 broad, C–O 1150–1030 (tables); the 1048 band is the
    # strongest C–O band, 1087 its shoulder, 880 the C–C–O stretch (from memory)
    "ethanol": (
        _b(3340, 260, 0.0080, "gauss"), _b(2973, 16, 0.0080),
        _b(2928, 16, 0.0040), _b(2885, 14, 0.0040), _b(1380, 10, 0.0020),
        _b(1330, 16, 0.0015), _b(1087, 12, 0.0080), _b(1048, 12, 0.0140),
        _b(880, 10, 0.0060),
    ),
    # methyl tert-butyl ether: 1203, 1085, 852 (tables); methoxy C–H ~2830 and the
    # tert-butyl doublet (from memory)
    "mtbe": (
        _b(2980, 16, 0.0100), _b(2950, 16, 0.0060), _b(2830, 12, 0.0040),
        _b(1470, 12, 0.0025), _b(1386, 8, 0.0020), _b(1364, 8, 0.0030),
        _b(1203, 10, 0.0120), _b(1085, 12, 0.0130), _b(852, 8, 0.0050),
    ),
    # NEW blend component of the demo timeline: a heavy (C9) aromatic reformate
    # stream modelled on 1,2,4-trimethylbenzene; its 1,2,4-trisubstituted ring
    # wags 885–870 and 825–805 and ring band ~1505 (correlation tables, from
    # memory) lie where the earlier blends have little absorbance
    "heavy_aromatics": (
        _b(3015, 14, 0.0025), _b(2922, 16, 0.0090), _b(2865, 14, 0.0040),
        _b(1615, 8, 0.0012), _b(1505, 8, 0.0050), _b(1450, 10, 0.0030),
        _b(1380, 8, 0.0020), _b(873, 8, 0.0060), _b(806, 8, 0.0170),
    ),
    # diesel paraffins (n- and iso-, C12–C20): long chains, strong CH₂ and rock
    "diesel_paraffins": (
        _b(2956, 18, 0.0090), _b(2924, 20, 0.0185), _b(2870, 14, 0.0050),
        _b(2854, 14, 0.0120), _b(1466, 16, 0.0035), _b(1378, 10, 0.0015),
        _b(722, 10, 0.0022),
    ),
    # diesel naphthenes (alkylcyclohexanes, decalins)
    "diesel_naphthenes": (
        _b(2958, 16, 0.0050), _b(2923, 18, 0.0160), _b(2852, 14, 0.0100),
        _b(1450, 12, 0.0035), _b(1378, 10, 0.0012), _b(890, 10, 0.0006),
    ),
    # diesel aromatics (alkylbenzenes and alkylnaphthalenes): aromatic C–H,
    # ring 1605/1500, naphthalene-type wags ~810/780/745 (from memory)
    "diesel_aromatics": (
        _b(3050, 14, 0.0030), _b(2958, 16, 0.0060), _b(2925, 16, 0.0120),
        _b(2860, 14, 0.0070), _b(1605, 8, 0.0025), _b(1500, 8, 0.0030),
        _b(1460, 12, 0.0030), _b(810, 10, 0.0050), _b(780, 10, 0.0070),
        _b(745, 10, 0.0050),
    ),
    # fatty acid methyl esters (rapeseed-type, methyl oleate-like): ester C=O
    # 1750–1735 and C–O–C 1290–1180 (tables); cis =C–H ~3005, O–CH₃ bend 1436 and
    # the 1170 C–O band (from memory)
    "fame": (
        _b(3005, 12, 0.0010), _b(2924, 18, 0.0160), _b(2854, 14, 0.0100),
        _b(1742, 12, 0.0150), _b(1462, 14, 0.0020), _b(1436, 10, 0.0025),
        _b(1246, 14, 0.0040), _b(1196, 12, 0.0070), _b(1170, 12, 0.0090),
        _b(722, 10, 0.0008),
    ),
}
