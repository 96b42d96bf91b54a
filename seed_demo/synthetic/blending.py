"""Blending rules that turn volume fractions into fuel properties (demo data).

Rules follow the project's domain notes §8:

* octane: a volume-linear base plus sensitivity, olefin and aromatic
  interaction corrections in the form of the interaction method of Healy,
  Maassen & Peterson ("A new approach to blending octanes", API Division of
  Refining, 1959; form from memory, coefficients invented for the demo so the
  corrections stay within a few octane numbers), then ethanol blended on a
  *molar* basis with a synergy term (Anderson & Wallington, Energy Fuels 2020)::

      ON = (1 − x)·ON_g + x·ON_e + Z·x·(1 − x)

  with x the molar ethanol fraction of the whole blend, ON_g the octane of the
  ethanol-free remainder and ON_e the octane of ethanol;
* density: linear by volume;
* vapour pressure: volume average of RVP^1.25, then inverted (blending-index
  method, common practice);
* cetane number: linear by volume (near-linear without ignition improvers,
  from memory);
* T50: invented for the demo — volume average of the normal boiling points,
  lowered by ``ETHANOL_T50_DEPRESSION · v_e·(1 − v_e)`` because ethanol's
  near-azeotropes with hydrocarbons depress the middle of the distillation
  curve (qualitatively known, magnitude invented).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from registry.errors import InputError

from .components import COMPONENTS, FAMILY_COMPONENTS

#: RVP blending-index exponent (domain notes §8).
RVP_EXPONENT = 1.25

#: Ethanol synergy Z for RON and MON. Invented for the demo; the sign follows
#: Anderson & Wallington (Energy Fuels 2020), who found Z > 0 most often.
ETHANOL_SYNERGY = {"RON": 4.0, "MON": 1.0}

#: interaction-method interaction coefficients (form after Healy et al. 1959, from
#: memory; values invented for the demo): sensitivity, olefin², aromatic².
OCTANE_INTERACTIONS = {
    "RON": (0.030, 0.00050, -0.00060),
    "MON": (0.040, 0.00040, -0.00200),
}

#: T50 depression by ethanol in °C per unit v_e(1 − v_e) (invented).
ETHANOL_T50_DEPRESSION = 100.0

#: Property codes per fuel family, in column order.
PROPERTY_CODES = {
    "gasoline": ("RON", "MON", "DENSITY", "VP", "T50", "AROMATICS", "BENZENE", "ETHANOL"),
    "diesel": ("CN", "DENSITY", "T50", "AROMATICS", "FAME"),
}

#: Units of each property code.
PROPERTY_UNITS = {
    "RON": "octane number", "MON": "octane number", "CN": "cetane number",
    "DENSITY": "g/mL", "VP": "kPa", "T50": "°C",
    "AROMATICS": "vol %", "BENZENE": "vol %", "ETHANOL": "vol %", "FAME": "vol %",
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
    """Density in g/mL, linear by volume (domain notes §8)."""
    v, names = as_volume_fractions(composition)
    return v @ _column(names, "density")


def vapour_pressure(composition: pd.DataFrame) -> np.ndarray:
    """Vapour pressure in kPa: (Σ v_k·RVP_k^1.25)^(1/1.25) (domain notes §8)."""
    v, names = as_volume_fractions(composition)
    index = v @ (_column(names, "rvp") ** RVP_EXPONENT)
    return index ** (1.0 / RVP_EXPONENT)


def cetane_number(composition: pd.DataFrame) -> np.ndarray:
    """Cetane number, linear by volume (domain notes §8)."""
    v, names = as_volume_fractions(composition)
    return v @ _column(names, "cetane")


def t50(composition: pd.DataFrame) -> np.ndarray:
    """Invented T50 rule (°C): volume-average boiling point minus an ethanol term."""
    v, names = as_volume_fractions(composition)
    v_e = _fraction_of(v, names, "ethanol")
    return v @ _column(names, "boiling_point") - ETHANOL_T50_DEPRESSION * v_e * (1.0 - v_e)


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
    rest = v.copy()
    if "ethanol" in names:
        rest[:, names.index("ethanol")] = 0.0
    rest_total = rest.sum(axis=1, keepdims=True)
    # neat ethanol has no remainder; its weight (1 − x) is then 0 anyway
    rest = np.divide(rest, rest_total, out=np.zeros_like(rest), where=rest_total > 0)
    on_g = _rt70_base(rest, names, kind)
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
    else:
        out["CN"] = cetane_number(composition)
        out["DENSITY"] = density(composition)
        out["T50"] = t50(composition)
        out["AROMATICS"] = 100.0 * (v @ arom)
        out["FAME"] = 100.0 * _fraction_of(v, names, "fame")
    return pd.DataFrame(out, index=composition.index)[list(PROPERTY_CODES[family])]
