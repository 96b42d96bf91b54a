"""Calibration-set commands."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Optional

import typer

from ..services import calibration as svc
from .common import AsOpt, DbOpt, FormatOpt, Output, emit, handle_errors, login, table, transaction

calset_app = typer.Typer(help="Frozen calibration sets.", no_args_is_help=True)


@calset_app.command("create")
@handle_errors
def calset_create(name: str,
                  prop: Annotated[str, typer.Option("--property")],
                  grade: Annotated[Optional[str], typer.Option("--grade")] = None,
                  samples: Annotated[Optional[Path], typer.Option("--samples", help="File of sample ids.")] = None,
                  all_referenced: Annotated[bool, typer.Option("--all-referenced")] = False,
                  validation: Annotated[Optional[str], typer.Option(
                      "--validation", help="duplex:FRACTION splits off a validation part.")] = None,
                  validation_samples: Annotated[Optional[Path], typer.Option("--validation-samples")] = None,
                  description: Annotated[str, typer.Option("--description")] = "",
                  db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """Freeze a calibration set (membership, reference values, spectra) under a content hash."""
    ids = svc.read_sample_list(samples) if samples else None
    svc.validation_fraction(validation)  # checked before anything is written
    val_ids = svc.read_sample_list(validation_samples) if validation_samples else None
    with transaction(db) as session:
        cs = svc.create_calibration_set(
            session, login(session, as_user), name, property_code=prop, grade_code=grade,
            sample_external_ids=ids, all_referenced=all_referenced, validation=validation,
            validation_external_ids=val_ids, description=description)
        doc = svc.calset_summary(session, cs)
    emit(fmt, doc, f"calibration set {cs.name} frozen: {cs.n_cal} calibration + {cs.n_val} "
                   f"validation samples, sha256 {cs.sha256[:16]}…")


@calset_app.command("list")
@handle_errors
def calset_list(db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """List calibration sets."""
    with transaction(db) as session:
        rows = svc.list_calibration_sets(session, login(session, as_user))
    emit(fmt, rows, lambda: table(rows, ["id", "name", "property", "grade", "n_cal", "n_val", "created_at"]))


def register(app: typer.Typer) -> None:
    app.add_typer(calset_app, name="calset")
