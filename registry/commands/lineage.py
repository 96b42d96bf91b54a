"""Auditor commands: ``audit verify`` and ``trace``."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Annotated, Optional

import typer

from ..lineage.trace_render import render
from ..services import audit as svc
from .common import (AsOpt, DbOpt, DocumentOutput, FormatOpt, Output, handle_errors, login,
                     staged_output, transaction)

audit_app = typer.Typer(help="The tamper-evident audit trail.", no_args_is_help=True)

#: Exit status of ``audit verify`` when anything does not verify.
EXIT_NOT_INTACT = 1


@audit_app.command("verify")
@handle_errors
def audit_verify(fmt: FormatOpt = Output.text,
                 expect_head: Annotated[Optional[str], typer.Option(
                     "--expect-head", help="Head hash recorded earlier outside the registry; "
                                           "a different head means events were cut off the end.")] = None,
                 db: DbOpt = None, as_user: AsOpt = None) -> None:
    """Recompute the hash chain and every content hash; exit 1 if anything was altered."""
    with transaction(db) as session:
        report = svc.verify_registry(session, login(session, as_user))
    doc = report.to_json()
    head_ok = expect_head is None or expect_head.strip().lower() == report.head
    if not head_ok:
        doc["intact"] = False
        doc["chain_problems"].append({"entity_type": "audit_event", "entity_id": None, "label": "",
                                      "message": f"head {report.head} differs from the expected "
                                                 f"{expect_head} (events removed from the end?)"})
    if fmt is Output.json:
        typer.echo(json.dumps(doc, indent=2, ensure_ascii=False))
    else:
        typer.echo(f"audit trail: {report.n_events} events, head {report.head}")
        checked = ", ".join(f"{n} {k}" for k, n in report.checked.items())
        typer.echo(f"content checked: {checked}")
        if doc["intact"]:
            typer.echo(f"INTACT: every link and every content hash verifies ({report.seconds:.2f} s)")
        else:
            if report.first_broken_seq is not None:
                first = next(p for p in report.chain_problems
                             if p.entity_id == report.first_broken_seq)
                typer.echo(f"first broken link: event {report.first_broken_seq}: {first.message}")
            n = len(doc["chain_problems"]) + len(doc["content_problems"])
            typer.echo(f"NOT INTACT: {n} problem(s)")
            for p in report.problems:
                typer.echo(f"  {p.text()}")
            if not head_ok:
                typer.echo(f"  {doc['chain_problems'][-1]['message']}")
    if not doc["intact"]:
        raise typer.Exit(EXIT_NOT_INTACT)


@handle_errors
def trace(prediction: Annotated[Optional[int], typer.Option("--prediction", help="Prediction id.")] = None,
          sample: Annotated[Optional[str], typer.Option(
              "--sample", help="Sample id (SITE/SAMPLE if ids repeat across sites).")] = None,
          prop: Annotated[Optional[str], typer.Option("--property", help="With --sample.")] = None,
          model: Annotated[Optional[str], typer.Option("--model", help="Model version label.")] = None,
          fmt: Annotated[DocumentOutput, typer.Option(
              "--format", case_sensitive=False, help="text, json or html.")] = DocumentOutput.text,
          out: Annotated[Optional[Path], typer.Option("--out", help="Write to this file.")] = None,
          db: DbOpt = None, as_user: AsOpt = None) -> None:
    """Everything a result rests on: model, approvals, calibration samples, reference results."""
    with staged_output(out) as out_file, transaction(db) as session:
        doc = svc.trace(session, login(session, as_user), prediction_id=prediction, sample=sample,
                        property_code=prop, model=model)
        text = render(doc, fmt.value)
        if out_file is not None:
            out_file.write(text)
    if out is None:
        typer.echo(text, nl=False)
    else:
        typer.echo(f"trace written to {out}")


def register(app: typer.Typer) -> None:
    app.add_typer(audit_app, name="audit")
    app.command("trace")(trace)
