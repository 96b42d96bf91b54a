"""Planning reference tests: what a budget buys in prediction error, and what a target costs.

:func:`plan_testing` is the ``specledger plan`` action. For one property and grade it
takes the calibration the registry would augment (the current model's calibration
members, or without a model every sample of the grade with a valid value) and the
untested candidates of the grade, exactly as a selection run sees them
(:func:`registry.services.selection.build_pool`), and forecasts the RMSEP after adding
more reference-tested picks (:func:`registry.selection.forecast.forecast_error`: a
learning curve by repeated subsampling, an inverse power law with a floor, bootstrap
bands). The floor holds the reference method's repeatability σ_r = r/2.77 (ISO
5725-6): every validation error contains it (common practice). The default target is
SEP ≤ σ_R = R/2.77 of the reference method at the calibration's mean level.

It answers three questions: what error the budget buys; how many tests, at what cost,
reach the target; and whether more testing is worth anything (the floor is reached).
Nothing is written: like a selection preview it needs the lab manager's permission
and leaves no audit event.

:func:`forecast_backtest` checks the forecast against history: for a stored selection
run whose results came back it forecasts from the calibration the run augmented
(before the send list was answered) and compares with the RMSECV of that calibration
plus the answered picks.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from sqlmodel import Session, select

from ..chemometrics.crossval import cross_validate_pls
from ..errors import InputError
from ..lifecycle.permissions import Action
from ..selection.forecast import (CURVE_METHODS, DEFAULT_STEPS, WORTHWHILE_GAIN,
                                  forecast_error)
from ..selection.recommend import expected_benefit
from ..storage.models import (CalibrationMember, ModelVersion, Property, SelectionPick,
                              Spectrum)
from . import selection
from .context import Actor, authorize
from .models import load_trained
from .references import calibration_values
from .review import method_precision
from .selection_runs import get_run

__all__ = ["CURVES", "DEFAULT_CURVE", "PLAN_BAND", "PlanRequest", "check_plan",
           "forecast_backtest", "plan_testing"]

CURVES = CURVE_METHODS
#: The registry's selection methods all spread the picks over the space, so by default the
#: learning curve is measured with Kennard–Stone-augmented subsets (see
#: :func:`registry.selection.forecast.learning_curve`).
DEFAULT_CURVE = "kennard-stone"
#: Central probability of the forecast band (10th to 90th percentile).
PLAN_BAND = 0.8
# Bootstrap refits of the curve: enough for stable 10th/90th percentiles (common practice).
_N_BOOT = 200


@dataclass(frozen=True)
class PlanRequest:
    """A checked planning request (see :func:`check_plan`)."""

    property_code: str
    grade: str
    budget: float | None = None
    target: float | None = None
    curve: str = DEFAULT_CURVE
    added: int | None = None


def check_plan(*, property_code: str, grade: str, budget: float | None = None,
               target: float | None = None, curve: str = DEFAULT_CURVE,
               added: int | None = None) -> PlanRequest:
    """Check every parameter that needs no database; InputError names the option.

    Parameters
    ----------
    property_code, grade : str
    budget : float, optional
        Money for reference tests; the answer says what error it buys.
    target : float, optional
        RMSEP to reach, in the property's unit (default: σ_R of the reference method).
    curve : {"random", "kennard-stone"}
        How the learning-curve subsets are chosen.
    added : int, optional
        A number of picks whose expected benefit is wanted (a send list's size).
    """
    code = (property_code or "").strip().upper()
    if not code:
        raise InputError("name the property to plan for", field="--property")
    if not (grade or "").strip():
        raise InputError("name the grade to plan for", field="--grade")
    if budget is not None and not (math.isfinite(budget) and budget > 0):
        raise InputError(f"the budget must be a positive amount, got {budget!r}", field="--budget")
    if target is not None and not (math.isfinite(target) and target > 0):
        raise InputError(f"the target must be a positive error in the property's unit, got "
                         f"{target!r}", field="--target")
    if curve not in CURVES:
        raise InputError(f"unknown learning-curve method {curve!r}; use {' or '.join(CURVES)}",
                         field="--curve")
    if added is not None and (isinstance(added, bool) or int(added) != added or added < 0):
        raise InputError(f"the number of added tests must be a whole number >= 0, got {added!r}",
                         field="--added")
    return PlanRequest(property_code=code, grade=grade.strip(), budget=budget, target=target,
                       curve=curve, added=None if added is None else int(added))


def _calibration(session: Session, setting, pool) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(X calibration, y calibration, X pool), preprocessed as the selection space is."""
    _, X_pre = selection.preprocessed(setting, pool)
    n_ref = len(pool.reference_ids)
    X_ref, X_pool = X_pre[:n_ref], X_pre[n_ref:][pool.rows]
    if pool.y_reference is not None:
        return X_ref, pool.y_reference, X_pool
    # no model: the reference is every sample of the grade with a valid value
    values = calibration_values(session, pool.reference_ids, setting.properties[0].id)
    keep = [i for i, s in enumerate(pool.reference_ids) if s in values]
    y = np.array([values[pool.reference_ids[i]][0] for i in keep], dtype=np.float64)
    return X_ref[keep], y, X_pool


def _steps(n_pool: int, *extra: int | None) -> list[int]:
    wanted = {s for s in DEFAULT_STEPS if s <= n_pool} | {e for e in extra if e}
    if n_pool < DEFAULT_STEPS[-1]:
        wanted.add(n_pool)
    return sorted(min(s, n_pool) for s in wanted if s >= 1)


def _verdict(doc: dict[str, Any]) -> str:
    """One line: is more testing worth anything?"""
    floor, now = doc["floor"], doc["now"]
    if floor["reached"]:
        return (f"More tests of this kind are not worth much: the expected RMSEP "
                f"{now['rmsep']:.3g} is already within {100 * doc['worthwhile_gain']:.0f} % of "
                f"the floor {floor['rmsep']:.3g}.")
    return (f"More tests are worth it: the expected RMSEP can fall from {now['rmsep']:.3g} "
            f"towards the floor {floor['rmsep']:.3g}.")


def plan_testing(session: Session, actor: Actor, request: PlanRequest, *,
                 progress: selection.Progress | None = None) -> dict[str, Any]:
    """Forecast the RMSEP against the number (and cost) of further reference tests.

    Returns
    -------
    dict
        ``property, unit, grade, model, reference_method, cost_per_test, currency``;
        ``now`` {rmsecv, n, rmsep, low, high}; ``forecast`` [{added, cost, rmsep, low,
        high}, ...] for increasing ``added``; ``budget`` (the row the budget buys, or
        None); ``target`` {value, source}; ``to_reach`` {target, added, cost} or None
        with ``to_reach_reason``; ``floor`` {rmsep, low, high, reached, reason};
        ``worth_more_tests`` and ``verdict`` (one line); ``precision`` (r, R, σ_r, σ_R
        at the level); ``pool`` {candidates, outside_share}; ``recommendation``
        {method, reason}; ``after`` (with ``added``: :func:`expected_benefit`);
        ``band``, ``curve``, ``n_components``, ``cautions``.
    """
    authorize(actor, Action.SELECTION_RUN)
    sel = selection.check_request(property_codes=[request.property_code], grade=request.grade,
                                  method="kennard-stone", n=1)
    setting = selection.resolve_request(session, sel)
    prop = setting.properties[0]
    pool = selection.build_pool(session, setting, progress=progress)
    X_cal, y_cal, X_pool = _calibration(session, setting, pool)
    if y_cal.size == 0:
        raise InputError(f"no {prop.code} reference results on grade {setting.grade.code}: "
                         "there is no calibration to forecast from", field="--property")
    cost, currency = setting.cost_per_sample, setting.currency
    budget_tests = None
    if request.budget is not None:
        budget_tests = int(request.budget // cost)
        if budget_tests < 1:
            raise InputError(f"the budget {request.budget:g} {currency} does not cover one "
                             f"{setting.tests_text} test at {cost:g} {currency}",
                             field="--budget")
    n_pool = int(X_pool.shape[0])
    capped = budget_tests is not None and budget_tests > n_pool
    buy = min(budget_tests, n_pool) if budget_tests is not None else None
    prec = method_precision(session, prop.id, float(y_cal.mean()))
    if progress is not None:
        progress("forecasting", 0, 1)
    mv = setting.space_model
    fc = forecast_error(X_cal, y_cal, X_pool, n_components=mv.n_components if mv else None,
                        sigma_r=prec["sigma_r"], sigma_R=prec["sigma_R"], target=request.target,
                        cost_per_test=cost, steps=_steps(n_pool, buy, request.added),
                        method=request.curve, band=PLAN_BAND, n_boot=_N_BOOT,
                        random_state=int(pool.reference_sha256[:8], 16))
    if progress is not None:
        progress("forecasting", 1, 1)
    rec = selection.recommend_for(setting, pool)
    share = selection.outside_share(setting, pool)
    doc = fc.as_dict()
    target_source = ("given" if request.target is not None else
                     f"σ_R = R/2.77 of {prec['method']} at {prec['level']:.4g}"
                     if prec["sigma_R"] else None)
    cautions = ["A forecast is an estimate from the calibration's own learning curve; a model "
                "result does not replace the specification test method."]
    benefit = expected_benefit(fc, request.added or 0, outside_share=share)
    if benefit["caution"]:
        cautions.append(benefit["caution"] + ".")
    if capped:
        cautions.append(f"The budget buys {budget_tests} tests but only {n_pool} untested "
                        "candidates exist; the forecast stops there.")
    out = {
        "property": prop.code, "unit": prop.unit or "", "grade": setting.grade.code,
        "model": mv.label if mv else None, "reference_method": setting.tests_text,
        "cost_per_test": cost, "currency": currency,
        "now": doc["now"], "forecast": doc["forecast"],
        "budget": (None if buy is None else
                   {"amount": request.budget, "tests": budget_tests, **fc.at(buy)}),
        "target": {"value": request.target if request.target is not None else prec["sigma_R"],
                   "source": target_source},
        "to_reach": doc["to_reach"], "to_reach_reason": doc["to_reach_reason"],
        "floor": doc["floor"], "worthwhile_gain": WORTHWHILE_GAIN,
        "worth_more_tests": not doc["floor"]["reached"],
        "precision": {k: prec[k] for k in ("method", "level", "r", "R", "sigma_r", "sigma_R")},
        "pool": {"candidates": n_pool, "outside_share": share},
        "recommendation": {"method": rec.method, "reason": rec.reason},
        "after": benefit["after"] if request.added is not None else None,
        "band": doc["band"], "curve": doc["curve_method"], "n_components": doc["n_components"],
        "cautions": cautions,
    }
    out["verdict"] = _verdict(out)
    return out


# --------------------------------------------------------------------------- the backtest
def _sample_rows(session: Session, spectra: dict[int, list[int]], axis, trained) -> np.ndarray:
    X = selection.mean_spectra(session, list(spectra.values()), axis)
    return trained.preprocessor.transform(X)


def forecast_backtest(session: Session, actor: Actor, run_id: int | str, *,
                      curve: str = DEFAULT_CURVE) -> dict[str, Any]:
    """The forecast made before a selection run was answered, against what came of it.

    "Before" is the calibration the run augmented: the calibration members of the
    model whose space it was made in, with their frozen reference values. "After" adds
    the run's picks that have a valid result for that model's property. The forecast
    (RMSEP after adding that many picks, 80 % band) is compared with the 10-fold
    RMSECV of the "after" set at the model's component count, the same
    cross-validation that gives the forecast's ``now``.

    Returns
    -------
    dict
        ``run, model, property, n_before, added, rmsecv_before, rmsecv_after,
        forecast`` {rmsep, low, high} and ``inside_band``.
    """
    authorize(actor, Action.VIEW)
    if curve not in CURVES:
        raise InputError(f"unknown learning-curve method {curve!r}; use {' or '.join(CURVES)}",
                         field="curve")
    run = get_run(session, run_id)
    if run.model_version_id is None:
        raise InputError(f"selection run {run.id} was made without a model: there is no "
                         "calibration to forecast from", field="RUN")
    mv = session.get(ModelVersion, run.model_version_id)
    prop = session.get(Property, mv.property_id)
    trained = load_trained(mv)
    members = session.exec(select(CalibrationMember).where(
        CalibrationMember.set_id == mv.calibration_set_id, CalibrationMember.role == "cal")
        .order_by(CalibrationMember.sample_id)).all()
    before = {m.sample_id: [int(s) for s in m.spectrum_ids] for m in members}
    y_before = np.array([m.reference_value for m in members], dtype=np.float64)
    picked = [p.sample_id for p in session.exec(select(SelectionPick).where(
        SelectionPick.run_id == run.id).order_by(SelectionPick.rank)).all()]
    values = calibration_values(session, [s for s in picked if s not in before], prop.id)
    answered = [s for s in picked if s in values]
    if not answered:
        raise InputError(f"no pick of selection run {run.id} has a valid {prop.code} result yet",
                         field="RUN")
    spectra = {s: [] for s in answered}
    for sid, sample_id in session.exec(select(Spectrum.id, Spectrum.sample_id).where(
            Spectrum.sample_id.in_(answered)).order_by(Spectrum.id)).all():
        spectra[sample_id].append(sid)
    X_before = _sample_rows(session, before, trained.axis, trained)
    X_new = _sample_rows(session, spectra, trained.axis, trained)
    y_new = np.array([values[s][0] for s in answered], dtype=np.float64)
    prec = method_precision(session, prop.id, float(y_before.mean()))
    a = int(mv.n_components)
    fc = forecast_error(X_before, y_before, n_components=a, sigma_r=prec["sigma_r"],
                        sigma_R=prec["sigma_R"], steps=[len(answered)], method=curve,
                        band=PLAN_BAND, n_boot=_N_BOOT, random_state=run.id)
    X_after, y_after = np.vstack([X_before, X_new]), np.concatenate([y_before, y_new])
    after = float(cross_validate_pls(X_after, y_after, a, folds=min(10, y_after.size),
                                     n_components=a).rmsecv[a - 1])
    row = fc.rows[0]
    return {"run": run.id, "model": mv.label, "property": prop.code, "n_before": fc.n,
            "added": len(answered), "rmsecv_before": fc.now["rmsecv"], "rmsecv_after": after,
            "forecast": {k: row[k] for k in ("rmsep", "low", "high")}, "band": PLAN_BAND,
            "inside_band": bool(row["low"] <= after <= row["high"])}
