"""Stored selection runs: listing, detail with the results that came back, the send list
as CSV, replay on the current registry state, and closing a run.

A run is made by :func:`registry.services.selection.run_selection`; this module reads
and manages what it stored.
"""

from __future__ import annotations

import csv
import io
import math
from datetime import datetime
from pathlib import Path
from typing import Any

from sqlmodel import Session, select

from ..errors import InputError, NotFoundError
from ..lifecycle.permissions import Action
from ..storage.models import (Grade, ReferenceMethod, ReferenceResult, SelectionPick,
                              SelectionRun, User)
from .context import Actor, audit, authorize
from .selection import SEND_LIST_COLUMNS, run_selection, samples_by_id


def send_list_csv(rows: list[dict[str, Any]]) -> str:
    """The send list as CSV text (columns :data:`SEND_LIST_COLUMNS`)."""
    buf = io.StringIO()
    writer = csv.DictWriter(buf, fieldnames=list(SEND_LIST_COLUMNS), lineterminator="\n")
    writer.writeheader()
    for r in rows:
        writer.writerow({c: _csv_cell(r.get(c)) for c in SEND_LIST_COLUMNS})
    return buf.getvalue()


def write_send_list(path: str | Path, rows: list[dict[str, Any]]) -> None:
    try:
        Path(path).write_text(send_list_csv(rows), encoding="utf-8")
    except OSError as exc:
        raise InputError(f"cannot write the send list: {exc}", file=str(path)) from None


def _csv_cell(v: Any) -> Any:
    if v is None:
        return ""
    if isinstance(v, float):
        return "" if not math.isfinite(v) else f"{v:.6g}"
    if isinstance(v, (list, tuple)):
        return ";".join(str(x) for x in v)
    return v


def get_run(session: Session, run_id: int | str) -> SelectionRun:
    try:
        rid = int(run_id)
    except (TypeError, ValueError):
        raise InputError(f"a selection run is named by its number, got {run_id!r}", field="RUN") from None
    run = session.get(SelectionRun, rid)
    if run is None:
        raise NotFoundError(f"no selection run {rid}")
    return run


def run_status(state: str, n_picks: int, n_answered: int) -> str:
    """In words: closed, answered (every pick has a result), partly answered, or waiting."""
    if state == "closed":
        return "closed"
    if n_picks and n_answered >= n_picks:
        return "answered"
    return "partly answered" if n_answered else "waiting for results"


def list_runs(session: Session, actor: Actor) -> list[dict[str, Any]]:
    authorize(actor, Action.VIEW)
    users = {u.id: u.name for u in session.exec(select(User)).all()}
    grades = {g.id: g.code for g in session.exec(select(Grade)).all()}
    out = []
    for run in session.exec(select(SelectionRun).order_by(SelectionRun.id)).all():
        pick_ids = session.exec(select(SelectionPick.id).where(SelectionPick.run_id == run.id)).all()
        answered = set(session.exec(select(ReferenceResult.selection_pick_id).where(
            ReferenceResult.selection_pick_id.in_(pick_ids))).all()) if pick_ids else set()
        out.append({"id": run.id, "created_at": run.created_at, "by": users.get(run.user_id),
                    "method": run.method, "properties": run.property_codes,
                    "grade": grades.get(run.grade_id), "picks": len(pick_ids),
                    "answered_picks": len(answered),
                    "status": run_status(run.state, len(pick_ids), len(answered)),
                    "total_cost": run.total_cost, "budget": run.budget, "state": run.state,
                    "pool_size": run.pool_size})
    return out


def run_detail(session: Session, actor: Actor, run_id: int | str) -> dict[str, Any]:
    """A stored run with its picks and the reference results linked back to each pick."""
    authorize(actor, Action.VIEW)
    run = get_run(session, run_id)
    picks = session.exec(select(SelectionPick).where(SelectionPick.run_id == run.id)
                         .order_by(SelectionPick.rank)).all()
    samples = {s.id: s for s in samples_by_id(session, [p.sample_id for p in picks])}
    methods = {m.id: m.code for m in session.exec(select(ReferenceMethod)).all()}
    results: dict[int, list] = {}
    if picks:
        for rr in session.exec(select(ReferenceResult).where(
                ReferenceResult.selection_pick_id.in_([p.id for p in picks]))).all():
            results.setdefault(rr.selection_pick_id, []).append(
                {"method": methods.get(rr.method_id), "value": rr.value, "status": rr.status})
    user = session.get(User, run.user_id)
    grade = session.get(Grade, run.grade_id) if run.grade_id else None
    return {"id": run.id, "created_at": run.created_at, "by": user.name if user else None,
            "method": run.method, "properties": run.property_codes,
            "grade": grade.code if grade else None, "state": run.state,
            "parameters": run.parameters, "pool_sha256": run.pool_sha256,
            "pool_size": run.pool_size, "budget": run.budget, "total_cost": run.total_cost,
            "benefit": run.benefit,
            "picks": [{"rank": p.rank, "sample_id": samples[p.sample_id].external_id,
                       "batch": samples[p.sample_id].batch,
                       "source": (p.rationale or {}).get("source") or samples[p.sample_id].source,
                       "use": (p.rationale or {}).get("use", "calibration"),
                       "tests": (p.rationale or {}).get("tests", ""), "cost": p.cost,
                       "cumulative_cost": p.cumulative_cost, "reason": p.reason,
                       "results": results.get(p.id, [])} for p in picks]}


def replay_selection(session: Session, actor: Actor, run_id: int | str) -> dict[str, Any]:
    """Recompute a stored run from its parameters on the current registry state.

    Nothing is written. The run's own picks count as not yet sent, so on an
    unchanged registry the replay must give the same pool hash and picks.
    """
    run = get_run(session, run_id)
    p = run.parameters
    parse = lambda v: datetime.fromisoformat(v) if v else None  # noqa: E731
    res = run_selection(session, actor, property_codes=p["property_codes"], grade=p["grade"],
                        method=p["method"], n=p["n"], budget=p["budget"], pool=p["pool"],
                        since=parse(p["since"]), until=parse(p["until"]), site=p["site"],
                        recipe=p["recipe"], explained_variance=p["explained_variance"],
                        n_components=p["n_components"], metric=p["metric"],
                        space_property=p.get("space_property"), store=False,
                        ignore_run_id=run.id)
    stored = [pk.sample_id for pk in session.exec(select(SelectionPick).where(
        SelectionPick.run_id == run.id).order_by(SelectionPick.rank)).all()]
    return {"run_id": run.id, "same_pool": res.pool_sha256 == run.pool_sha256,
            "same_picks": res.picked_sample_ids == stored, "pool_sha256": res.pool_sha256,
            "picks": [r["sample_id"] for r in res.rows]}


def close_run(session: Session, actor: Actor, run_id: int | str, reason: str) -> SelectionRun:
    """Close an open run whose remaining samples will not be tested (lab manager).

    Its picks stop holding their samples out of later pools; results that did
    arrive stay linked to their picks.
    """
    authorize(actor, Action.SELECTION_RUN)
    run = get_run(session, run_id)
    if run.state != "open":
        raise InputError(f"selection run {run.id} is {run.state}; only an open run can be closed",
                         field="RUN")
    if not (reason or "").strip():
        raise InputError("a reason is required", field="--reason")
    run.state = "closed"
    session.add(run)
    session.flush()
    audit(session, actor, Action.SELECTION_CLOSE, entity_type="selection_run", entity_id=run.id,
          data={"reason": reason})
    return run
