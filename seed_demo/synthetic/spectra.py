"""Beer–Lambert rendering of synthetic fuel spectra through a simulated analyzer.

For blend i with volume fractions c_ik the absorbance is::

    A_i(ν) = (1 + m_i)·L·Σ_k c_ik·ε_k(ν) + b_i + s_i·(ν − ν0) + e_i(ν)

where ε_k is the neat-component absorbance per µm (band library), L the cell
path length in µm, m_i a small multiplicative (path/scatter) term, b_i and s_i
a baseline offset and slope, and e_i white noise. The instrument enters through
ε_k: bands are shifted by the analyzer's wavenumber shift and convolved with a
Gaussian instrument line shape whose FWHM is the analyzer's resolution. Because
that is linear, it is applied once to the pure-component spectra, and a
population is one matrix product (compositions @ pure spectra).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np
import pandas as pd
from scipy.ndimage import gaussian_filter1d

from registry.errors import InputError

from .bands import BAND_LIBRARY, band_profile, default_axis
from .blending import as_volume_fractions

#: Step of the fine grid on which bands are evaluated before the line shape (cm⁻¹).
FINE_STEP = 0.25
#: Margin of the fine grid beyond the axis ends, so the convolution sees the tails.
FINE_MARGIN = 60.0
_FWHM_TO_SIGMA = 1.0 / (2.0 * np.sqrt(2.0 * np.log(2.0)))


@dataclass(frozen=True)
class Analyzer:
    """A simulated FTIR analyzer with a transmission cell.

    Parameters
    ----------
    name : str
        Label of the analyzer in the demo.
    pathlength_um : float
        Cell path length in µm (25–100 µm for neat fuel in transmission; common practice).
    shift_cm : float
        Wavenumber shift of every band, cm⁻¹ (positive = to higher wavenumber).
    resolution_cm : float
        FWHM of the Gaussian instrument line shape, cm⁻¹.
    noise_sd : float
        Standard deviation of the white absorbance noise.
    offset_sd : float
        Standard deviation of the per-spectrum baseline offset.
    slope_sd : float
        Standard deviation of the per-spectrum baseline slope, absorbance per cm⁻¹.
    multiplicative_sd : float
        Standard deviation of the per-spectrum multiplicative (path/scatter) term.
    nu0 : float
        Wavenumber about which the baseline slope pivots, cm⁻¹.
    """

    name: str = "analyzer-1"
    pathlength_um: float = 50.0
    shift_cm: float = 0.0
    resolution_cm: float = 4.0
    noise_sd: float = 2e-4
    offset_sd: float = 5e-3
    slope_sd: float = 1e-6
    multiplicative_sd: float = 3e-3
    nu0: float = 2000.0

    def __post_init__(self):
        for field in ("pathlength_um", "resolution_cm"):
            value = getattr(self, field)
            if not (np.isfinite(value) and value > 0):
                raise InputError(f"{field} must be a positive number, not {value!r}",
                                 field=field)
        for field in ("shift_cm", "nu0"):
            if not np.isfinite(getattr(self, field)):
                raise InputError(f"{field} must be finite", field=field)
        for field in ("noise_sd", "offset_sd", "slope_sd", "multiplicative_sd"):
            value = getattr(self, field)
            if not (np.isfinite(value) and value >= 0):
                raise InputError(f"{field} must be a non-negative number, not {value!r}",
                                 field=field)


#: Two analyzers of the demo that differ slightly (shift, resolution, path).
REFERENCE_ANALYZER = Analyzer("analyzer-1")
SECOND_ANALYZER = Analyzer("analyzer-2", pathlength_um=51.0, shift_cm=0.3, resolution_cm=6.0)


def _check_axis(axis) -> np.ndarray:
    arr = np.asarray(axis, dtype=np.float64) if axis is not None else default_axis()
    if arr.ndim != 1 or arr.size < 2:
        raise InputError("axis must be a 1-D array with at least 2 points", field="axis")
    if not np.isfinite(arr).all():
        raise InputError("axis contains non-finite values", field="axis")
    if not (np.diff(arr) > 0).all():
        raise InputError("axis must be strictly ascending", field="axis")
    return arr


@lru_cache(maxsize=32)
def _pure_cached(names: tuple[str, ...], shift: float, resolution: float,
                 axis_bytes: bytes) -> np.ndarray:
    axis = np.frombuffer(axis_bytes, dtype=np.float64)
    fine = np.arange(axis[0] - FINE_MARGIN, axis[-1] + FINE_MARGIN + FINE_STEP, FINE_STEP)
    # evaluating the bands at (ν − shift) moves every band up by ``shift``
    nu = fine - shift
    sigma_points = resolution * _FWHM_TO_SIGMA / FINE_STEP
    out = np.empty((len(names), axis.size))
    for row, name in enumerate(names):
        profile = np.zeros_like(fine)
        for band in BAND_LIBRARY[name]:
            profile += band_profile(nu, band)
        profile = gaussian_filter1d(profile, sigma_points, mode="nearest", truncate=5.0)
        out[row] = np.interp(axis, fine, profile)
    out.setflags(write=False)
    return out


def pure_component_spectra(components, analyzer: Analyzer | None = None, axis=None
                           ) -> np.ndarray:
    """Noise-free neat-component absorbance per µm, as seen by ``analyzer``.

    Parameters
    ----------
    components : sequence of str
        Names from the band library.
    analyzer : Analyzer, optional
        Supplies the shift and instrument line shape (default: reference analyzer).
    axis : array-like, optional
        Ascending wavenumbers; default :func:`default_axis`.

    Returns
    -------
    ndarray, shape (len(components), len(axis)), read-only
    """
    analyzer = analyzer or REFERENCE_ANALYZER
    names = tuple(str(c) for c in components)
    for name in names:
        if name not in BAND_LIBRARY:
            raise InputError(f"no bands for component {name!r}", field=name)
    arr = _check_axis(axis)
    return _pure_cached(names, float(analyzer.shift_cm), float(analyzer.resolution_cm),
                        arr.tobytes())


def render_spectra(compositions: pd.DataFrame, analyzer: Analyzer | None,
                   rng: np.random.Generator, *, axis=None) -> np.ndarray:
    """Absorbance spectra of blends by Beer–Lambert through ``analyzer``.

    Parameters
    ----------
    compositions : DataFrame
        Volume fractions, one column per component, rows summing to 1.
    analyzer : Analyzer or None
        Instrument and cell; None means :data:`REFERENCE_ANALYZER`.
    rng : numpy.random.Generator
        Source of the baseline, multiplicative and noise terms (drawn in a
        fixed order, so a seeded generator gives identical arrays).
    axis : array-like, optional
        Ascending wavenumbers; default :func:`default_axis`.

    Returns
    -------
    ndarray, shape (n, len(axis)), float64
    """
    analyzer = analyzer or REFERENCE_ANALYZER
    if not isinstance(rng, np.random.Generator):
        raise InputError("rng must be a numpy.random.Generator", field="rng")
    c, names = as_volume_fractions(compositions)
    arr = _check_axis(axis)
    pure = pure_component_spectra(names, analyzer, arr)
    n = c.shape[0]
    mult = 1.0 + analyzer.multiplicative_sd * rng.standard_normal(n)
    offset = analyzer.offset_sd * rng.standard_normal(n)
    slope = analyzer.slope_sd * rng.standard_normal(n)
    spectra = c @ pure
    spectra *= (analyzer.pathlength_um * mult)[:, None]
    spectra += offset[:, None]
    spectra += slope[:, None] * (arr - analyzer.nu0)[None, :]
    if analyzer.noise_sd > 0:
        spectra += analyzer.noise_sd * rng.standard_normal(spectra.shape)
    return spectra
