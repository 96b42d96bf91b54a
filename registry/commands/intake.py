"""Import and export commands: spectra, reference results."""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Annotated, Optional

import typer

from ..errors import InputError
from ..services import intake as svc
from ..services import references as ref_svc
from ..services.references import DECISIONS, RESULT_STATUSES, ImportRejected
from ..spectra.formats import FILE_FORMATS, JCAMP_FORMS
from .common import (AsOpt, DbOpt, FormatOpt, Output, check_output_path, choice, emit,
                     handle_errors, login, table, transaction)

import_app = typer.Typer(help="Bring spectra and reference results into the registry.",
                         no_args_is_help=True)
export_app = typer.Typer(help="Write registry data to files.", no_args_is_help=True)
reference_app = typer.Typer(help="Review and correct reference results.", no_args_is_help=True)


def _rejected(exc: ImportRejected) -> None:
    typer.echo(f"rejected: {len(exc.errors)} problem(s); nothing of this import was stored", err=True)
    for e in exc.errors:
        typer.echo(f"  {e.located()}", err=True)
    raise typer.Exit(2)


@import_app.command("spectra")
@handle_errors
def import_spectra(paths: Annotated[list[Path], typer.Argument(help="Files or folders.")],
                   instrument: Annotated[Optional[str], typer.Option("--instrument")] = None,
                   input_format: Annotated[choice(("auto", *FILE_FORMATS)), typer.Option(
                       "--input-format",
                       help="File format (auto: from extension and content).")] = "auto",
                   on_duplicate: Annotated[choice(svc.DUPLICATE_POLICIES), typer.Option(
                       "--on-duplicate",
                       help="A spectrum already stored: refuse the import, or skip it.")] = "error",
                   sample_id_field: Annotated[str, typer.Option(
                       "--sample-id-field", help="JCAMP-DX header holding the sample id.")] = "TITLE",
                   db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """Import JCAMP-DX or CSV spectra (one transaction: all files or none)."""
    try:
        with transaction(db) as session:
            actor = login(session, as_user)
            with typer.progressbar(length=0, label="importing", show_pos=True, file=sys.stderr,
                                   hidden=fmt is Output.json) as bar:
                def progress(done: int, file: str) -> None:
                    bar.pos = done
                    bar.render_progress()
                summary = svc.import_spectra(session, actor, list(paths), instrument=instrument,
                                             fmt=input_format, on_duplicate=on_duplicate,
                                             sample_id_field=sample_id_field, progress=progress)
    except ImportRejected as exc:
        _rejected(exc)
    doc = {"files": summary.files, "imported": summary.imported, "skipped": summary.skipped,
           "rejected": summary.rejected, "samples_created": summary.samples_created,
           "spectrum_ids": summary.spectrum_ids}
    emit(fmt, doc, f"imported {summary.imported} spectra from {summary.files} file(s); "
                      f"skipped {summary.skipped} duplicate(s); rejected 0; "
                      f"{summary.samples_created} new sample(s)")


@import_app.command("references")
@handle_errors
def import_references(file: Path, site: Annotated[Optional[str], typer.Option("--site")] = None,
                      db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """Import reference-method results from CSV (the whole file or nothing)."""
    try:
        with transaction(db) as session:
            summary = ref_svc.import_references(session, login(session, as_user), file, site=site)
    except ImportRejected as exc:
        _rejected(exc)
    emit(fmt, summary.__dict__,
         f"imported {summary.imported} result(s); {summary.suspect} marked suspect (range of repeats "
         f"beyond the ISO 5725-6 critical range); {summary.linked_to_selection} answer a "
         "selection run")


@export_app.command("spectra")
@handle_errors
def export_spectra(sample: Annotated[list[str], typer.Option("--sample", help="Sample id; repeat.")],
                   file_format: Annotated[choice(FILE_FORMATS), typer.Option("--file-format")] = "jcamp",
                   out: Annotated[Path, typer.Option(
                       "--out", help="Folder for JCAMP-DX files, file for CSV.")] = Path("export"),
                   form: Annotated[choice(JCAMP_FORMS), typer.Option(
                       "--jcamp-form", case_sensitive=False)] = "AFFN",
                   db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """Export the spectra of samples as JCAMP-DX files or one CSV."""
    _check_export_target(out, file_format)
    with transaction(db) as session:
        res = svc.export_spectra(session, login(session, as_user), sample, fmt=file_format,
                                 out=out, jcamp_form=form)
    emit(fmt, {"spectra": res.n_spectra, "files": res.files},
         f"wrote {res.n_spectra} spectra to {len(res.files)} file(s): "
         + ", ".join(res.files[:5]) + (" ..." if len(res.files) > 5 else ""))


def _check_export_target(out: Path, file_format: str) -> None:
    """The export's file (CSV, or one JCAMP-DX file) or folder must be writable."""
    if file_format == "csv" or out.suffix.lower() in (".jdx", ".dx"):
        check_output_path(out / "spectra.csv" if out.is_dir() else out)
        return
    existing = out
    while not existing.exists() and existing != existing.parent:
        existing = existing.parent
    if not existing.is_dir():
        raise InputError(f"{existing} is not a folder", file=str(out), field="--out")
    check_output_path(existing / "spectra.jdx")


@reference_app.command("resolve")
@handle_errors
def reference_resolve(result_id: int,
                      decision: Annotated[choice(DECISIONS), typer.Option("--decision")],
                      reason: Annotated[str, typer.Option("--reason")],
                      db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """Resolve a suspect reference result (reviewer)."""
    with transaction(db) as session:
        rr = ref_svc.resolve_suspect(session, login(session, as_user), result_id, decision, reason)
    emit(fmt, rr, f"reference result {rr.id} is now {rr.status}")


@reference_app.command("correct")
@handle_errors
def reference_correct(result_id: int, value: Annotated[float, typer.Option("--value")],
                      reason: Annotated[str, typer.Option("--reason")],
                      db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """Correct a reference value: a new result supersedes the old one (both are kept)."""
    with transaction(db) as session:
        rr = ref_svc.correct_reference(session, login(session, as_user), result_id, value, reason)
    emit(fmt, rr, f"reference result {rr.id} supersedes {rr.supersedes_id}")


@reference_app.command("list")
@handle_errors
def reference_list(status: Annotated[Optional[choice(RESULT_STATUSES)], typer.Option("--status")] = None,
                   sample: Annotated[Optional[str], typer.Option("--sample")] = None,
                   prop: Annotated[Optional[str], typer.Option("--property")] = None,
                   limit: Annotated[int, typer.Option("--limit")] = 500,
                   db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """List reference results, newest first (e.g. --status suspect for the review queue)."""
    with transaction(db) as session:
        rows = ref_svc.list_references(session, login(session, as_user), status=status,
                                       sample=sample, property_code=prop, limit=limit)
    emit(fmt, rows, lambda: table(rows, ["id", "sample", "property", "method", "value", "lab",
                                         "tested_at", "status", "reason"]))


def register(app: typer.Typer) -> None:
    app.add_typer(import_app, name="import")
    app.add_typer(export_app, name="export")
    app.add_typer(reference_app, name="reference")
