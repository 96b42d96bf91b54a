"""Blending rules that turn volume fractions into fuel properties (demo data).

* octane: a volume-linear base plus sensitivity, olefin and aromatic
  interaction corrections in the form of the interaction method of Healy,
  Maassen & Peterson ("A new approach to blending octanes", API Division of
  Refining, 1959; form from memory, coefficients invented for the demo so the
  corrections stay within a few octane numbers), then ethanol blended on a
  *molar* basis with a synergy term (Anderson & Wallington, Energy Fuels 2020)::

      ON = (1 − x)·ON_g + x·ON_e + Z·x·(1 − x)

  with x the molar ethanol fraction of the whole blend, ON_g the octane of the
  ethanol-free remainder and ON_e the octane of ethanol;
* density: linear by volume (ideal mixing; common practice);
* vapour pressure of the ethanol-free remainder: volume average of RVP^1.25,
  then inverted (blending-index method, common practice); ethanol then adds
  the non-ideal shape of :func:`vapour_pressure`;
* cetane number: linear by volume (near-linear without ignition improvers,
  from memory);
* T50: the temperature at which half the volume has distilled, each pure
  compound distilling at its boiling point and each lump over the boiling
  range of the refinery cut it stands for (:func:`t50`; an idealised
  distillation, invented for the demo).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from registry.errors import InputError

from .components import COMPONENTS, FAMILY_COMPONENTS

#: RVP blending-index exponent (common practice; the index method of refinery blending).
RVP_EXPONENT = 1.25

#: Ethanol's vapour-pressure shape (invented for the demo, see :func:`vapour_pressure`):
#: how fast ethanol's own share saturates, and how strongly an ethanol-rich liquid
#: drives the hydrocarbons out. Chosen so that a 60 kPa base gains about 6–7 kPa as E10
#: (the "1 psi" rise of common practice), peaks near 6 vol % ethanol, and gives E85 of
#: about 45 kPa (E85 40–70 kPa, common practice).
ETHANOL_VP_SATURATION = 30.0
ETHANOL_VP_HYDROCARBON_LIFT = 3.6

#: Ethanol synergy Z for RON and MON. Invented for the demo; the sign follows
#: Anderson & Wallington (Energy Fuels 2020), who found Z > 0 most often.
ETHANOL_SYNERGY = {"RON": 4.0, "MON": 1.0}

#: interaction-method interaction coefficients (form after Healy et al. 1959, from
#: memory; values invented for the demo): sensitivity, olefin², aromatic².
OCTANE_INTERACTIONS = {
    "RON": (0.030, 0.00050, -0.00060),
    "MON": (0.040, 0.00040, -0.00200),
}

#: Property codes per fuel family, in column order.
PROPERTY_CODES = {
    "gasoline": ("RON", "MON", "DENSITY", "VP", "T50", "AROMATICS", "BENZENE", "ETHANOL",
                 "MTBE"),
    "diesel": ("CN", "DENSITY", "T50", "AROMATICS", "FAME"),
}

#: Units of each property code.
PROPERTY_UNITS = {
    "RON": "octane number", "MON": "octane number", "CN": "cetane number",
    "DENSITY": "g/mL", "VP": "kPa", "T50": "°C",
    "AROMATICS": "vol %", "BENZENE": "vol %", "ETHANOL": "vol %", "MTBE": "vol %", "FAME": "vol %",
}

_SUM_TOLERANCE = 1e-6


def as_volume_fractions(composition: pd.DataFrame, *, source: str = "composition"
                        ) -> tuple[np.ndarray, tuple[str, ...]]:
    """Validate a composition table and return (fractions n × k, component names).

    Raises
    ------
    InputError
        Unknown component column, non-finite or negative fraction, or a row
        whose fractions do not sum to 1; the message names the row and column.
    """
    if not isinstance(composition, pd.DataFrame):
        raise InputError("composition must be a pandas DataFrame with one column per "
                         "component", file=source)
    names = tuple(str(c) for c in composition.columns)
    for name in names:
        if name not in COMPONENTS:
            raise InputError(f"unknown blend component {name!r}; known: "
                             f"{', '.join(sorted(COMPONENTS))}", file=source, field=name)
    try:
        v = composition.to_numpy(dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise InputError(f"composition must be numbers: {exc}", file=source) from None
    bad = ~np.isfinite(v)
    if bad.any():
        i, j = np.argwhere(bad)[0]
        raise InputError("fraction is not a finite number", file=source, line=int(i) + 1,
                         field=names[j])
    if (v < 0).any():
        i, j = np.argwhere(v < 0)[0]
        raise InputError(f"negative volume fraction {v[i, j]:g}", file=source,
                         line=int(i) + 1, field=names[j])
    sums = v.sum(axis=1)
    off = np.abs(sums - 1.0) > _SUM_TOLERANCE
    if off.any():
        i = int(np.argmax(off))
        raise InputError(f"volume fractions sum to {sums[i]:.8g}, not 1", file=source,
                         line=i + 1)
    return v, names


def _column(names: tuple[str, ...], attribute: str) -> np.ndarray:
    values = [getattr(COMPONENTS[n], attribute) for n in names]
    missing = [n for n, val in zip(names, values) if val is None]
    if missing:
        raise InputError(f"component(s) {', '.join(missing)} have no {attribute} value, "
                         f"so this property cannot be blended", field=missing[0])
    return np.asarray(values, dtype=np.float64)


def _fraction_of(v: np.ndarray, names: tuple[str, ...], name: str) -> np.ndarray:
    return v[:, names.index(name)] if name in names else np.zeros(v.shape[0])


def _without(v: np.ndarray, names: tuple[str, ...], component: str) -> np.ndarray:
    """Rows of ``v`` with ``component`` removed and the rest renormalised to 1.

    A row that is all ``component`` has no remainder and becomes all zeros;
    callers weight it by 1 − (its fraction) = 0.
    """
    rest = v.copy()
    if component in names:
        rest[:, names.index(component)] = 0.0
    total = rest.sum(axis=1, keepdims=True)
    return np.divide(rest, total, out=np.zeros_like(rest), where=total > 0)


def molar_fraction(composition: pd.DataFrame, component: str = "ethanol") -> np.ndarray:
    """Mole fraction of ``component`` computed from volume fractions.

    Moles per unit blend volume are v_k·ρ_k/M_k (ideal mixing, handbook
    densities and molar masses from the component table).
    """
    v, names = as_volume_fractions(composition)
    moles = v * _column(names, "density") / _column(names, "molar_mass")
    total = moles.sum(axis=1)
    if component not in names:
        return np.zeros(v.shape[0])
    return moles[:, names.index(component)] / total


def density(composition: pd.DataFrame) -> np.ndarray:
    """Density in g/mL, linear by volume (ideal mixing; common practice)."""
    v, names = as_volume_fractions(composition)
    return v @ _column(names, "density")


def vapour_pressure(composition: pd.DataFrame) -> np.ndarray:
    """Vapour pressure in kPa (DVPE-like, 37.8 °C), with ethanol's non-ideal hump.

    The ethanol-free remainder blends by the index method,
    P_g = (Σ v_k·RVP_k^1.25)^(1/1.25) over the remainder's volume fractions
    (common practice). Ethanol (volume fraction v) then gives

        VP = P_g·(1 − v)·(1 + c·v³) + P_e·G·v / (1 + (G − 1)·v)

    with P_e ethanol's own vapour pressure. The second term is ethanol's share:
    it rises steeply and saturates, since a little ethanol in hydrocarbons is
    far from ideal; the first is the diluted hydrocarbons, lifted in an
    ethanol-rich liquid that drives them out. The result has the shape known
    from practice (common practice, magnitudes invented: G =
    :data:`ETHANOL_VP_SATURATION`, c = :data:`ETHANOL_VP_HYDROCARBON_LIFT`):
    a rise of a few kPa at E5–E10, a maximum near 5–10 vol % ethanol, a slow
    fall through the mid-range, E85 at roughly 40–70 kPa, and neat ethanol at
    its own vapour pressure. c < 4 keeps the hydrocarbon term falling for every
    v; with ethanol's share saturated early, the curve then has one maximum
    (checked in the tests for bases of 50–70 kPa).
    """
    v, names = as_volume_fractions(composition)
    v_e = _fraction_of(v, names, "ethanol")
    rest = _without(v, names, "ethanol")
    index = rest @ (_column(names, "rvp") ** RVP_EXPONENT)
    base = index ** (1.0 / RVP_EXPONENT)
    g, c = ETHANOL_VP_SATURATION, ETHANOL_VP_HYDROCARBON_LIFT
    hydrocarbons = base * (1.0 - v_e) * (1.0 + c * v_e ** 3)
    ethanol = COMPONENTS["ethanol"].rvp * g * v_e / (1.0 + (g - 1.0) * v_e)
    return hydrocarbons + ethanol


def cetane_number(composition: pd.DataFrame) -> np.ndarray:
    """Cetane number, linear by volume (near-linear without ignition improvers, from memory)."""
    v, names = as_volume_fractions(composition)
    return v @ _column(names, "cetane")


def _distillation_ranges(names: tuple[str, ...]) -> tuple[np.ndarray, np.ndarray]:
    """Start and end of each component's distillation, °C (equal for a pure compound)."""
    lo, hi = [], []
    for n in names:
        c = COMPONENTS[n]
        start, end = c.boiling_range if c.boiling_range else (c.boiling_point, c.boiling_point)
        lo.append(start)
        hi.append(end)
    return np.asarray(lo, dtype=np.float64), np.asarray(hi, dtype=np.float64)


