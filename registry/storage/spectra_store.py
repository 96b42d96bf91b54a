"""Bulk storage of spectra: axes shared by hash, float32 blobs, fast read-back.

This is the one place that turns numpy arrays into rows and back; the ORM is
bypassed for the large payloads because building 10,000 ORM objects costs more
than the write itself.
"""

from __future__ import annotations

from typing import Iterable, Sequence

import numpy as np
from sqlalchemy import select
from sqlmodel import Session

from ..errors import InputError, IntegrityError
from ..spectra.axes import axis_sha256, on_axis
from ..spectra.record import content_sha256
from .bulk import in_blocks, insert_rows, select_in
from .models import SpectralAxis, Spectrum


def get_or_create_axis(session: Session, x: np.ndarray, unit: str = "1/CM") -> SpectralAxis:
    """The stored axis with exactly these values (float64), created on first use."""
    x = np.ascontiguousarray(x, dtype="<f8")
    digest = axis_sha256(x, unit)
    row = session.execute(select(SpectralAxis).where(SpectralAxis.sha256 == digest)).scalars().first()
    if row is None:
        row = SpectralAxis(unit=unit, n_points=int(x.size), first_x=float(x[0]), last_x=float(x[-1]),
                           values=x.tobytes(), sha256=digest)
        session.add(row)
        session.flush()
    return row


def axis_values(axis: SpectralAxis) -> np.ndarray:
    values = np.frombuffer(axis.values, dtype="<f8")
    if axis_sha256(values, axis.unit) != axis.sha256:
        raise IntegrityError(f"spectral axis {axis.id}: stored values do not match their hash")
    return values.astype(np.float64)


def existing_hashes(session: Session, digests: Sequence[str]) -> dict[str, int]:
    """Which of ``digests`` are already stored, mapped to their spectrum id."""
    rows = select_in(session, Spectrum.__table__, ["sha256", "id"], "sha256", digests)
    return {digest: int(sid) for digest, sid in rows}


#: Columns of a spectrum row as :func:`insert_spectra` takes them, in order.
SPECTRUM_COLUMNS = ("sample_id", "instrument_id", "axis_id", "acquired_at", "data", "sha256",
                    "source_file", "operator", "imported_by_id", "created_at")


def insert_spectra(session: Session, rows: list[tuple]) -> list[int]:
    """Insert spectrum rows (tuples in :data:`SPECTRUM_COLUMNS` order) in one executemany;
    returns their ids in order.

    Ids are read back by content hash, which is unique: SQLite's RETURNING would run row
    by row, and a row-by-row insert costs more than the hash lookup.
    """
    if not rows:
        return []
    insert_rows(session, Spectrum.__table__, SPECTRUM_COLUMNS, rows)
    at = SPECTRUM_COLUMNS.index("sha256")
    found = existing_hashes(session, [r[at] for r in rows])
    return [found[r[at]] for r in rows]


def load_matrix(session: Session, spectrum_ids: Sequence[int], *, verify: bool = False,
                dtype=np.float64) -> tuple[np.ndarray, SpectralAxis]:
    """Spectra as one (n, p) array in the order of ``spectrum_ids``, with their shared axis.

    Refuses spectra on different axes: they must be resampled explicitly first.
    With ``verify``, each spectrum's content hash is recomputed.
    """
    ids = [int(i) for i in spectrum_ids]
    if not ids:
        raise InputError("no spectra to load")
    position = {sid: k for k, sid in enumerate(ids)}
    if len(position) != len(ids):
        raise InputError("duplicate spectrum ids requested")
    out: np.ndarray | None = None
    axis_id = None
    axis_row = None
    axis_x = None
    seen = 0
    for sid, aid, blob, digest in _raw_rows(session, ids, with_hash=verify):
        if axis_id is None:
            axis_id = aid
            axis_row = session.get(SpectralAxis, aid)
            out = np.empty((len(ids), axis_row.n_points), dtype=dtype)
            if verify:
                axis_x = axis_values(axis_row)
        elif aid != axis_id:
            raise InputError(f"spectrum {sid} is on another axis than spectrum {ids[0]}: "
                             "resample to one axis before combining")
        y = np.frombuffer(blob, dtype="<f4")
        if verify and content_sha256(axis_x, y) != digest:
            raise IntegrityError(f"spectrum {sid}: stored data do not match their hash")
        out[position[sid]] = y
        seen += 1
    if seen != len(ids):
        raise InputError(f"{len(ids) - seen} requested spectra do not exist")
    return out, axis_row


