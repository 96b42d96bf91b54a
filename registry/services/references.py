"""Reference-method results: import (all-or-nothing), repeat checks, corrections, review.

Repeats of one sample and method are all kept; calibration uses their mean.
When the range of the n repeats exceeds the critical range f(n)·σ_r of
ISO 5725-6 (σ_r = r/2.77 from the method's repeatability r at their level;
f = 2.8, 3.3, 3.6, 3.9 for n = 2…5, :func:`registry.precision.critical_range`),
every valid repeat is marked suspect and the sample is held out of
calibration until a reviewer resolves it. For two results this is r itself
(to the standard's rounding); for more it is wider, since the range of more
results spreads more.
"""

from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Iterable

from sqlmodel import Session, select

from ..catalog import precision_at
from ..errors import InputError, NotFoundError
from ..lifecycle.permissions import Action
from ..precision import critical_range, critical_range_factor, sd_from_limit
from ..lineage.content_hashes import reference_result_hash
from ..storage.models import (Property, ReferenceMethod, ReferenceResult, ResultStatus, Sample,
                              SelectionPick, SelectionRun, Site)
from ..timeparse import parse_time
from .context import Actor, audit, authorize

REQUIRED_COLUMNS = ("sample_id", "property", "method", "value", "unit", "lab", "tested_at")
OPTIONAL_COLUMNS = ("operator", "comment")
MAX_REPORTED_ERRORS = 50
#: A reference result's states: valid, suspect (held out of calibration until a reviewer
#: decides), rejected, superseded (by a correction).
RESULT_STATUSES = tuple(s.value for s in ResultStatus)
#: A reviewer's decisions on a suspect result.
DECISIONS = ("accept", "reject")


class ImportRejected(InputError):
    """A whole import refused; ``errors`` lists every problem found (up to a limit)."""

    def __init__(self, errors: list[InputError], what: str):
        self.errors = errors
        first = errors[0]
        more = f" (and {len(errors) - 1} more problem(s))" if len(errors) > 1 else ""
        super().__init__(f"{first.message}{more}; nothing of this {what} was stored",
                         file=first.file, line=first.line, field=first.field)


reference_sha256 = reference_result_hash


@dataclass
class ReferenceImportSummary:
    file: str
    imported: int = 0
    suspect: int = 0
    linked_to_selection: int = 0
    result_ids: list[int] = field(default_factory=list)


def _lookup_sample(session: Session, external_id: str, site: Site | None) -> Sample | None:
    q = select(Sample).where(Sample.external_id == external_id)
    if site is not None:
        q = q.where(Sample.site_id == site.id)
    rows = session.exec(q).all()
    if len(rows) > 1:
        raise InputError(f"sample {external_id!r} exists at several sites; name the site")
    return rows[0] if rows else None


def _units_match(given: str, prop: Property) -> bool:
    norm = lambda u: u.replace(" ", "").replace("°", "deg").lower()  # noqa: E731
    return given.strip() == "" or norm(given) == norm(prop.unit)


