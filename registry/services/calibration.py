"""Calibration sets: frozen lists of samples, their reference values and spectra.

A set is frozen when created: its membership, the reference value used for
each sample (the mean of its valid results) and the spectra used are hashed
together, and nothing edits them afterwards.
"""

from __future__ import annotations

from collections import Counter
from pathlib import Path

import numpy as np
from sqlmodel import Session, select

from ..errors import InputError, NotFoundError
from ..lifecycle.permissions import Action
from ..lineage.content_hashes import calibration_set_hash
from ..storage.models import (CalibrationMember, CalibrationSet, Grade, Property, Sample,
                              Spectrum)
from ..storage.bulk import in_blocks
from ..storage.spectra_store import load_matrix
from .admin import get_grade, get_property
from .context import Actor, audit, authorize
from .references import calibration_values


def get_calset(session: Session, name: str) -> CalibrationSet:
    cs = session.exec(select(CalibrationSet).where(CalibrationSet.name == name)).first()
    if cs is None:
        raise NotFoundError(f"unknown calibration set {name!r}")
    return cs


def members_of(session: Session, cs: CalibrationSet, role: str | None = None) -> list[CalibrationMember]:
    q = select(CalibrationMember).where(CalibrationMember.set_id == cs.id)
    if role:
        q = q.where(CalibrationMember.role == role)
    return list(session.exec(q.order_by(CalibrationMember.sample_id)).all())


def read_sample_list(path: str | Path) -> list[str]:
    """Sample ids, one per line (a ``sample_id`` header and ``#`` comments are ignored)."""
    try:
        lines = Path(path).read_text(encoding="utf-8-sig").splitlines()
    except OSError as exc:
        raise InputError(f"cannot read sample list: {exc}", file=str(path)) from None
    out = []
    for ln in lines:
        cell = ln.split(",")[0].strip()
        if cell and not cell.startswith("#") and cell.lower() != "sample_id":
            out.append(cell)
    if not out:
        raise InputError("the sample list is empty", file=str(path))
    return out


def _spectra_by_sample(session: Session, sample_ids: list[int]) -> dict[int, list[Spectrum]]:
    out: dict[int, list[Spectrum]] = {}
    for part in in_blocks(sample_ids):
        for sp in session.exec(select(Spectrum).where(Spectrum.sample_id.in_(part))
                               .order_by(Spectrum.id)).all():
            out.setdefault(sp.sample_id, []).append(sp)
    return out


