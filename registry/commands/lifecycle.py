"""Lifecycle commands: model submit/approve/reject/activate/retire/signatures, QC, due,
revalidation policies and triggers, reference-method edits.

Signed moves ask for the signer's password again (or read ``SPECLEDGER_PASSWORD``
in scripts): logging in and signing are two separate acts.
"""

from __future__ import annotations

import json
from dataclasses import asdict
from typing import Annotated, Optional

import typer

from ..errors import InputError
from ..lifecycle.revalidation_rules import TriggerKind
from ..services import lifecycle as svc
from ..services import qc as qc_svc
from ..services import revalidation as reval_svc
from .common import (AsOpt, DbOpt, FormatOpt, Output, choice, emit, handle_errors, login,
                     read_password, table, transaction)
from .models import model_app

qc_app = typer.Typer(help="QC results of models in use and their control charts.",
                     no_args_is_help=True)
policy_app = typer.Typer(help="Revalidation policies per property and grade.", no_args_is_help=True)
trigger_app = typer.Typer(help="Revalidation triggers raised or cleared by hand.",
                          no_args_is_help=True)
method_app = typer.Typer(help="Reference (primary test) methods.", no_args_is_help=True)

ReasonOpt = Annotated[str, typer.Option("--reason", help="Why (kept with the record).")]


def _signer_password(actor_name: str) -> str:
    return read_password(f"Signature: password for {actor_name}")


# --------------------------------------------------------------------------- model moves

def model_submit(version: str, reason: ReasonOpt = "", db: DbOpt = None, as_user: AsOpt = None,
                 fmt: FormatOpt = Output.text) -> None:
    """Submit your validated model version for review."""
    with transaction(db) as session:
        moved = svc.submit_model(session, login(session, as_user), version, reason)
    doc = {"label": moved.label, "state": moved.state}
    emit(fmt, doc, f"{doc['label']} submitted for review (state {doc['state']})")


def _signed(fn, version: str, fmt: str, db, as_user, where: str | None = None, **kw) -> None:
    with transaction(db) as session:
        actor = login(session, as_user)
        moved = fn(session, actor, version, password=_signer_password(actor.name), **kw)
    sig = moved.signature
    doc = {"label": moved.label, "state": moved.state, "signature": asdict(sig)}
    if moved.deployment_id is not None:
        doc["deployment_id"] = moved.deployment_id
    on = f" on {where}" if where else ""
    emit(fmt, doc, f"{doc['label']}: signed '{sig.meaning}'{on} by {sig.signer} at "
                   f"{sig.signed_at:%Y-%m-%d %H:%M:%S} UTC (state now {doc['state']}); "
                   f"content SHA-256 {sig.signed_sha256[:16]}…")


def model_approve(version: str, reason: ReasonOpt = "", db: DbOpt = None, as_user: AsOpt = None,
                  fmt: FormatOpt = Output.text) -> None:
    """Approve a version in review (signed; not its author, not its calibration-set creator)."""
    _signed(svc.approve_model, version, fmt, db, as_user, reason=reason)


def model_reject(version: str, reason: ReasonOpt = "", db: DbOpt = None, as_user: AsOpt = None,
                 fmt: FormatOpt = Output.text) -> None:
    """Reject a version (signed, with a reason); a fix is trained as a new version."""
    _signed(svc.reject_model, version, fmt, db, as_user, reason=reason)


def model_activate(version: str,
                   instrument: Annotated[str, typer.Option("--instrument", help="Instrument serial.")],
                   reason: ReasonOpt = "", db: DbOpt = None, as_user: AsOpt = None,
                   fmt: FormatOpt = Output.text) -> None:
    """Deploy an approved version on an instrument (signed); supersedes the one active there."""
    _signed(svc.activate_model, version, fmt, db, as_user, instrument, instrument=instrument,
            reason=reason)


