"""Import and export commands: spectra, reference results."""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Annotated, Optional

import typer

from ..services import intake as svc
from ..services import references as ref_svc
from ..services.references import ImportRejected
from .common import AsOpt, DbOpt, FormatOpt, emit, handle_errors, login, table, transaction

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
                   fmt: Annotated[str, typer.Option(
                       "--format", help="Input format auto, jcamp or csv; 'json' prints the "
                                        "summary as JSON (input auto-detected).")] = "auto",
                   output: Annotated[str, typer.Option("--output", help="table or json")] = "table",
                   on_duplicate: Annotated[str, typer.Option("--on-duplicate")] = "error",
                   sample_id_field: Annotated[str, typer.Option(
                       "--sample-id-field", help="JCAMP-DX header holding the sample id.")] = "TITLE",
                   db: DbOpt = None, as_user: AsOpt = None) -> None:
    """Import JCAMP-DX or CSV spectra (one transaction: all files or none)."""
    if fmt in ("json", "table"):
        output, fmt = fmt, "auto"
    try:
        with transaction(db) as session:
            actor = login(session, as_user)
            with typer.progressbar(length=0, label="importing", show_pos=True, file=sys.stderr,
                                   hidden=output == "json") as bar:
                def progress(done: int, file: str) -> None:
                    bar.pos = done
                    bar.render_progress()
                summary = svc.import_spectra(session, actor, list(paths), instrument=instrument,
                                             fmt=fmt, on_duplicate=on_duplicate,
                                             sample_id_field=sample_id_field, progress=progress)
    except ImportRejected as exc:
        _rejected(exc)
    doc = {"files": summary.files, "imported": summary.imported, "skipped": summary.skipped,
           "rejected": summary.rejected, "samples_created": summary.samples_created,
           "spectrum_ids": summary.spectrum_ids}
    emit(output, doc, f"imported {summary.imported} spectra from {summary.files} file(s); "
                      f"skipped {summary.skipped} duplicate(s); rejected 0; "
                      f"{summary.samples_created} new sample(s)")


@import_app.command("references")
@handle_errors
def import_references(file: Path, site: Annotated[Optional[str], typer.Option("--site")] = None,
                      db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = "table") -> None:
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
                   fmt: Annotated[str, typer.Option("--format", help="jcamp or csv")] = "jcamp",
                   out: Annotated[Path, typer.Option("--out")] = Path("export"),
                   form: Annotated[str, typer.Option("--jcamp-form", help="AFFN or DIFDUP")] = "AFFN",
                   db: DbOpt = None, as_user: AsOpt = None) -> None:
    """Export the spectra of samples as JCAMP-DX files or one CSV."""
    with transaction(db) as session:
        res = svc.export_spectra(session, login(session, as_user), sample, fmt=fmt, out=out,
                                 jcamp_form=form)
    typer.echo(f"wrote {res.n_spectra} spectra to {len(res.files)} file(s): "
               + ", ".join(res.files[:5]) + (" ..." if len(res.files) > 5 else ""))


@reference_app.command("resolve")
@handle_errors
def reference_resolve(result_id: int,
                      decision: Annotated[str, typer.Option("--decision", help="accept or reject")],
                      reason: Annotated[str, typer.Option("--reason")],
                      db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = "table") -> None:
    """Resolve a suspect reference result (reviewer)."""
    with transaction(db) as session:
        rr = ref_svc.resolve_suspect(session, login(session, as_user), result_id, decision, reason)
    emit(fmt, rr, f"reference result {rr.id} is now {rr.status}")


@reference_app.command("correct")
@handle_errors
def reference_correct(result_id: int, value: Annotated[float, typer.Option("--value")],
                      reason: Annotated[str, typer.Option("--reason")],
                      db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = "table") -> None:
    """Correct a reference value: a new result supersedes the old one (both are kept)."""
    with transaction(db) as session:
        rr = ref_svc.correct_reference(session, login(session, as_user), result_id, value, reason)
    emit(fmt, rr, f"reference result {rr.id} supersedes {rr.supersedes_id}")


@reference_app.command("list")
@handle_errors
def reference_list(status: Annotated[Optional[str], typer.Option(
                       "--status", help="valid, suspect, rejected or superseded")] = None,
                   sample: Annotated[Optional[str], typer.Option("--sample")] = None,
                   prop: Annotated[Optional[str], typer.Option("--property")] = None,
                   limit: Annotated[int, typer.Option("--limit")] = 500,
                   db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = "table") -> None:
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