def import_references(session: Session, actor: Actor, path: str | Path, *,
                      text: str | None = None, site: str | None = None) -> ReferenceImportSummary:
    """Import a CSV of reference results; any bad line rejects the whole file."""
    authorize(actor, Action.IMPORT_REFERENCES)
    label = str(path)
    if text is None:
        try:
            text = Path(path).read_text(encoding="utf-8-sig")
        except (OSError, UnicodeDecodeError) as exc:
            raise InputError(f"cannot read file: {exc}", file=label) from None
    site_row = None
    if site:
        site_row = session.exec(select(Site).where(Site.name == site)).first()
        if site_row is None:
            raise NotFoundError(f"no site named {site!r}")
    reader = csv.DictReader(io.StringIO(text))
    header = [h.strip() for h in (reader.fieldnames or [])]
    missing = [c for c in REQUIRED_COLUMNS if c not in header]
    if missing:
        raise InputError(f"missing column(s) {', '.join(missing)}; expected "
                         f"{','.join(REQUIRED_COLUMNS)}[,operator,comment]", file=label, line=1)
    reader.fieldnames = header

    props = {p.code: p for p in session.exec(select(Property)).all()}
    methods = {(m.code.upper(), m.property_id): m for m in session.exec(select(ReferenceMethod)).all()}
    sites = {s.id: s for s in session.exec(select(Site)).all()}
    errors: list[InputError] = []
    new_rows: list[tuple[int, ReferenceResult]] = []
    seen: set[tuple] = set()

    def bad(msg: str, line: int, fld: str | None) -> None:
        errors.append(InputError(msg, file=label, line=line, field=fld))

    for row in reader:
        line = reader.line_num
        if len(errors) >= MAX_REPORTED_ERRORS:
            break
        if None in row:
            bad("more cells than header columns", line, None)
            continue
        cells = {k: (row.get(k) or "").strip() for k in header}
        if not any(cells.values()):
            continue
        try:
            sample = _lookup_sample(session, cells["sample_id"], site_row)
        except InputError as exc:
            bad(exc.message, line, "sample_id")
            continue
        if sample is None:
            bad(f"unknown sample {cells['sample_id']!r} (import its spectra first)", line, "sample_id")
            continue
        prop = props.get(cells["property"].upper())
        if prop is None:
            bad(f"unknown property {cells['property']!r}", line, "property")
            continue
        method = methods.get((cells["method"].upper(), prop.id))
        if method is None:
            bad(f"unknown method {cells['method']!r} for property {prop.code}", line, "method")
            continue
        if not _units_match(cells["unit"], prop):
            bad(f"unit {cells['unit']!r} does not match {prop.code}'s unit {prop.unit or '(none)'!r}",
                line, "unit")
            continue
        try:
            value = float(cells["value"])
        except ValueError:
            bad(f"value {cells['value']!r} is not a number", line, "value")
            continue
        if not math.isfinite(value):
            bad("value must be finite", line, "value")
            continue
        if (prop.lower_limit is not None and value < prop.lower_limit) or \
                (prop.upper_limit is not None and value > prop.upper_limit):
            bad(f"value {value} is outside {prop.code}'s physical limits "
                f"[{prop.lower_limit}, {prop.upper_limit}]", line, "value")
            continue
        try:
            tested_at = parse_time(cells["tested_at"], sites[sample.site_id].timezone,
                                   file=label, line=line, field="tested_at")
        except InputError as exc:
            errors.append(exc)
            continue
        key = (sample.id, method.id, cells["lab"], tested_at)
        duplicate = key in seen or session.exec(select(ReferenceResult.id).where(
            ReferenceResult.sample_id == sample.id, ReferenceResult.method_id == method.id,
            ReferenceResult.lab == cells["lab"], ReferenceResult.tested_at == tested_at,
            ReferenceResult.status != ResultStatus.SUPERSEDED)).first() is not None
        if duplicate:
            bad("duplicate result: same sample, method, lab and test time already "
                "imported", line, None)
            continue
        seen.add(key)
        new_rows.append((line, ReferenceResult(
            sample_id=sample.id, method_id=method.id, value=value, lab=cells["lab"],
            tested_at=tested_at, operator=cells.get("operator", ""),
            comment=cells.get("comment", ""), imported_by_id=actor.id, sha256="")))
    if errors:
        raise ImportRejected(errors, "file")
    if not new_rows:
        raise InputError("no result rows found", file=label)

    summary = ReferenceImportSummary(file=label)
    for _, rr in new_rows:
        rr.selection_pick_id = _open_pick_for(session, rr.sample_id, props, rr.method_id)
        session.add(rr)
    session.flush()
    for _, rr in new_rows:
        rr.sha256 = reference_sha256(rr)
        session.add(rr)
        summary.result_ids.append(rr.id)
        summary.linked_to_selection += rr.selection_pick_id is not None
    session.flush()
    summary.imported = len(new_rows)
    touched = {(rr.sample_id, rr.method_id) for _, rr in new_rows}
    summary.suspect = sum(_check_repeats(session, s, m) for s, m in sorted(touched))
    _close_answered_runs(session, {rr.selection_pick_id for _, rr in new_rows} - {None})
    audit(session, actor, Action.IMPORT_REFERENCES, entity_type="reference_import",
          data={"file": Path(label).name, "n_results": len(new_rows), "suspect": summary.suspect},
          hashes={"reference_result": [(rr.id, rr.sha256) for _, rr in new_rows]})
    return summary