def model_retire(version: str, reason: ReasonOpt = "",
                 instrument: Annotated[Optional[str], typer.Option(
                     "--instrument", help="Retire on this instrument only (default: everywhere).")] = None,
                 db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """Take a version out of service (signed, with a reason)."""
    _signed(svc.retire_model, version, fmt, db, as_user, instrument, reason=reason,
            instrument=instrument)


def model_signatures(version: str, db: DbOpt = None, as_user: AsOpt = None,
                     fmt: FormatOpt = Output.text) -> None:
    """Signatures on a version and whether what they signed is still unchanged."""
    with transaction(db) as session:
        rows = svc.model_signatures(session, login(session, as_user), version)

    def text() -> str:
        return table([{**r, "problems": "; ".join(r["problems"]) or "-"} for r in rows],
                     ["id", "signer", "meaning", "signed_at", "status", "reason", "problems"])
    emit(fmt, rows, text)


# --------------------------------------------------------------------------- QC

@qc_app.command("add")
@handle_errors
def qc_add(instrument: Annotated[str, typer.Option("--instrument")],
           material: Annotated[str, typer.Option("--material", help="Control material name.")],
           value: Annotated[float, typer.Option("--value", help="Result predicted by the model.")],
           known: Annotated[Optional[float], typer.Option(
               "--known", help="Known value of the material (needed with its first result).")] = None,
           prop: Annotated[Optional[str], typer.Option("--property")] = None,
           grade: Annotated[Optional[str], typer.Option(
               "--grade", help="When several grades' models are active on the instrument.")] = None,
           at: Annotated[Optional[str], typer.Option(
               "--at", help="When measured (ISO 8601; without an offset: the site's local time; default now).")] = None,
           db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """Record a QC result; the chart is checked and a signal raises a revalidation trigger."""
    with transaction(db) as session:
        r = qc_svc.add_qc_result(session, login(session, as_user), instrument=instrument,
                                 material=material, value=value, known_value=known,
                                 property_code=prop, measured_at=at, grade_code=grade)
        doc = {"id": r.id, "instrument": instrument, "material": material,
               "measured_value": r.measured_value, "known_value": r.known_value,
               "signals": r.signals}
    msg = f"QC result {doc['id']} stored: {value:g} (known {doc['known_value']:g})"
    if doc["signals"]:
        msg += "\nSIGNAL: " + "; ".join(s["message"] for s in doc["signals"]) + \
               "\nThe model is due for revalidation; its results are flagged until a reviewer " \
               "clears the signal."
    emit(fmt, doc, msg)


@qc_app.command("chart")
@handle_errors
def qc_chart(instrument: Annotated[str, typer.Option("--instrument")],
             material: Annotated[str, typer.Option("--material")],
             prop: Annotated[Optional[str], typer.Option("--property")] = None,
             model: Annotated[Optional[str], typer.Option("--model")] = None,
             db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """Text summary of a control chart (individuals, moving range, EWMA) and its signals."""
    with transaction(db) as session:
        doc = qc_svc.qc_chart(session, login(session, as_user), instrument=instrument,
                              material=material, property_code=prop, model=model)

    def text() -> str:
        lines = [f"QC chart: {doc['material']} ({doc['property']}) on {doc['instrument']}, "
                 f"model {doc['model']}: {doc['n']} results, mean {doc['mean']:.5g}"
                 + (f", known {doc['known_value']:g} (bias {doc['bias_vs_known']:+.4g})"
                    if doc["known_value"] is not None else "")]
        c = doc["chart"]
        if c is None:
            lines.append(f"  {doc['note']}")
        else:
            lines += [f"  centre {c['center']:.5g}  σ̂ {c['sigma']:.4g} (from the first "
                      f"{c['baseline_size']} results)",
                      f"  individuals limits {c['i_lcl']:.5g} … {c['i_ucl']:.5g}; moving range "
                      f"MR̄ {c['mr_bar']:.4g}, upper limit {c['mr_ucl']:.4g}; EWMA λ {c['lam']:g}"]
            if doc["n"] < doc["min_results_for_signals"]:
                lines.append(f"  (signals are raised from result {doc['min_results_for_signals']} on)")
            for s in doc["signals"]:
                lines.append(f"  point {s['index'] + 1}: {s['rule']}: {s['message']}")
            if not doc["signals"]:
                lines.append("  in control")
        for t in doc["open_triggers"]:
            lines.append(f"  open QC signal trigger {t['id']} raised {t['raised_at']:%Y-%m-%d %H:%M} UTC "
                         f"(clear with: qc clear {t['id']} --reason ...)")
        return "\n".join(lines)
    emit(fmt, doc, text)


@qc_app.command("clear")
@handle_errors
def qc_clear(trigger: int, reason: ReasonOpt = "", db: DbOpt = None, as_user: AsOpt = None,
             fmt: FormatOpt = Output.text) -> None:
    """Clear a QC signal once its cause is found (reviewer)."""
    with transaction(db) as session:
        t = qc_svc.clear_qc_signal(session, login(session, as_user), trigger, reason)
    emit(fmt, t, f"QC signal {t.id} cleared: {t.clear_reason}")


# --------------------------------------------------------------------------- due

@handle_errors
def due(within: Annotated[Optional[int], typer.Option(
            "--within", help="Only versions due within DAYS (overdue always shown).")] = None,
        db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """Approved and active model versions by revalidation due date, overdue first."""
    with transaction(db) as session:
        rows = reval_svc.due_list(session, login(session, as_user), within_days=within)

    def local(r) -> str:
        if not r["due_at_local"]:
            return f"{r['due_at']:%Y-%m-%d %H:%M} UTC"
        return "; ".join(f"{d['due_at_local']:%Y-%m-%d %H:%M %Z} ({d['site']})"
                         for d in r["due_at_local"])

    def text() -> str:
        return table([{"model": r["label"], "property": r["property"], "grade": r["grade"],
                       "state": r["state"], "due": local(r), "days_left": r["days_left"],
                       "status": "OVERDUE" if r["overdue"] else "",
                       "reasons": "; ".join(r["reasons"]) or "-"} for r in rows])
    emit(fmt, rows, text)


# --------------------------------------------------------------------------- policy, triggers, methods

@policy_app.command("set")
@handle_errors
def policy_set(prop: Annotated[str, typer.Option("--property")],
               grade: Annotated[Optional[str], typer.Option("--grade", help="Default: all grades.")] = None,
               interval_days: Annotated[Optional[int], typer.Option("--interval-days")] = None,
               window: Annotated[Optional[int], typer.Option("--coverage-window-days")] = None,
               threshold: Annotated[Optional[float], typer.Option("--coverage-threshold")] = None,
               min_count: Annotated[Optional[int], typer.Option("--coverage-min-count")] = None,
               db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """Set the revalidation interval and coverage-drift settings of a property (and grade)."""
    with transaction(db) as session:
        row = reval_svc.set_policy(session, login(session, as_user), prop, grade, interval_days,
                                   coverage_window_days=window, coverage_threshold=threshold,
                                   coverage_min_count=min_count)
    emit(fmt, row, f"policy for {prop.upper()}{'/' + grade if grade else ''}: every "
                   f"{row.interval_days} days; coverage drift above {row.coverage_threshold:g} of "
                   f"≥ {row.coverage_min_count} predictions in {row.coverage_window_days} days")


@policy_app.command("list")
@handle_errors
def policy_list(db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """Revalidation policies (properties without one use 365 days)."""
    with transaction(db) as session:
        rows = reval_svc.list_policies(session, login(session, as_user))
    emit(fmt, rows, lambda: table(rows))


@trigger_app.command("raise")
@handle_errors
def trigger_raise(version: str,
                  kind: Annotated[choice(k.value for k in TriggerKind), typer.Option("--kind")],
                  detail: Annotated[str, typer.Option("--detail", help="What happened.")] = "",
                  db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """Make a model version due for revalidation now."""
    with transaction(db) as session:
        t = reval_svc.raise_trigger(session, login(session, as_user), version, kind, detail)
    emit(fmt, t, f"trigger {t.id} ({t.kind}) raised on {version}")


@trigger_app.command("clear")
@handle_errors
def trigger_clear(trigger: int, reason: ReasonOpt = "", db: DbOpt = None, as_user: AsOpt = None,
                  fmt: FormatOpt = Output.text) -> None:
    """Withdraw an open trigger with a reason (QC signals: reviewer only)."""
    with transaction(db) as session:
        t = reval_svc.clear_trigger(session, login(session, as_user), trigger, reason)
    emit(fmt, t, f"trigger {t.id} ({t.kind}) cleared: {t.clear_reason}")


@trigger_app.command("list")
@handle_errors
def trigger_list(version: Annotated[Optional[str], typer.Option("--model")] = None,
                 all_: Annotated[bool, typer.Option("--all", help="Include cleared triggers.")] = False,
                 db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """Revalidation triggers (open ones by default)."""
    with transaction(db) as session:
        rows = reval_svc.list_triggers(session, login(session, as_user), label=version,
                                       open_only=not all_)
    emit(fmt, rows, lambda: table(rows, ["id", "model", "kind", "raised_at", "cleared_at",
                                         "detail", "clear_reason"]))


def _precision_option(text: str | None, field: str):
    if text is None:
        return None
    try:
        return float(text)
    except ValueError:
        pass
    try:
        return json.loads(text)
    except json.JSONDecodeError as exc:
        raise InputError(f"give a number or a JSON precision spec: {exc.msg}", field=field) from None


@method_app.command("edit")
@handle_errors
def method_edit(code: str, prop: Annotated[str, typer.Option("--property")],
                cost: Annotated[Optional[float], typer.Option("--cost")] = None,
                turnaround: Annotated[Optional[int], typer.Option("--turnaround-days")] = None,
                repeatability: Annotated[Optional[str], typer.Option(
                    "--repeatability", help='r: a number, or JSON such as {"kind": "linear", "a": 0.1, "b": 0.01}')] = None,
                reproducibility: Annotated[Optional[str], typer.Option(
                    "--reproducibility", help="R: a number or a JSON precision spec.")] = None,
                name: Annotated[Optional[str], typer.Option("--name")] = None,
                db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """Edit a reference method; a new name or precision makes the property's models due."""
    with transaction(db) as session:
        m = reval_svc.edit_method(session, login(session, as_user), code, prop, cost=cost,
                                  turnaround_days=turnaround, name=name,
                                  repeatability=_precision_option(repeatability, "--repeatability"),
                                  reproducibility=_precision_option(reproducibility, "--reproducibility"))
    emit(fmt, m, f"method {m.code} ({prop.upper()}) updated")


def register(app: typer.Typer) -> None:
    for name, fn in (("submit", model_submit), ("approve", model_approve),
                     ("reject", model_reject), ("activate", model_activate),
                     ("retire", model_retire), ("signatures", model_signatures)):
        model_app.command(name)(handle_errors(fn))
    app.add_typer(qc_app, name="qc")
    app.command("due")(due)
    app.add_typer(policy_app, name="policy")
    app.add_typer(trigger_app, name="trigger")
    app.add_typer(method_app, name="method")