def create_calibration_set(session: Session, actor: Actor, name: str, *, property_code: str,
                           grade_code: str | None, sample_external_ids: list[str] | None = None,
                           all_referenced: bool = False, validation: str | None = None,
                           validation_external_ids: list[str] | None = None,
                           description: str = "") -> CalibrationSet:
    """Freeze a calibration set.

    Parameters
    ----------
    sample_external_ids, all_referenced
        Members: the listed samples, or every sample of the grade that has a
        valid reference value for the property and a spectrum.
    validation : str, optional
        ``"duplex:FRACTION"``: split the members into calibration and
        validation by Duplex (Snee 1977) on PCA scores of their mean spectra.
    validation_external_ids : list of str, optional
        Samples that form the validation part instead.
    """
    authorize(actor, Action.CALSET_CREATE)
    name = (name or "").strip()
    if not name:
        raise InputError("a calibration set needs a name", field="NAME")
    if session.exec(select(CalibrationSet).where(CalibrationSet.name == name)).first():
        raise InputError(f"calibration set {name!r} already exists (frozen sets never change; "
                         "choose a new name)", field="NAME")
    if bool(sample_external_ids) == bool(all_referenced):
        raise InputError("give either a list of samples or all referenced samples", field="--samples")
    if validation and validation_external_ids:
        raise InputError("give either a validation rule or a list of validation samples, not both",
                         field="--validation")
    prop = get_property(session, property_code)
    grade = get_grade(session, grade_code) if grade_code else None

    if all_referenced:
        q = select(Sample)
        if grade is not None:
            q = q.where(Sample.grade_id == grade.id)
        candidates = list(session.exec(q).all())
    else:
        candidates = [_sample_by_external(session, ext, grade) for ext in sample_external_ids]
    values = calibration_values(session, [s.id for s in candidates], prop.id)
    spectra = _spectra_by_sample(session, [s.id for s in candidates])
    usable = [s for s in candidates if s.id in values and s.id in spectra]
    if not all_referenced:
        missing = [s.external_id for s in candidates if s not in usable]
        if missing:
            raise InputError(f"{len(missing)} listed sample(s) lack a valid {prop.code} reference "
                             f"value or a spectrum (or have a suspect result): "
                             f"{', '.join(missing[:10])}", field="--samples")
    if len(usable) < 3:
        raise InputError(f"only {len(usable)} sample(s) have a valid {prop.code} value and a "
                         "spectrum; a calibration set needs more", field="--property")
    # All spectra of a set share one axis; the most common axis wins.
    axis_counts = Counter(sp.axis_id for s in usable for sp in spectra[s.id])
    axis_id = axis_counts.most_common(1)[0][0]
    members_spectra = {s.id: [sp.id for sp in spectra[s.id] if sp.axis_id == axis_id] for s in usable}
    off_axis = [s.external_id for s in usable if not members_spectra[s.id]]
    if off_axis and not all_referenced:
        raise InputError(f"samples measured on another spectral axis: {', '.join(off_axis[:10])}; "
                         "resample or list them in a separate set", field="--samples")
    usable = [s for s in usable if members_spectra[s.id]]

    roles = _assign_roles(session, usable, members_spectra, validation, validation_external_ids)
    cs = CalibrationSet(name=name, property_id=prop.id, grade_id=grade.id if grade else None,
                        description=description, validation_rule=validation or
                        ("listed" if validation_external_ids else "none"),
                        n_cal=sum(r == "cal" for r in roles.values()),
                        n_val=sum(r == "val" for r in roles.values()),
                        created_by_id=actor.id, sha256="")
    session.add(cs)
    session.flush()
    members = []
    for s in usable:
        value, result_ids = values[s.id]
        m = CalibrationMember(set_id=cs.id, sample_id=s.id, role=roles[s.id], reference_value=value,
                              reference_result_ids=result_ids, spectrum_ids=members_spectra[s.id])
        session.add(m)
        members.append(m)
    session.flush()
    cs.sha256 = calibration_set_hash(cs, members)
    session.add(cs)
    session.flush()
    audit(session, actor, Action.CALSET_CREATE, entity_type="calibration_set", entity_id=cs.id,
          data={"name": name, "property": prop.code, "grade": grade.code if grade else None,
                "n_cal": cs.n_cal, "n_val": cs.n_val, "validation_rule": cs.validation_rule,
                "members": [[m.sample_id, m.role, m.reference_value] for m in members]},
          hashes={"calibration_set": [(cs.id, cs.sha256)]})
    return cs


def _sample_by_external(session: Session, ext: str, grade: Grade | None) -> Sample:
    rows = session.exec(select(Sample).where(Sample.external_id == ext)).all()
    if grade is not None:
        rows = [r for r in rows if r.grade_id in (grade.id, None)] or rows
    if not rows:
        raise NotFoundError(f"unknown sample {ext!r}")
    if len(rows) > 1:
        raise InputError(f"sample id {ext!r} exists at several sites", field="--samples")
    return rows[0]


