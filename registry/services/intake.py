"""Spectra intake: files → validated, deduplicated rows, all-or-nothing.

One call imports every file given (folders are expanded); any problem in any
file rejects the whole import, and the caller's transaction rolls back. Large
CSV files are streamed chunk by chunk, so memory is bounded by one chunk.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path
from typing import Callable, Iterator

import numpy as np
from sqlmodel import Session, select

from ..errors import InputError, NotFoundError, each_problem
from ..lifecycle.permissions import Action
from ..spectra.axes import WAVENUMBER
from ..spectra.formats import detect_format, iter_csv_spectra, read_jcamp
from ..storage.models import Grade, Instrument, Sample, Site
from ..spectra.record import content_sha256_rows
from ..storage.bulk import in_blocks, insert_rows, select_in
from ..storage.spectra_store import (SPECTRUM_COLUMNS, existing_hashes, get_or_create_axis,
                                     insert_spectra)
from ..storage.types import utcnow
from .context import Actor, audit, authorize
from .references import MAX_REPORTED_ERRORS, ImportRejected
from ..timeparse import parse_time

SPECTRUM_SUFFIXES = {".jdx", ".dx", ".jcamp", ".jcm", ".csv", ".tsv", ".txt"}
_SAMPLE, _SHA = SPECTRUM_COLUMNS.index("sample_id"), SPECTRUM_COLUMNS.index("sha256")
_SAMPLE_COLUMNS = ("site_id", "external_id", "grade_id", "batch", "source", "taken_at",
                   "created_at")


@dataclass
class Batch:
    """Spectra from one file that share one ascending wavenumber axis."""

    file: str
    axis: np.ndarray
    Y: np.ndarray  # float32 (m, p)
    sample_ids: list[str]
    metadata: list[dict]
    lines: list[int | None]


@dataclass
class SpectraImportSummary:
    files: int = 0
    imported: int = 0
    skipped: int = 0
    rejected: list[str] = field(default_factory=list)
    spectrum_ids: list[int] = field(default_factory=list)
    samples_created: int = 0
    per_file: dict[str, dict] = field(default_factory=dict)


def expand_paths(paths: list[str | Path]) -> list[Path]:
    """Files as given, and every spectrum file inside a given folder (sorted)."""
    out: list[Path] = []
    for p in paths:
        p = Path(p)
        if p.is_dir():
            out += sorted(f for f in p.iterdir()
                          if f.is_file() and f.suffix.lower() in SPECTRUM_SUFFIXES)
        elif p.is_file():
            out.append(p)
        else:
            raise InputError("no such file or folder", file=str(p))
    if not out:
        raise InputError("no spectrum files found", file=", ".join(str(p) for p in paths))
    return out


def read_batches(path: Path, fmt: str = "auto", *, chunk_rows: int = 1000,
                 sample_id_field: str = "TITLE") -> Iterator[Batch]:
    """Batches of spectra from one file, each on one ascending 1/CM axis."""
    label = str(path)
    kind = detect_format(path) if fmt == "auto" else fmt
    if kind == "csv":
        for chunk in iter_csv_spectra(path, chunk_rows=chunk_rows, file_label=label):
            if chunk.x_unit != WAVENUMBER:
                recs = [r.to_wavenumber() for r in chunk.records()]
                yield from _group_records(label, recs)
            else:
                yield Batch(label, chunk.axis, chunk.Y, list(chunk.sample_ids),
                            list(chunk.metadata), list(chunk.first_line))
    elif kind == "jcamp":
        recs = [r.to_wavenumber() for r in read_jcamp(path, sample_id_field=sample_id_field,
                                                      file_label=label)]
        yield from _group_records(label, recs)
    else:
        raise InputError(f"unknown format {fmt!r}; use auto, jcamp or csv", field="--input-format")


def _group_records(label: str, recs: list) -> Iterator[Batch]:
    groups: dict[bytes, list] = {}
    for r in recs:
        groups.setdefault(r.x.tobytes(), []).append(r)
    for members in groups.values():
        yield Batch(label, members[0].x, np.vstack([r.y for r in members]).astype(np.float32),
                    [r.sample_id for r in members], [dict(r.metadata) for r in members],
                    [r.source_line for r in members])


@dataclass
class _SampleRef:
    """The few sample columns intake needs (cheaper than ORM objects for thousands of rows)."""

    id: int
    site_id: int
    external_id: str
    grade_id: int | None


class _Context:
    """Lookups shared by all batches of one import (instruments, sites, grades, samples)."""

    def __init__(self, session: Session, default_instrument: Instrument | None):
        self.session = session
        self.default_instrument = default_instrument
        self.instruments = {i.serial: i for i in session.exec(select(Instrument)).all()}
        self.sites = {s.id: s for s in session.exec(select(Site)).all()}
        self.grades = {g.code: g for g in session.exec(select(Grade)).all()}
        self.samples: dict[tuple[int, str], _SampleRef] = {}
        self.sample_details: dict[tuple[int, str], tuple[str, str, object]] = {}
        self.created_samples = 0
        self.axis_ids: dict[bytes, int] = {}

    def axis_id(self, axis: np.ndarray) -> int:
        """Id of the stored axis with these values (a folder of files shares one axis;
        looked up once, not once per file)."""
        key = np.ascontiguousarray(axis, dtype="<f8").tobytes()
        if key not in self.axis_ids:
            self.axis_ids[key] = get_or_create_axis(self.session, axis).id
        return self.axis_ids[key]

    def _load(self, keys: list[tuple[int, str]]) -> None:
        """Cache the stored samples among ``keys`` (batched by site; the external-id index
        serves ``IN``, which a row-value ``IN`` does not on SQLite)."""
        by_site: dict[int, list[str]] = {}
        for site_id, ext in keys:
            by_site.setdefault(site_id, []).append(ext)
        for site_id, exts in by_site.items():
            for sid, ext, grade_id in select_in(self.session, Sample.__table__,
                                                ["id", "external_id", "grade_id"], "external_id",
                                                exts, where={"site_id": site_id}):
                self.samples[(site_id, ext)] = _SampleRef(sid, site_id, ext, grade_id)

    def resolve_samples(self, wanted: dict[tuple[int, str], Grade | None]) -> dict[tuple[int, str], int]:
        """Sample ids for (site, external id) keys, creating missing samples in one batch."""
        self._load([k for k in wanted if k not in self.samples])
        to_create = [k for k in wanted if k not in self.samples]
        if to_create:
            now = utcnow()
            rows = []
            for site_id, ext in to_create:
                batch, source, taken = self.sample_details.get((site_id, ext), ("", "", None))
                grade = wanted[(site_id, ext)]
                rows.append((site_id, ext, grade.id if grade else None, batch, source, taken, now))
            insert_rows(self.session, Sample.__table__, _SAMPLE_COLUMNS, rows)
            self._load(to_create)
            self.created_samples += len(to_create)
        return {k: self.samples[k].id for k in wanted}


#: What an import does with a spectrum already stored: refuse the import, or skip it.
DUPLICATE_POLICIES = ("error", "skip")


def import_spectra(session: Session, actor: Actor, paths: list[str | Path], *,
                   instrument: str | None = None, fmt: str = "auto", on_duplicate: str = "error",
                   sample_id_field: str = "TITLE", chunk_rows: int = 1000,
                   progress: Callable[[int, str], None] | None = None) -> SpectraImportSummary:
    """Import spectrum files (JCAMP-DX, CSV) as one all-or-nothing action.

    Parameters
    ----------
    instrument : str, optional
        Serial of the analyzer; a CSV ``instrument`` column overrides it per row.
    on_duplicate : {"error", "skip"}
        What to do with a spectrum whose content hash is already stored.
    progress : callable, optional
        Called with (spectra handled so far, current file).
    """
    authorize(actor, Action.IMPORT_SPECTRA)
    if on_duplicate not in DUPLICATE_POLICIES:
        raise InputError("the rule for spectra already stored must be error or skip", field="--on-duplicate")
    default_inst = None
    if instrument:
        default_inst = session.exec(select(Instrument).where(Instrument.serial == instrument)).first()
        if default_inst is None:
            raise NotFoundError(f"unknown instrument {instrument!r}")
    files = expand_paths(paths)
    ctx = _Context(session, default_inst)
    summary = SpectraImportSummary(files=len(files))
    errors: list[InputError] = []
    seen: set[str] = set()
    vouched: list[tuple[int, str]] = []
    now = utcnow()
    for path in files:
        per = {"imported": 0, "skipped": 0}
        summary.per_file[str(path)] = per
        try:
            for batch in read_batches(path, fmt, chunk_rows=chunk_rows,
                                      sample_id_field=sample_id_field):
                rows = _prepare(ctx, batch, errors, seen, on_duplicate, per, now, actor)
                if rows and not errors:
                    ids = insert_spectra(session, rows)
                    vouched += [(i, r[_SHA]) for i, r in zip(ids, rows)]
                    per["imported"] += len(ids)
                if progress:
                    progress(sum(p["imported"] + p["skipped"] for p in summary.per_file.values()),
                             str(path))
                if len(errors) >= MAX_REPORTED_ERRORS:
                    break
        except InputError as exc:
            for problem in each_problem(exc):  # a file may report several bad lines at once
                if problem.file is None:
                    problem = InputError(problem.message, file=str(path), line=problem.line,
                                         field=problem.field)
                errors.append(problem)
        if any(e.file == str(path) for e in errors):
            summary.rejected.append(str(path))
        if len(errors) >= MAX_REPORTED_ERRORS:
            break
    if errors:
        raise ImportRejected(errors, "import")
    summary.imported = len(vouched)
    summary.skipped = sum(p["skipped"] for p in summary.per_file.values())
    summary.spectrum_ids = [i for i, _ in vouched]
    summary.samples_created = ctx.created_samples
    if summary.imported == 0 and summary.skipped == 0:
        raise InputError("no spectra found", file=", ".join(str(f) for f in files))
    audit(session, actor, Action.IMPORT_SPECTRA, entity_type="spectrum_import",
          data={"files": [Path(f).name for f in files], "instrument": instrument,
                "imported": summary.imported, "skipped": summary.skipped,
                "samples_created": summary.samples_created},
          hashes={"spectrum": vouched})
    return summary


def _prepare(ctx: _Context, batch: Batch, errors: list, seen: set, on_duplicate: str,
             per: dict, now: datetime, actor: Actor) -> list[list]:
    """Validate one batch and build its rows (:data:`SPECTRUM_COLUMNS` order); problems go
    to ``errors``."""
    session = ctx.session
    axis_id = ctx.axis_id(batch.axis)
    Y = np.ascontiguousarray(batch.Y, dtype="<f4")
    digests = content_sha256_rows(batch.axis, Y)
    source_file = os.path.basename(batch.file)[:400]
    stored = existing_hashes(session, digests)
    rows = []
    pending: list[tuple[tuple[int, str], Grade | None]] = []
    for i, digest in enumerate(digests):
        line = batch.lines[i]
        meta = batch.metadata[i] or {}
        where = dict(file=batch.file, line=line)
        sid = (batch.sample_ids[i] or "").strip()
        if not sid:
            errors.append(InputError("empty sample id", field="sample_id", **where))
            continue
        serial = str(meta.get("instrument") or "").strip()
        inst = ctx.instruments.get(serial) if serial else ctx.default_instrument
        if inst is None:
            msg = (f"unknown instrument {serial!r}" if serial else
                   "no instrument: name the instrument or give an instrument column")
            errors.append(InputError(msg, field="instrument", **where))
            continue
        if digest in seen or digest in stored:
            if on_duplicate == "skip":
                per["skipped"] += 1
                continue
            what = "earlier in this import" if digest in seen else f"as spectrum {stored.get(digest)}"
            errors.append(InputError(f"spectrum of sample {sid!r} is identical to one already stored "
                                     f"({what}); choose to skip spectra already stored to ignore it",
                                     field="data", **where))
            continue
        seen.add(digest)
        grade_code = str(meta.get("grade") or "").strip()
        grade = None
        if grade_code:
            grade = ctx.grades.get(grade_code)
            if grade is None:
                errors.append(InputError(f"unknown grade {grade_code!r}", field="grade", **where))
                continue
        tz = ctx.sites[inst.site_id].timezone
        acquired = meta.get("acquired_at")
        try:
            if isinstance(acquired, datetime):
                acquired_at = acquired
            elif acquired:
                acquired_at = parse_time(str(acquired), tz, field="acquired_at", **where)
            else:
                acquired_at = now
        except InputError as exc:
            errors.append(exc)
            continue
        taken_at = None
        if meta.get("taken_at"):
            try:
                taken_at = parse_time(str(meta["taken_at"]), tz, field="taken_at", **where)
            except InputError as exc:
                errors.append(exc)
                continue
        if errors:
            continue  # keep validating, but build no rows once anything is wrong
        key = (inst.site_id, sid)
        known = ctx.samples.get(key)
        if known is not None and grade is not None and known.grade_id not in (None, grade.id):
            errors.append(InputError(f"sample {sid!r} is recorded as another grade", field="grade",
                                     **where))
            continue
        pending.append((key, grade))
        ctx.sample_details.setdefault(key, (str(meta.get("batch") or "")[:120],
                                            str(meta.get("source") or "")[:200], taken_at))
        rows.append([key, inst.id, axis_id, acquired_at, Y[i].tobytes(), digest, source_file,
                     str(meta.get("operator") or "")[:120], actor.id, now])
    if errors or not rows:
        return []
    wanted: dict[tuple[int, str], Grade | None] = {}
    for key, grade in pending:
        if wanted.get(key) is None:
            wanted[key] = grade
    ids = ctx.resolve_samples(wanted)
    for key, grade in pending:
        row = ctx.samples[key]
        if grade is not None and row.grade_id not in (None, grade.id):
            errors.append(InputError(f"sample {key[1]!r} is recorded as another grade",
                                     field="grade", file=batch.file))
            return []
    for r in rows:
        r[_SAMPLE] = ids[r[_SAMPLE]]
    return rows


@dataclass
class ExportSummary:
    files: list[str]
    n_spectra: int


def export_spectra(session: Session, actor: Actor, sample_ids: list[str], *, fmt: str,
                   out: str | Path, jcamp_form: str = "AFFN") -> ExportSummary:
    """Write the spectra of the given samples as JCAMP-DX (one file each) or one CSV."""
    from ..spectra.formats import write_csv_spectra, write_jcamp
    from ..spectra.record import SpectrumRecord
    from ..storage.models import Spectrum
    from ..storage.spectra_store import axis_values
    from ..storage.models import SpectralAxis

    authorize(actor, Action.EXPORT_DATA)
    if fmt not in ("jcamp", "csv"):
        raise InputError(f"unknown export format {fmt!r}; use jcamp or csv", field="--file-format")
    samples = []
    for ext in sample_ids:
        rows = session.exec(select(Sample).where(Sample.external_id == ext)).all()
        if not rows:
            raise NotFoundError(f"unknown sample {ext!r}")
        samples += rows
    instruments = {i.id: i.serial for i in session.exec(select(Instrument)).all()}
    grades = {g.id: g.code for g in session.exec(select(Grade)).all()}
    records = []
    for sample in samples:
        spectra = session.exec(select(Spectrum).where(Spectrum.sample_id == sample.id)
                               .order_by(Spectrum.acquired_at, Spectrum.id)).all()
        for sp in spectra:
            x = axis_values(session.get(SpectralAxis, sp.axis_id))
            meta = {"instrument": instruments[sp.instrument_id],
                    "acquired_at": sp.acquired_at.strftime("%Y-%m-%dT%H:%M:%SZ"),
                    "operator": sp.operator, "grade": grades.get(sample.grade_id, ""),
                    "title": sample.external_id}
            records.append(SpectrumRecord(sample.external_id, x, np.frombuffer(sp.data, "<f4"),
                                          metadata=meta))
    if not records:
        raise NotFoundError("the selected samples have no spectra")
    out = Path(out)
    written: list[str] = []
    if fmt == "csv":
        axes = {r.x.tobytes() for r in records}
        if len(axes) > 1:
            raise InputError("the spectra are on different axes; export them as JCAMP-DX or "
                             "export one axis at a time", field="--file-format")
        if out.is_dir():
            out = out / "spectra.csv"
        write_csv_spectra(records, out, metadata_fields=["instrument", "acquired_at", "operator", "grade"])
        written.append(str(out))
    else:
        single = len(records) == 1 and out.suffix.lower() in (".jdx", ".dx")
        if not single:
            out.mkdir(parents=True, exist_ok=True)
        for k, r in enumerate(records, 1):
            target = out if single else out / f"{_safe(r.sample_id)}_{k:03d}.jdx"
            target.write_text(write_jcamp(r, form=jcamp_form))
            written.append(str(target))
    audit(session, actor, Action.EXPORT_DATA, entity_type="spectrum_export",
          data={"samples": sample_ids, "format": fmt, "n_spectra": len(records),
                "files": [Path(w).name for w in written]})
    return ExportSummary(files=written, n_spectra=len(records))


def _safe(name: str) -> str:
    return "".join(c if c.isalnum() or c in "-_." else "_" for c in name)[:80] or "sample"


def spectra_of_samples(session: Session, actor: Actor, sample_ids: list[str]) -> list[int]:
    """Ids of the stored spectra of the named samples, in storage order."""
    from ..storage.models import Spectrum

    authorize(actor, Action.VIEW)
    out: list[int] = []
    for part in in_blocks(sample_ids):
        out += session.exec(select(Spectrum.id).join(Sample, Sample.id == Spectrum.sample_id)
                            .where(Sample.external_id.in_(part))).all()
    return sorted(out)
