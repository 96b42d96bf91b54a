"""Model commands: train, validate, list, show; and predict."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Optional

import typer

from ..chemometrics.family_names import ModelFamily
from ..chemometrics.fitted import DESCRIPTIONS
from ..chemometrics.validation import precision_summary, precision_text
from ..errors import InputError
from ..lifecycle.states import ModelState
from ..services import models as svc
from ..services import predictions as pred_svc
from ..chemometrics.crossval import SELECTION_RULES
from ..chemometrics.folds import FOLD_METHODS
from .common import (AsOpt, DbOpt, FormatOpt, Output, choice, emit, handle_errors, login, table,
                     transaction)

model_app = typer.Typer(help="Model versions and their lifecycle.", no_args_is_help=True)


@model_app.command("train")
@handle_errors
def model_train(calset: Annotated[str, typer.Option("--calset")],
                family: Annotated[choice(tuple(f.value for f in ModelFamily)), typer.Option(
                    "--family", help="pls (default), band, cls, derived or neighbours")] = "pls",
                recipe: Annotated[Optional[Path], typer.Option(
                    "--recipe", help="JSON file: for pls the preprocessing steps; for the other "
                                     "families an object of the family's options "
                                     "(registry/services/trainers.py).")] = None,
                max_components: Annotated[Optional[int], typer.Option("--max-components")] = None,
                cv: Annotated[Optional[int], typer.Option("--cv", help="Number of folds.")] = None,
                cv_method: Annotated[Optional[choice(FOLD_METHODS)], typer.Option(
                    "--cv-method", help="venetian (default), random (seeded), kfold (contiguous "
                                        "blocks) or loso")] = None,
                selection: Annotated[Optional[choice(SELECTION_RULES)], typer.Option("--selection")] = None,
                components: Annotated[Optional[int], typer.Option("--components", help="Override the chosen size.")] = None,
                parent: Annotated[Optional[str], typer.Option("--parent")] = None,
                db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """Train a draft model version of one family on a frozen calibration set."""
    pls_options = {"max_components": max_components, "folds": cv, "cv_method": cv_method,
                   "selection": selection, "n_components": components}
    if family == ModelFamily.PLS:
        steps, options = svc.read_recipe(recipe), None
    else:
        given = [f"--{k.replace('_', '-')}" for k, v in pls_options.items() if v is not None]
        if given:
            raise InputError(f"{given[0]} is a PLS option; give the {family} family's options "
                             "in --recipe", field=given[0])
        steps, options = None, svc.read_options(recipe)
    with transaction(db) as session:
        mv = svc.train_model_version(session, login(session, as_user), calset, family=family,
                                     options=options, recipe=steps, parent=parent,
                                     **{k: v for k, v in pls_options.items() if v is not None})
        doc = {"id": mv.id, "label": mv.label, "family": mv.family, "state": mv.state,
               "components": mv.n_components, "cv": mv.cv,
               "artifact_sha256": mv.artifact_sha256}
    curve = doc["cv"].get("rmsecv")

    def text() -> str:
        if not curve:
            return (f"model {mv.label} trained (draft, {doc['family']}): "
                    f"{DESCRIPTIONS[ModelFamily(doc['family'])]}")
        lines = [f"model {mv.label} trained (draft): {mv.n_components} components chosen by "
                 f"{doc['cv']['selection_rule']}", "  A   RMSECV"]
        lines += [f"  {a:<3d} {v:.4g}" + ("  <- chosen" if a == mv.n_components else "")
                  for a, v in enumerate(curve, 1)]
        return "\n".join(lines)
    emit(fmt, doc, text)


@model_app.command("validate")
@handle_errors
def model_validate(version: str,
                   calset: Annotated[Optional[str], typer.Option("--calset", help="Independent set.")] = None,
                   kind: Annotated[choice(svc.VALIDATION_KINDS), typer.Option("--kind")] = "initial",
                   db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """Predict a validation set and record statistics and the verdict."""
    with transaction(db) as session:
        rec = svc.validate_model(session, login(session, as_user), version, calset_name=calset, kind=kind)
    verdict = "PASS" if rec.passed else "FAIL: " + "; ".join(rec.reasons)
    emit(fmt, rec, lambda: f"validation of {version}: n={rec.n} " + precision_text(
        precision_summary(rec.statistics, rec.criteria))
        + f" (bias p={rec.bias_p:.3g}) R²={rec.r2:.4f} → {verdict}")


@model_app.command("list")
@handle_errors
def model_list(prop: Annotated[Optional[str], typer.Option("--property")] = None,
               state: Annotated[Optional[choice(ModelState)], typer.Option("--state")] = None,
               db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """List model versions."""
    with transaction(db) as session:
        rows = svc.list_models(session, login(session, as_user), property_code=prop, state=state)
    emit(fmt, rows, lambda: table(rows, ["id", "label", "property", "grade", "family", "state",
                                         "components",
                                         "rmsecv", "last_validated_at"]))


@model_app.command("show")
@handle_errors
def model_show(version: str, db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """Everything about one model version: recipe, CV curve, validations, history, deployments."""
    with transaction(db) as session:
        doc = svc.model_detail(session, login(session, as_user), version)

    def text() -> str:
        lines = [f"{doc['label']}  ({doc['property']}, state {doc['state']}, author {doc['author']})",
                 f"  calibration set {doc['calibration_set']['name']} "
                 f"({doc['calibration_set']['n_cal']} cal / {doc['calibration_set']['n_val']} val)",
                 f"  components {doc['components']}  artifact {doc['artifact_sha256'][:16]}…",
                 f"  recipe: {doc['recipe']}"]
        for v in doc["validations"]:
            lines.append(f"  validation {v['id']} ({v['kind']}) {'pass' if v['passed'] else 'FAIL'}: "
                         f"n={v['n']} {precision_text(v)} by {v['by']}")
        for h in doc["history"]:
            sig = f" [signed: {h['signature']['meaning']}]" if h["signature"] else ""
            lines.append(f"  {h['at']:%Y-%m-%d %H:%M} {h['from']} → {h['to']} by {h['by']}{sig}"
                         + (f": {h['reason']}" if h["reason"] else ""))
        for d in doc["deployments"]:
            lines.append(f"  deployed on {d['instrument']} ({d['state']}) since {d['deployed_at']:%Y-%m-%d}")
        return "\n".join(lines)
    emit(fmt, doc, text)


@handle_errors
def predict(model: Annotated[str, typer.Option("--model")],
            spectrum: Annotated[Optional[list[int]], typer.Option("--spectrum", help="Spectrum id; repeat.")] = None,
            file: Annotated[Optional[list[Path]], typer.Option("--file", help="Spectrum file; imported first.")] = None,
            instrument: Annotated[Optional[str], typer.Option("--instrument")] = None,
            db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """Predict spectra; print value, flags and diagnostics; store the predictions."""
    with transaction(db) as session:
        batch = pred_svc.predict(session, login(session, as_user), model, spectrum_ids=spectrum,
                                 files=file, instrument=instrument)

    def text() -> str:
        rows = [{"prediction": p["id"] if p["id"] is not None else "-", "sample": p["sample"],
                 "value": round(p["value"], 4) if p["value"] is not None else "no value",
                 "flags": ",".join(p["flags"]) or "-", "checks": _checks_text(p["diagnostics"])}
                for p in batch.predictions]
        note = ("\nFlagged results are outside what the model was validated for; confirm by the "
                "reference method.") if any(p["flags"] for p in batch.predictions) else ""
        return table(rows) + note
    emit(fmt, batch.__dict__, text)


def _checks_text(diagnostics: dict) -> str:
    """Each check value against its limit where the family names one (``q`` / ``q_limit``),
    for whatever family made the prediction."""
    parts = []
    for key, value in diagnostics.items():
        limit = diagnostics.get(f"{key}_limit")
        if isinstance(value, (int, float)) and isinstance(limit, (int, float)):
            parts.append(f"{key} {value:.3g}/{limit:.3g}")
    return " ".join(parts) or "-"


def register(app: typer.Typer) -> None:
    app.add_typer(model_app, name="model")
    app.command("predict")(predict)