def load_on_axis(session: Session, spectrum_ids: Sequence[int], target_axis: np.ndarray
                 ) -> np.ndarray:
    """Spectra (on any stored axes) as one (n, p) float64 array on ``target_axis``, rows in
    the order of ``spectrum_ids``; each stored axis is read once and placed by
    :func:`registry.spectra.axes.on_axis`."""
    ids = [int(i) for i in spectrum_ids]
    target = np.asarray(target_axis, dtype=np.float64)
    out = np.empty((len(ids), target.size))
    rows_of_axis: dict[int, list[int]] = {}
    axis_of = dict(row for part in in_blocks(sorted(set(ids))) for row in session.execute(
        select(Spectrum.id, Spectrum.axis_id).where(Spectrum.id.in_(part))).all())
    missing = [sid for sid in ids if sid not in axis_of]
    if missing:
        raise InputError(f"{len(missing)} requested spectra do not exist (first: {missing[0]})")
    for k, sid in enumerate(ids):
        rows_of_axis.setdefault(axis_of[sid], []).append(k)
    for rows in rows_of_axis.values():
        X, axis_row = load_matrix(session, [ids[k] for k in rows])
        out[rows] = on_axis(X, axis_values(axis_row), target)
    return out


def _raw_rows(session: Session, ids: list[int], *, with_hash: bool):
    """(id, axis_id, data, sha256) rows straight from the DB-API cursor.

    The blobs are the bulk of a calibration set; SQLAlchemy's row objects would
    cost more than the read itself, so this one query uses the driver directly
    (same SQL on SQLite and PostgreSQL but for the parameter style).
    """
    conn = session.connection()
    ph = "?" if conn.dialect.paramstyle == "qmark" else "%s"
    columns = "id, axis_id, data, " + ("sha256" if with_hash else "''")
    cursor = conn.connection.driver_connection.cursor()
    try:
        for part in _id_blocks(ids):
            if part[-1] - part[0] + 1 == len(part):
                cursor.execute(f"SELECT {columns} FROM spectrum WHERE id BETWEEN {ph} AND {ph}",
                               (part[0], part[-1]))
            else:
                marks = ",".join([ph] * len(part))
                cursor.execute(f"SELECT {columns} FROM spectrum WHERE id IN ({marks})", tuple(part))
            while True:
                rows = cursor.fetchmany(2000)
                if not rows:
                    break
                yield from rows
    finally:
        cursor.close()


def _id_blocks(ids: list[int]) -> list[list[int]]:
    """Blocks of ids for queries: contiguous runs as one block (queried by range),
    the rest in blocks of :data:`~registry.storage.bulk.IN_BLOCK`."""
    ordered = sorted(ids)
    blocks: list[list[int]] = []
    run = [ordered[0]]
    for i in ordered[1:]:
        if i == run[-1] + 1:
            run.append(i)
        else:
            blocks.append(run)
            run = [i]
    blocks.append(run)
    out: list[list[int]] = []
    loose: list[int] = []
    for b in blocks:
        if len(b) >= 64:
            out.append(b)
        else:
            loose += b
    out += list(in_blocks(loose))
    return out


def iter_spectrum_rows(session: Session, ids: Iterable[int]):
    for part in in_blocks(ids):
        yield from session.execute(select(Spectrum).where(Spectrum.id.in_(part))).scalars()