def t50(composition: pd.DataFrame) -> np.ndarray:
    """T50 in °C: the temperature at which half the volume has distilled.

    An idealised distillation (invented for the demo): a pure compound
    distils at its normal boiling point, a lump evenly over the boiling range
    of the refinery cut it stands for, and ethanol over the range of its
    azeotropes with hydrocarbons (``Component.boiling_range``). The distilled
    volume is then piecewise linear in temperature, and T50 is read off it
    exactly. With the demo recipes gasoline lands at about 85–105 °C and
    diesel at about 260–270 °C (see the tests for the anchors).
    """
    v, names = as_volume_fractions(composition)
    lo, hi = _distillation_ranges(names)
    points = np.unique(np.concatenate([lo, hi]))
    width = (hi - lo)[:, None]
    ramp = np.divide(points[None, :] - lo[:, None], width,
                     out=np.zeros((lo.size, points.size)), where=width > 0)
    ramp = np.clip(ramp, 0.0, 1.0)
    pure = width <= 0
    # distilled fraction of each component just after (right) and just before (left)
    # each point: a pure compound jumps from 0 to 1 at its boiling point
    right = v @ np.where(pure, points[None, :] >= lo[:, None], ramp)
    left = v @ np.where(pure, points[None, :] > lo[:, None], ramp)
    half = 0.5 - 1e-12
    j = np.argmax(right >= half, axis=1)
    rows = np.arange(v.shape[0])
    before = np.maximum(j - 1, 0)
    rising = (j > 0) & (left[rows, j] >= half)
    gain = left[rows, j] - right[rows, before]
    step = np.divide(0.5 - right[rows, before], gain, out=np.zeros(v.shape[0]), where=gain > 0)
    between = points[before] + step * (points[j] - points[before])
    # where a pure compound's jump carries the volume past one half, T50 is its boiling point
    return np.where(rising, between, points[j])