def validation_fraction(validation: str | None) -> float | None:
    """The Duplex validation share of a ``"duplex:FRACTION"`` rule (None: no split).

    Pure parsing, so the CLI can check the option before it opens a transaction.
    """
    if not validation or validation == "none":
        return None
    kind, _, frac_text = validation.partition(":")
    if kind != "duplex":
        raise InputError(f"unknown validation rule {validation!r}; use duplex:FRACTION",
                         field="--validation")
    try:
        fraction = float(frac_text)
    except ValueError:
        raise InputError(f"validation fraction {frac_text!r} is not a number", field="--validation") from None
    if not 0 < fraction < 0.9:
        raise InputError("validation fraction must lie between 0 and 0.9", field="--validation")
    return fraction


def _assign_roles(session: Session, usable: list[Sample], spectra_ids: dict[int, list[int]],
                  validation: str | None, validation_ids: list[str] | None) -> dict[int, str]:
    roles = {s.id: "cal" for s in usable}
    if validation_ids:
        wanted = set(validation_ids)
        unknown = wanted - {s.external_id for s in usable}
        if unknown:
            raise InputError(f"validation samples not among the members: {', '.join(sorted(unknown)[:10])}",
                             field="--validation-samples")
        for s in usable:
            if s.external_id in wanted:
                roles[s.id] = "val"
        return roles
    fraction = validation_fraction(validation)
    if fraction is None:
        return roles
    n_val = int(round(fraction * len(usable)))
    n_cal = len(usable) - n_val
    if n_val < 1 or n_cal < 3:
        raise InputError(f"a {fraction:.0%} split of {len(usable)} samples leaves too few "
                         "for calibration or validation", field="--validation")
    T = _sample_scores(session, usable, spectra_ids)
    from ..selection import duplex

    _, val_idx = duplex(T, n_cal, n_val)
    for k in np.asarray(val_idx):
        roles[usable[int(k)].id] = "val"
    return roles


def _sample_scores(session: Session, samples: list[Sample], spectra_ids: dict[int, list[int]]) -> np.ndarray:
    """PCA scores (99 % variance) of each sample's mean spectrum, for splitting."""
    from ..selection.space import selection_scores

    all_ids = [sid for s in samples for sid in spectra_ids[s.id]]
    X, _ = load_matrix(session, all_ids)
    means = np.empty((len(samples), X.shape[1]))
    k = 0
    for i, s in enumerate(samples):
        n = len(spectra_ids[s.id])
        means[i] = X[k:k + n].mean(axis=0)
        k += n
    T, *_ = selection_scores(means, explained_variance=0.99)
    return T


def calibration_data(session: Session, cs: CalibrationSet, role: str | None = "cal"):
    """(X, y, groups, axis_row, members) with one row per spectrum; groups = sample id."""
    members = members_of(session, cs, role)
    if not members:
        raise InputError(f"calibration set {cs.name!r} has no {role or ''} members".replace("  ", " "))
    ids, y, groups = [], [], []
    for m in members:
        for sid in m.spectrum_ids:
            ids.append(sid)
            y.append(m.reference_value)
            groups.append(m.sample_id)
    X, axis_row = load_matrix(session, ids)
    return X, np.asarray(y, dtype=np.float64), np.asarray(groups), axis_row, members


def list_calibration_sets(session: Session, actor: Actor) -> list[dict]:
    authorize(actor, Action.VIEW)
    return [calset_summary(session, cs) for cs in
            session.exec(select(CalibrationSet).order_by(CalibrationSet.id)).all()]


def calset_summary(session: Session, cs: CalibrationSet) -> dict:
    prop = session.get(Property, cs.property_id)
    grade = session.get(Grade, cs.grade_id) if cs.grade_id else None
    members = members_of(session, cs)
    vals = [m.reference_value for m in members if m.role == "cal"]
    return {"id": cs.id, "name": cs.name, "property": prop.code, "grade": grade.code if grade else None,
            "n_cal": cs.n_cal, "n_val": cs.n_val, "sha256": cs.sha256,
            "validation_rule": cs.validation_rule, "created_at": cs.created_at,
            "range": [min(vals), max(vals)] if vals else None}