def _open_pick_for(session: Session, sample_id: int, props: dict, method_id: int) -> int | None:
    """The pick of an open selection run that sent this sample for this property, if any."""
    method = session.get(ReferenceMethod, method_id)
    prop_code = next(p.code for p in props.values() if p.id == method.property_id)
    picks = session.exec(select(SelectionPick, SelectionRun)
                         .join(SelectionRun, SelectionRun.id == SelectionPick.run_id)
                         .where(SelectionPick.sample_id == sample_id,
                                SelectionRun.state == "open")
                         .order_by(SelectionRun.id.desc())).all()
    for pick, run in picks:
        if prop_code in run.property_codes:
            return pick.id
    return None


def _close_answered_runs(session: Session, pick_ids: set[int]) -> None:
    """A selection run is answered once every pick has a result for every property it asked."""
    run_ids = {session.get(SelectionPick, pid).run_id for pid in pick_ids}
    for run_id in run_ids:
        run = session.get(SelectionRun, run_id)
        picks = session.exec(select(SelectionPick).where(SelectionPick.run_id == run_id)).all()
        needed = len(picks) * len(run.property_codes)
        have = session.exec(select(ReferenceResult.selection_pick_id, ReferenceResult.method_id)
                            .where(ReferenceResult.selection_pick_id.in_([p.id for p in picks]))
                            ).all()
        if len(set(have)) >= needed:
            run.state = "answered"
            session.add(run)
    session.flush()


def _check_repeats(session: Session, sample_id: int, method_id: int) -> int:
    """Mark valid repeats whose range exceeds f(n)·σ_r as suspect; returns how many were marked."""
    method = session.get(ReferenceMethod, method_id)
    rows = session.exec(select(ReferenceResult).where(
        ReferenceResult.sample_id == sample_id, ReferenceResult.method_id == method_id,
        ReferenceResult.status.in_([ResultStatus.VALID, ResultStatus.SUSPECT]))).all()
    n = len(rows)
    if n < 2:
        return 0
    values = [r.value for r in rows]
    level = sum(values) / n
    r_limit = precision_at(method.repeatability, level)
    if r_limit is None:
        return 0
    limit = critical_range(n, r_limit)
    spread = max(values) - min(values)
    marked = 0
    if spread > limit:
        for r in rows:
            if r.status == ResultStatus.VALID:
                r.status = ResultStatus.SUSPECT
                r.status_reason = (
                    f"suspect — range of {n} repeats {spread:.4g} exceeds the critical range "
                    f"f({n})·σ_r = {critical_range_factor(n):g} × {sd_from_limit(r_limit):.4g} "
                    f"= {limit:.4g} (ISO 5725-6; r = {r_limit:.4g} at level {level:.4g}, "
                    f"{method.code})")
                session.add(r)
                marked += 1
    session.flush()
    return marked


def resolve_suspect(session: Session, actor: Actor, result_id: int, decision: str,
                    reason: str) -> ReferenceResult:
    """A reviewer keeps (``accept``) or excludes (``reject``) a suspect result, with a reason."""
    authorize(actor, Action.RESOLVE_SUSPECT_REFERENCE)
    rr = session.get(ReferenceResult, result_id)
    if rr is None:
        raise NotFoundError(f"no reference result {result_id}")
    if rr.status != ResultStatus.SUSPECT:
        raise InputError(f"reference result {result_id} is {rr.status}, not suspect", field="ID")
    if decision not in DECISIONS:
        raise InputError("decision must be accept or reject", field="--decision")
    if not reason.strip():
        raise InputError("a reason is required", field="--reason")
    rr.status = ResultStatus.VALID if decision == "accept" else ResultStatus.REJECTED
    rr.status_reason = f"{decision}ed by {actor.name}: {reason}"
    session.add(rr)
    session.flush()
    audit(session, actor, Action.RESOLVE_SUSPECT_REFERENCE, entity_type="reference_result",
          entity_id=rr.id, data={"decision": decision, "reason": reason},
          hashes={"reference_result": [(rr.id, rr.sha256)]})
    return rr


