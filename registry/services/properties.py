"""Admin edits of properties: names, units, plausibility limits, acceptance criteria."""

from __future__ import annotations

import math
from dataclasses import fields
from typing import Any

from sqlmodel import Session, select

from ..chemometrics import AcceptanceCriteria
from ..chemometrics.validation import LEGACY_PRECISION_KEY
from ..errors import InputError
from ..lifecycle.permissions import Action
from ..storage.models import Property
from .admin import get_property
from .context import Actor, audit, authorize

CRITERIA_FIELDS = tuple(f.name for f in fields(AcceptanceCriteria))


def acceptance_for(prop: Property) -> AcceptanceCriteria:
    """The property's acceptance criteria: the documented defaults with its overrides."""
    return AcceptanceCriteria(**(prop.acceptance or {}))


def _criteria(overrides: dict[str, Any]) -> dict[str, Any]:
    if LEGACY_PRECISION_KEY in overrides:
        # revision 0003 renamed it (stored overrides were migrated, same factor)
        raise InputError(f"{LEGACY_PRECISION_KEY} compared the RMSEP with the 95 % limit R and "
                         "is replaced by max_sep_over_sigma_r: SEP ≤ k·σ_R, σ_R = R/2.77",
                         field="--criterion")
    unknown = sorted(set(overrides) - set(CRITERIA_FIELDS))
    if unknown:
        raise InputError(f"unknown acceptance criterion {unknown[0]!r}; known: "
                         f"{', '.join(CRITERIA_FIELDS)}", field="--criterion")
    clean: dict[str, Any] = {}
    for k, v in overrides.items():
        if v is None or (isinstance(v, str) and v.lower() in ("none", "off", "")):
            clean[k] = None
            continue
        try:
            number = float(v)
        except (TypeError, ValueError):
            raise InputError(f"{k} must be a number or 'none', got {v!r}", field=k) from None
        if not math.isfinite(number) or number < 0:
            raise InputError(f"{k} must be a finite number >= 0", field=k)
        clean[k] = int(number) if k.startswith("min_samples") else number
    for k in ("bias_alpha", "min_samples", "min_samples_per_component"):
        if k in clean and clean[k] is None:
            raise InputError(f"{k} cannot be switched off", field=k)
    if "bias_alpha" in clean and not 0 < clean["bias_alpha"] < 1:
        raise InputError("bias_alpha must lie between 0 and 1", field="bias_alpha")
    AcceptanceCriteria(**clean)  # constructor checks nothing else, but fails on wrong names
    return clean


def edit_property(session: Session, actor: Actor, code: str, *, name: str | None = None,
                  unit: str | None = None, lower_limit: float | None = None,
                  upper_limit: float | None = None,
                  acceptance: dict[str, Any] | None = None) -> Property:
    """Change a property's description, limits or acceptance-criteria overrides."""
    authorize(actor, Action.PROPERTY_EDIT)
    prop = get_property(session, code)
    before = {"name": prop.name, "unit": prop.unit, "lower_limit": prop.lower_limit,
              "upper_limit": prop.upper_limit, "acceptance": dict(prop.acceptance or {})}
    if name is not None:
        prop.name = name
    if unit is not None:
        prop.unit = unit
    lo = prop.lower_limit if lower_limit is None else float(lower_limit)
    hi = prop.upper_limit if upper_limit is None else float(upper_limit)
    if lo is not None and hi is not None and not lo < hi:
        raise InputError(f"lower limit {lo} must be below upper limit {hi}", field="--lower")
    prop.lower_limit, prop.upper_limit = lo, hi
    if acceptance is not None:
        merged = {**(prop.acceptance or {}), **_criteria(acceptance)}
        prop.acceptance = merged  # a new dict: in-place JSON edits are not persisted
    after = {"name": prop.name, "unit": prop.unit, "lower_limit": prop.lower_limit,
             "upper_limit": prop.upper_limit, "acceptance": dict(prop.acceptance or {})}
    if after == before:
        raise InputError("nothing to change", field="--name")
    session.add(prop)
    session.flush()
    audit(session, actor, Action.PROPERTY_EDIT, entity_type="property", entity_id=prop.id,
          data={"code": prop.code, "before": before, "after": after})
    return prop


def list_properties(session: Session, actor: Actor) -> list[dict]:
    authorize(actor, Action.VIEW)
    out = []
    for p in session.exec(select(Property).order_by(Property.code)).all():
        c = acceptance_for(p)
        out.append({"code": p.code, "name": p.name, "unit": p.unit, "lower_limit": p.lower_limit,
                    "upper_limit": p.upper_limit, "acceptance": c.to_json(),
                    "overrides": p.acceptance or {}})
    return out
