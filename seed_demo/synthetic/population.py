"""Populations of invented gasoline and diesel blends with spectra and properties.

Recipes draw each component's share uniformly from a grade/season range, then
normalise the hydrocarbon part to what the oxygenates (and the new component)
leave. The ranges are invented so the properties land in realistic market
ranges (RON 88–101, MON 80–90, density 0.72–0.78 g/mL, VP 45–95 kPa for
gasoline; density 0.82–0.85 g/mL and CN 45–56 for diesel).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from registry.errors import InputError

from .bands import default_axis
from .blending import blend_properties
from .components import FAMILY_COMPONENTS, NEW_COMPONENT
from .spectra import Analyzer, REFERENCE_ANALYZER, _check_axis, render_spectra

GASOLINE_GRADES = ("regular-E0", "regular-E10", "premium-E0", "premium-E10")
DIESEL_GRADES = ("B0", "B7")
SEASONS = ("summer", "winter")

# hydrocarbon share ranges (before normalisation) by octane level
_HYDROCARBONS = {
    "regular": {
        "n_paraffins": (0.05, 0.075), "isooctane": (0.09, 0.13), "naphthenes": (0.13, 0.18),
        "olefins": (0.05, 0.08), "toluene": (0.07, 0.11), "o_xylene": (0.025, 0.045),
        "m_xylene": (0.03, 0.05), "p_xylene": (0.015, 0.03), "benzene": (0.004, 0.010),
    },
    "premium": {
        "n_paraffins": (0.03, 0.06), "isooctane": (0.11, 0.16), "naphthenes": (0.10, 0.14),
        "olefins": (0.05, 0.10), "toluene": (0.09, 0.13), "o_xylene": (0.02, 0.04),
        "m_xylene": (0.03, 0.05), "p_xylene": (0.02, 0.04), "benzene": (0.003, 0.008),
    },
}
# light ends set the vapour pressure: more butane in winter
_LIGHT_ENDS = {
    "summer": {"n_butane": (0.025, 0.04), "isopentane": (0.06, 0.08)},
    "winter": {"n_butane": (0.06, 0.09), "isopentane": (0.06, 0.08)},
}
# oxygenate volume fractions by ethanol grade and octane level
_ETHANOL = {"E0": (0.0, 0.0), "E10": (0.08, 0.10)}
_MTBE = {("regular", "E0"): (0.0, 0.0), ("premium", "E0"): (0.0, 0.10),
         ("regular", "E10"): (0.0, 0.0), ("premium", "E10"): (0.0, 0.0)}

_DIESEL_BASE = {"diesel_paraffins": (0.45, 0.62), "diesel_naphthenes": (0.18, 0.30),
                "diesel_aromatics": (0.16, 0.28)}
_FAME = {"B0": (0.0, 0.0), "B7": (0.02, 0.07)}


@dataclass
class Population:
    """A generated population of blends.

    Attributes
    ----------
    axis : ndarray (p,)
        Ascending wavenumbers, cm⁻¹, float64.
    spectra : ndarray (n, p)
        Absorbance, float64.
    composition : DataFrame (n, k)
        Volume fractions, one column per family component.
    properties : DataFrame (n, m)
        True (noise-free) property values, columns from ``PROPERTY_CODES``.
    grade : ndarray (n,) of str
        Grade code of each row (``GASOLINE_GRADES`` or ``DIESEL_GRADES``).
    season : ndarray (n,) of str
        ``summer``/``winter`` for gasoline, ``""`` for diesel.
    family : str
    analyzer : Analyzer
    seed : int
    """

    axis: np.ndarray
    spectra: np.ndarray
    composition: pd.DataFrame
    properties: pd.DataFrame
    grade: np.ndarray
    season: np.ndarray
    family: str
    analyzer: Analyzer
    seed: int


def _choose(value, allowed, field, expand=None) -> tuple[str, ...]:
    if value is None:
        return tuple(allowed)
    if expand and value in expand:
        return expand[value]
    if value not in allowed:
        raise InputError(f"{field} must be one of {', '.join(allowed)}"
                         + (f" or {', '.join(expand)}" if expand else "")
                         + f", not {value!r}", field=field)
    return (value,)


def _uniform(rng, lo_hi, n) -> np.ndarray:
    lo, hi = lo_hi
    return rng.uniform(lo, hi, n)


def _gasoline(n, grades, seasons, share, rng):
    names = FAMILY_COMPONENTS["gasoline"]
    grade = rng.choice(np.array(grades), n)
    season = rng.choice(np.array(seasons), n)
    comp = pd.DataFrame(0.0, index=range(n), columns=list(names))
    for g in grades:
        octane, ethanol_grade = g.split("-")
        for s in seasons:
            rows = np.flatnonzero((grade == g) & (season == s))
            m = rows.size
            if m == 0:
                continue
            ranges = {**_HYDROCARBONS[octane], **_LIGHT_ENDS[s]}
            hc = pd.DataFrame({c: _uniform(rng, r, m) for c, r in ranges.items()})
            ethanol = _uniform(rng, _ETHANOL[ethanol_grade], m)
            mtbe = _uniform(rng, _MTBE[(octane, ethanol_grade)], m)
            # the hydrocarbons fill what the oxygenates and the new component leave
            room = (1.0 - share) - ethanol - mtbe
            hc = hc.mul(room / hc.sum(axis=1).to_numpy(), axis=0)
            for c in hc.columns:
                comp.loc[rows, c] = hc[c].to_numpy()
            comp.loc[rows, "ethanol"] = ethanol
            comp.loc[rows, "mtbe"] = mtbe
    comp[NEW_COMPONENT] = share
    return comp, grade, season


def _diesel(n, grades, rng):
    names = FAMILY_COMPONENTS["diesel"]
    grade = rng.choice(np.array(grades), n)
    comp = pd.DataFrame(0.0, index=range(n), columns=list(names))
    for g in grades:
        rows = np.flatnonzero(grade == g)
        m = rows.size
        if m == 0:
            continue
        base = pd.DataFrame({c: _uniform(rng, r, m) for c, r in _DIESEL_BASE.items()})
        fame = _uniform(rng, _FAME[g], m)
        base = base.mul((1.0 - fame) / base.sum(axis=1).to_numpy(), axis=0)
        for c in base.columns:
            comp.loc[rows, c] = base[c].to_numpy()
        comp.loc[rows, "fame"] = fame
    return comp, grade, np.full(n, "", dtype="<U6")


def generate_population(n: int, *, family: str = "gasoline", grade: str | None = None,
                        season: str | None = None, seed: int = 0,
                        analyzer: Analyzer | None = None, new_component_share: float = 0.0,
                        axis=None) -> Population:
    """Generate ``n`` invented blends with spectra and true properties.

    Parameters
    ----------
    n : int
        Number of blends (≥ 1).
    family : {"gasoline", "diesel"}
    grade : str, optional
        Gasoline: one of ``GASOLINE_GRADES`` or ``"regular"``/``"premium"``
        (both ethanol variants); diesel: ``"B0"`` or ``"B7"``. None mixes all
        grades of the family uniformly.
    season : {"summer", "winter"}, optional
        Gasoline only (sets the butane/isopentane share); None mixes both.
    seed : int
        Seed of the ``numpy.random.Generator``; equal seeds give identical
        arrays.
    analyzer : Analyzer, optional
        Default :data:`REFERENCE_ANALYZER`.
    new_component_share : float
        Volume fraction of the new blend component (heavy C9 aromatics) in every
        row, 0 ≤ share < 0.5; gasoline only.
    axis : array-like, optional
        Ascending wavenumbers; default :func:`default_axis`.
    """
    if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or n < 1:
        raise InputError(f"n must be a positive integer, not {n!r}", field="n")
    if family not in FAMILY_COMPONENTS:
        raise InputError(f"family must be 'gasoline' or 'diesel', not {family!r}",
                         field="family")
    share = float(new_component_share)
    if not (np.isfinite(share) and 0.0 <= share < 0.5):
        raise InputError(f"new_component_share must be in [0, 0.5), not {new_component_share!r}",
                         field="new_component_share")
    analyzer = analyzer or REFERENCE_ANALYZER
    arr = default_axis() if axis is None else _check_axis(axis)
    rng = np.random.default_rng(seed)
    if family == "gasoline":
        grades = _choose(grade, GASOLINE_GRADES, "grade",
                         {"regular": ("regular-E0", "regular-E10"),
                          "premium": ("premium-E0", "premium-E10")})
        seasons = _choose(season, SEASONS, "season")
        comp, grade_rows, season_rows = _gasoline(int(n), grades, seasons, share, rng)
    else:
        if season is not None:
            raise InputError("season applies to gasoline only", field="season")
        if share > 0:
            raise InputError("the new blend component is a gasoline stream",
                             field="new_component_share")
        grades = _choose(grade, DIESEL_GRADES, "grade")
        comp, grade_rows, season_rows = _diesel(int(n), grades, rng)
    properties = blend_properties(comp, family)
    spectra = render_spectra(comp, analyzer, rng, axis=arr)
    return Population(axis=arr, spectra=spectra, composition=comp, properties=properties,
                      grade=np.asarray(grade_rows, dtype=str),
                      season=np.asarray(season_rows, dtype=str), family=family,
                      analyzer=analyzer, seed=seed)