def _rt70_base(v: np.ndarray, names: tuple[str, ...], kind: str) -> np.ndarray:
    """interaction-method octane of the blend given by rows of ``v`` (rows sum to 1)."""
    ron = _column(names, "ron")
    mon = _column(names, "mon")
    on = ron if kind == "RON" else mon
    sens = ron - mon
    olefin = np.array([100.0 if COMPONENTS[n].is_olefin else 0.0 for n in names])
    arom = np.array([100.0 if COMPONENTS[n].is_aromatic else 0.0 for n in names])
    c_sens, c_olefin, c_arom = OCTANE_INTERACTIONS[kind]
    on_bar, s_bar = v @ on, v @ sens
    o_bar, a_bar = v @ olefin, v @ arom
    # covariance-like terms vanish for a single component, so a pure
    # component keeps its own rating
    sens_term = v @ (on * sens) - on_bar * s_bar
    olefin_term = v @ olefin**2 - o_bar**2
    arom_term = v @ arom**2 - a_bar**2
    return on_bar + c_sens * sens_term + c_olefin * olefin_term + c_arom * arom_term


def octane_number(composition: pd.DataFrame, kind: str = "RON") -> np.ndarray:
    """RON or MON of gasoline blends.

    Parameters
    ----------
    composition : DataFrame
        Volume fractions, one column per component (rows sum to 1).
    kind : {"RON", "MON"}

    Returns
    -------
    ndarray
        ``(1 − x)·ON_g + x·ON_e + Z·x·(1 − x)``, x the molar ethanol fraction
        (Anderson & Wallington, Energy Fuels 2020), ON_g the interaction-method
        octane of the ethanol-free remainder.
    """
    if kind not in ETHANOL_SYNERGY:
        raise InputError(f"octane kind must be RON or MON, not {kind!r}", field="kind")
    v, names = as_volume_fractions(composition)
    v_e = _fraction_of(v, names, "ethanol")
    x = molar_fraction(composition, "ethanol")
    # neat ethanol has no remainder; its weight (1 − x) is then 0 anyway
    on_g = _rt70_base(_without(v, names, "ethanol"), names, kind)
    on_e = COMPONENTS["ethanol"].ron if kind == "RON" else COMPONENTS["ethanol"].mon
    on_g = np.where(v_e < 1.0, on_g, 0.0)
    return (1.0 - x) * on_g + x * on_e + ETHANOL_SYNERGY[kind] * x * (1.0 - x)