def correct_reference(session: Session, actor: Actor, result_id: int, value: float,
                      reason: str) -> ReferenceResult:
    """A correction is a new result superseding the old one; both stay for the trace."""
    authorize(actor, Action.CORRECT_REFERENCE)
    old = session.get(ReferenceResult, result_id)
    if old is None:
        raise NotFoundError(f"no reference result {result_id}")
    if old.status == ResultStatus.SUPERSEDED:
        raise InputError(f"reference result {result_id} was already superseded", field="ID")
    if not reason.strip():
        raise InputError("a reason is required", field="--reason")
    method = session.get(ReferenceMethod, old.method_id)
    prop = session.get(Property, method.property_id)
    if (prop.lower_limit is not None and value < prop.lower_limit) or \
            (prop.upper_limit is not None and value > prop.upper_limit):
        raise InputError(f"value {value} is outside {prop.code}'s physical limits", field="--value")
    new = ReferenceResult(sample_id=old.sample_id, method_id=old.method_id, value=value,
                          lab=old.lab, tested_at=old.tested_at, operator=old.operator,
                          comment=f"correction of #{old.id}: {reason}", supersedes_id=old.id,
                          selection_pick_id=old.selection_pick_id, imported_by_id=actor.id,
                          sha256="")
    session.add(new)
    old.status = ResultStatus.SUPERSEDED
    old.status_reason = f"superseded by correction ({reason})"
    session.add(old)
    session.flush()
    new.sha256 = reference_sha256(new)
    session.add(new)
    session.flush()
    _check_repeats(session, new.sample_id, new.method_id)
    audit(session, actor, Action.CORRECT_REFERENCE, entity_type="reference_result", entity_id=new.id,
          data={"supersedes": old.id, "value": value, "reason": reason},
          hashes={"reference_result": [(old.id, old.sha256), (new.id, new.sha256)]})
    return new


def calibration_values(session: Session, sample_ids: Iterable[int], property_id: int
                       ) -> dict[int, tuple[float, list[int]]]:
    """Mean of the valid results per sample (samples with a suspect result are held out)."""
    method_ids = [m.id for m in session.exec(select(ReferenceMethod).where(
        ReferenceMethod.property_id == property_id)).all()]
    out: dict[int, tuple[float, list[int]]] = {}
    ids = list(sample_ids)
    if not ids or not method_ids:
        return out
    rows = session.exec(select(ReferenceResult).where(
        ReferenceResult.sample_id.in_(ids), ReferenceResult.method_id.in_(method_ids),
        ReferenceResult.status.in_([ResultStatus.VALID, ResultStatus.SUSPECT]))).all()
    by_sample: dict[int, list[ReferenceResult]] = {}
    for r in rows:
        by_sample.setdefault(r.sample_id, []).append(r)
    for sid, rs in by_sample.items():
        if any(r.status == ResultStatus.SUSPECT for r in rs):
            continue
        out[sid] = (sum(r.value for r in rs) / len(rs), sorted(r.id for r in rs))
    return out


def list_references(session: Session, actor: Actor, *, status: str | None = None,
                    sample: str | None = None, property_code: str | None = None,
                    limit: int = 500) -> list[dict]:
    """Reference results, newest first (e.g. the suspect ones a reviewer must resolve)."""
    authorize(actor, Action.VIEW)
    if status is not None and status not in set(ResultStatus):
        raise InputError(f"unknown status {status!r}; use valid, suspect, rejected or superseded",
                         field="--status")
    q = (select(ReferenceResult, Sample, ReferenceMethod, Property)
         .join(Sample, Sample.id == ReferenceResult.sample_id)
         .join(ReferenceMethod, ReferenceMethod.id == ReferenceResult.method_id)
         .join(Property, Property.id == ReferenceMethod.property_id))
    if status:
        q = q.where(ReferenceResult.status == status)
    if sample:
        q = q.where(Sample.external_id == sample)
    if property_code:
        q = q.where(Property.code == property_code.upper())
    rows = session.exec(q.order_by(ReferenceResult.id.desc()).limit(int(limit))).all()
    return [{"id": r.id, "sample": s.external_id, "property": p.code, "method": m.code,
             "value": r.value, "lab": r.lab, "tested_at": r.tested_at, "status": r.status,
             "reason": r.status_reason, "supersedes": r.supersedes_id} for r, s, m, p in rows]
