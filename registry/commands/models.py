"""Model commands: train, validate, list, show; and predict."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Optional

import typer

from ..chemometrics.validation import precision_summary, precision_text
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
                recipe: Annotated[Optional[Path], typer.Option("--recipe", help="Recipe JSON file.")] = None,
                max_components: Annotated[int, typer.Option("--max-components")] = 20,
                cv: Annotated[int, typer.Option("--cv", help="Number of folds.")] = 10,
                cv_method: Annotated[choice(FOLD_METHODS), typer.Option(
                    "--cv-method", help="venetian (default), random (seeded), kfold (contiguous "
                                        "blocks) or loso")] = "venetian",
                selection: Annotated[choice(SELECTION_RULES), typer.Option("--selection")] = "haaland-thomas",
                components: Annotated[Optional[int], typer.Option("--components", help="Override the chosen size.")] = None,
                parent: Annotated[Optional[str], typer.Option("--parent")] = None,
                db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """Train a draft model version on a frozen calibration set."""
    steps = svc.read_recipe(recipe)
    with transaction(db) as session:
        mv = svc.train_model_version(session, login(session, as_user), calset, recipe=steps,
                                     max_components=max_components, folds=cv, cv_method=cv_method,
                                     selection=selection, n_components=components, parent=parent)
        doc = {"id": mv.id, "label": mv.label, "state": mv.state, "components": mv.n_components,
               "cv": mv.cv, "artifact_sha256": mv.artifact_sha256}
    curve = doc["cv"]["rmsecv"]

    def text() -> str:
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
               state: Annotated[Optional[str], typer.Option("--state")] = None,
               db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """List model versions."""
    with transaction(db) as session:
        rows = svc.list_models(session, login(session, as_user), property_code=prop, state=state)
    emit(fmt, rows, lambda: table(rows, ["id", "label", "property", "grade", "state", "components",
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
        rows = [{"prediction": p["id"], "sample": p["sample"], "value": round(p["value"], 4),
                 "flags": ",".join(p["flags"]) or "-",
                 "leverage": f"{p['diagnostics']['leverage']:.3g}/{p['diagnostics']['leverage_limit']:.3g}",
                 "Q": f"{p['diagnostics']['q']:.3g}/{p['diagnostics']['q_limit']:.3g}",
                 "NN": f"{p['diagnostics']['nn_distance']:.3g}/{p['diagnostics']['nn_limit']:.3g}"}
                for p in batch.predictions]
        note = ("\nFlagged results are outside what the model was validated for; confirm by the "
                "reference method.") if any(p["flags"] for p in batch.predictions) else ""
        return table(rows) + note
    emit(fmt, batch.__dict__, text)


def register(app: typer.Typer) -> None:
    app.add_typer(model_app, name="model")
    app.command("predict")(predict)