def blend_properties(composition: pd.DataFrame, family: str) -> pd.DataFrame:
    """All property codes of ``family`` for each blend row.

    Returns a DataFrame with the columns of ``PROPERTY_CODES[family]`` and the
    index of ``composition``.
    """
    if family not in PROPERTY_CODES:
        raise InputError(f"family must be 'gasoline' or 'diesel', not {family!r}",
                         field="family")
    v, names = as_volume_fractions(composition)
    allowed = set(FAMILY_COMPONENTS[family])
    foreign = [n for n in names if n not in allowed]
    if foreign:
        raise InputError(f"component {foreign[0]!r} is not a {family} component",
                         field=foreign[0])
    arom = np.array([COMPONENTS[n].is_aromatic for n in names], dtype=np.float64)
    out: dict[str, np.ndarray] = {}
    if family == "gasoline":
        out["RON"] = octane_number(composition, "RON")
        out["MON"] = octane_number(composition, "MON")
        out["DENSITY"] = density(composition)
        out["VP"] = vapour_pressure(composition)
        out["T50"] = t50(composition)
        out["AROMATICS"] = 100.0 * (v @ arom)
        out["BENZENE"] = 100.0 * _fraction_of(v, names, "benzene")
        out["ETHANOL"] = 100.0 * _fraction_of(v, names, "ethanol")
        out["MTBE"] = 100.0 * _fraction_of(v, names, "mtbe")
    else:
        out["CN"] = cetane_number(composition)
        out["DENSITY"] = density(composition)
        out["T50"] = t50(composition)
        out["AROMATICS"] = 100.0 * (v @ arom)
        out["FAME"] = 100.0 * _fraction_of(v, names, "fame")
    return pd.DataFrame(out, index=composition.index)[list(PROPERTY_CODES[family])]
