"""Intake through the service layer: all-or-nothing imports, duplicates, references, repeats.

External anchors: repeatability r of ASTM D2699 (RON) = 0.2 at RON 90–100 (from memory);
repeats whose range exceeds the critical range f(n)·σ_r are suspect (ISO 5725-6:1994,
f = 2.8, 3.3, 3.6, 3.9 for n = 2…5; σ_r = r/2.77, ISO 5725-6 and ASTM E177).
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from sqlalchemy import text
from sqlmodel import select

from registry.errors import InputError, NotFoundError, PermissionDenied
from registry.services import intake, references
from registry.services.references import ImportRejected, calibration_values
from registry.spectra.formats import read_jcamp, write_jcamp
from registry.spectra.record import SpectrumRecord
from registry.storage.engine import session_scope
from registry.storage.models import ENTITY_TABLES, ReferenceResult, Sample

AXIS = np.linspace(650.0, 4000.0, 300)


def snapshot(engine) -> dict:
    """Every row of every table, to prove a rejected import changed nothing."""
    out = {}
    with engine.connect() as conn:
        for name, table in ENTITY_TABLES.items():
            rows = conn.execute(text(f"SELECT * FROM {table.__tablename__} ORDER BY 1")).all()
            out[name] = [tuple(r) for r in rows]
    return out


def jdx(tmp_path, name, sample_id, seed, **meta):
    rng = np.random.default_rng(seed)
    rec = SpectrumRecord(sample_id, AXIS, (rng.random(AXIS.size) * 0.8).astype(np.float32),
                         metadata={"title": sample_id, **meta})
    path = tmp_path / name
    path.write_text(write_jcamp(rec, form="DIFDUP"))
    return path


def csv_file(tmp_path, name, rows):
    head = "sample_id,grade,acquired_at," + ",".join(f"{v:.10g}" for v in AXIS)
    lines = [head] + [f"{sid},{grade},{when}," + ",".join(f"{v:.9g}" for v in y)
                      for sid, grade, when, y in rows]
    path = tmp_path / name
    path.write_text("\n".join(lines) + "\n")
    return path


def test_folder_of_jcamp_and_csv_imports_once(registry, tmp_path):
    engine, actors = registry
    folder = tmp_path / "in"
    folder.mkdir()
    for k in range(3):
        jdx(folder, f"s{k}.jdx", f"J{k}", k)
    rng = np.random.default_rng(9)
    csv_file(folder, "batch.csv", [(f"C{k}", "PREM95", "2027-03-01T09:00",
                                    rng.random(AXIS.size).astype(np.float32)) for k in range(4)])
    with session_scope(engine) as s:
        summary = intake.import_spectra(s, actors["analyst"], [folder], instrument="IR-100")
    assert (summary.files, summary.imported, summary.skipped) == (4, 7, 0)
    assert summary.samples_created == 7
    with session_scope(engine) as s:
        c = s.exec(select(Sample).where(Sample.external_id == "C0")).one()
        assert c.grade_id is not None
    # Same folder again: duplicates are an error by default, skipped on request.
    before = snapshot(engine)
    with pytest.raises(ImportRejected, match="identical to one already stored"):
        with session_scope(engine) as s:
            intake.import_spectra(s, actors["analyst"], [folder], instrument="IR-100")
    assert snapshot(engine) == before
    with session_scope(engine) as s:
        again = intake.import_spectra(s, actors["analyst"], [folder], instrument="IR-100",
                                      on_duplicate="skip")
    assert (again.imported, again.skipped) == (0, 7)


def test_one_bad_file_rejects_the_whole_import(registry, tmp_path):
    engine, actors = registry
    good = jdx(tmp_path, "good.jdx", "OK1", 1)
    rng = np.random.default_rng(2)
    y = rng.random(AXIS.size).astype(np.float32)
    bad = csv_file(tmp_path, "bad.csv", [("B1", "PREM95", "2027-03-01", y),
                                          ("B2", "NOSUCHGRADE", "2027-03-01", y + 1)])
    before = snapshot(engine)
    with pytest.raises(ImportRejected) as err:
        with session_scope(engine) as s:
            intake.import_spectra(s, actors["analyst"], [good, bad], instrument="IR-100")
    e = err.value.errors[0]
    assert e.file.endswith("bad.csv") and e.line == 3 and e.field == "grade"
    assert snapshot(engine) == before


def test_unknown_instrument_and_role_are_refused(registry, tmp_path):
    engine, actors = registry
    path = jdx(tmp_path, "a.jdx", "A1", 1)
    with pytest.raises(NotFoundError, match="unknown instrument"):
        with session_scope(engine) as s:
            intake.import_spectra(s, actors["analyst"], [path], instrument="NOPE")
    for role in ("admin", "lab_manager", "reviewer", "auditor"):
        with pytest.raises(PermissionDenied, match="may not import spectra"):
            with session_scope(engine) as s:
                intake.import_spectra(s, actors[role], [path], instrument="IR-100")


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=st.binary(min_size=0, max_size=400))
def test_garbage_never_writes_anything(registry, tmp_path, data):
    engine, actors = registry
    path = tmp_path / "garbage.jdx"
    path.write_bytes(b"##TITLE=x\n##JCAMP-DX=4.24\n" + data)
    before = snapshot(engine)
    try:
        with session_scope(engine) as s:
            intake.import_spectra(s, actors["analyst"], [path], instrument="IR-100",
                                  on_duplicate="skip")
    except InputError:
        assert snapshot(engine) == before
    else:  # a valid file by chance: then it was stored completely
        assert snapshot(engine) != before


def test_export_round_trip_jcamp(registry, tmp_path):
    engine, actors = registry
    path = jdx(tmp_path, "r.jdx", "RT1", 5)
    with session_scope(engine) as s:
        intake.import_spectra(s, actors["analyst"], [path], instrument="IR-100")
    with session_scope(engine) as s:
        res = intake.export_spectra(s, actors["auditor"], ["RT1"], fmt="jcamp", out=tmp_path / "out")
    original = read_jcamp(path)[0]
    back = read_jcamp(res.files[0])[0]
    np.testing.assert_array_equal(back.x, original.x)
    np.testing.assert_array_equal(back.y, original.y)


# ----------------------------------------------------------------------------- references
def _refs(tmp_path, body: str, name="refs.csv"):
    path = tmp_path / name
    path.write_text("sample_id,property,method,value,unit,lab,tested_at\n" + body)
    return path


@pytest.fixture
def with_samples(registry, tmp_path):
    engine, actors = registry
    rng = np.random.default_rng(4)
    path = csv_file(tmp_path, "s.csv", [(f"R{k}", "PREM95", "2027-03-01",
                                         rng.random(AXIS.size).astype(np.float32)) for k in range(4)])
    with session_scope(engine) as s:
        intake.import_spectra(s, actors["analyst"], [path], instrument="IR-100")
    return engine, actors


@pytest.mark.parametrize("row,field,needle", [
    ("NOPE,RON,ASTM D2699,95.0,,L,2027-03-02", "sample_id", "unknown sample"),
    ("R0,RON,ASTM D9999,95.0,,L,2027-03-02", "method", "unknown method"),
    ("R0,DENSITY,ASTM D4052,0.75,kg/m3,L,2027-03-02", "unit", "does not match"),
    ("R0,RON,ASTM D2699,250,,L,2027-03-02", "value", "physical limits"),
    ("R0,RON,ASTM D2699,abc,,L,2027-03-02", "value", "not a number"),
    ("R0,RON,ASTM D2699,95,,L,yesterday", "tested_at", "ISO-8601"),
])
def test_bad_reference_rows_reject_the_file_with_line_and_field(with_samples, tmp_path, row, field, needle):
    engine, actors = with_samples
    path = _refs(tmp_path, "R1,RON,ASTM D2699,95.0,,L,2027-03-02\n" + row + "\n")
    before = snapshot(engine)
    with pytest.raises(ImportRejected) as err:
        with session_scope(engine) as s:
            references.import_references(s, actors["analyst"], path)
    e = err.value.errors[0]
    assert (e.line, e.field) == (3, field) and needle in e.message
    assert snapshot(engine) == before


def test_duplicate_rows_are_rejected(with_samples, tmp_path):
    engine, actors = with_samples
    row = "R1,RON,ASTM D2699,95.0,,L,2027-03-02\n"
    with pytest.raises(ImportRejected, match="duplicate"):
        with session_scope(engine) as s:
            references.import_references(s, actors["analyst"], _refs(tmp_path, row + row))
    with session_scope(engine) as s:
        references.import_references(s, actors["analyst"], _refs(tmp_path, row))
    with pytest.raises(ImportRejected, match="duplicate"):
        with session_scope(engine) as s:
            references.import_references(s, actors["analyst"], _refs(tmp_path, row, "again.csv"))


def test_repeats_beyond_the_critical_range_are_suspect_and_held_out(with_samples, tmp_path):
    engine, actors = with_samples
    # RON r = 0.2 (ASTM D2699, from memory): 95.0 vs 95.1 agree, 94.0 vs 94.6 do not.
    body = ("R0,RON,ASTM D2699,95.0,,L,2027-03-02\nR0,RON,ASTM D2699,95.1,,L,2027-03-03\n"
            "R1,RON,ASTM D2699,94.0,,L,2027-03-02\nR1,RON,ASTM D2699,94.6,,L,2027-03-03\n")
    with session_scope(engine) as s:
        summary = references.import_references(s, actors["analyst"], _refs(tmp_path, body))
    assert summary.imported == 4 and summary.suspect == 2
    with session_scope(engine) as s:
        ids = {x.external_id: x.id for x in s.exec(select(Sample)).all()}
        from registry.services.admin import get_property

        values = calibration_values(s, [ids["R0"], ids["R1"]], get_property(s, "RON").id)
    assert values[ids["R0"]][0] == pytest.approx(95.05)  # mean of the repeats
    assert ids["R1"] not in values  # held out until a reviewer resolves it
    with session_scope(engine) as s:
        suspect = s.exec(select(ReferenceResult).where(ReferenceResult.status == "suspect")).all()
        assert all("exceeds the critical range f(2)" in r.status_reason for r in suspect)
        with pytest.raises(PermissionDenied):
            references.resolve_suspect(s, actors["analyst"], suspect[0].id, "reject", "x")
        references.resolve_suspect(s, actors["reviewer"], suspect[0].id, "reject",
                                   "engine knock sensor fault that day")
        references.resolve_suspect(s, actors["reviewer"], suspect[1].id, "accept", "confirmed")
    with session_scope(engine) as s:
        values = calibration_values(s, [ids["R1"]], get_property(s, "RON").id)
    assert ids["R1"] in values and len(values[ids["R1"]][1]) == 1


# RON r = 0.2 (ASTM D2699, from memory), σ_r = 0.2/2.77 = 0.0722; critical ranges
# f(n)·σ_r = 0.202, 0.238, 0.260, 0.281 for n = 2…5 (ISO 5725-6 Table 1 factors). For each n
# a range just inside (kept) and just outside (suspect); every "kept" range exceeds r = 0.2,
# so comparing the range with r for every n would wrongly mark those repeats suspect.
@pytest.mark.parametrize("n, kept, suspect", [(2, 0.201, 0.21), (3, 0.23, 0.25),
                                              (4, 0.25, 0.27), (5, 0.27, 0.29)])
def test_repeats_are_judged_by_the_iso_5725_6_critical_range_for_n(with_samples, tmp_path,
                                                                  n, kept, suspect):
    engine, actors = with_samples
    lines = []
    for sample, spread in (("R0", kept), ("R1", suspect)):
        # n results evenly spread over the range, on different days
        for k, v in enumerate(np.linspace(95.0, 95.0 + spread, n)):
            lines.append(f"{sample},RON,ASTM D2699,{v:.4f},,L,2027-03-{k + 2:02d}")
    with session_scope(engine) as s:
        summary = references.import_references(s, actors["analyst"],
                                               _refs(tmp_path, "\n".join(lines) + "\n"))
    assert summary.imported == 2 * n and summary.suspect == n
    with session_scope(engine) as s:
        ids = {x.external_id: x.id for x in s.exec(select(Sample)).all()}
        status = {sid: {r.status for r in s.exec(select(ReferenceResult).where(
            ReferenceResult.sample_id == ids[sid])).all()} for sid in ("R0", "R1")}
        reason = s.exec(select(ReferenceResult.status_reason).where(
            ReferenceResult.status == "suspect")).first()
    assert status == {"R0": {"valid"}, "R1": {"suspect"}}
    assert f"f({n})" in reason and "ISO 5725-6" in reason


def test_a_later_repeat_is_judged_with_all_repeats_of_the_sample(with_samples, tmp_path):
    # two results 0.15 apart agree (≤ r); a third 0.24 from the first makes a range of
    # three above f(3)·σ_r = 3.3 × 0.2/2.77 = 0.238 (ISO 5725-6), so all three are suspect
    engine, actors = with_samples
    first = "R2,RON,ASTM D2699,95.00,,L,2027-03-02\nR2,RON,ASTM D2699,95.15,,L,2027-03-03\n"
    with session_scope(engine) as s:
        assert references.import_references(s, actors["analyst"], _refs(tmp_path, first)).suspect == 0
    later = "R2,RON,ASTM D2699,95.24,,L,2027-03-04\n"
    with session_scope(engine) as s:
        summary = references.import_references(s, actors["analyst"],
                                               _refs(tmp_path, later, "later.csv"))
    assert summary.suspect == 3


def test_correction_supersedes_and_keeps_the_old_result(with_samples, tmp_path):
    engine, actors = with_samples
    with session_scope(engine) as s:
        summary = references.import_references(
            s, actors["analyst"], _refs(tmp_path, "R2,RON,ASTM D2699,91.0,,L,2027-03-02\n"))
    old_id = summary.result_ids[0]
    with session_scope(engine) as s:
        new = references.correct_reference(s, actors["analyst"], old_id, 92.0, "transcription error")
    with session_scope(engine) as s:
        old = s.get(ReferenceResult, old_id)
        assert old.status == "superseded" and new.supersedes_id == old_id
        assert s.get(ReferenceResult, new.id).value == 92.0


def test_csv_metadata_fills_sample_batch_source_and_sampling_time(registry, tmp_path):
    engine, actors = registry
    rng = np.random.default_rng(12)
    head = "sample_id,grade,batch,source,taken_at," + ",".join(f"{v:.10g}" for v in AXIS)
    y = rng.random(AXIS.size).astype(np.float32)
    body = "M1,PREM95,B-0412,tank 7,2027-03-01T06:00," + ",".join(f"{v:.9g}" for v in y)
    path = tmp_path / "meta.csv"
    path.write_text(head + "\n" + body + "\n")
    with session_scope(engine) as s:
        intake.import_spectra(s, actors["analyst"], [path], instrument="IR-100")
    with session_scope(engine) as s:
        sample = s.exec(select(Sample).where(Sample.external_id == "M1")).one()
        assert (sample.batch, sample.source) == ("B-0412", "tank 7")
        # Naive times are the site's local time: Europe/Lisbon is UTC+0 in March.
        assert sample.taken_at.isoformat().startswith("2027-03-01T06:00")
    bad = tmp_path / "badtime.csv"
    bad.write_text(head + "\n" + body.replace("M1,", "M2,").replace("2027-03-01T06:00", "soon")
                   .replace(f"{y[0]:.9g}", "0.5", 1) + "\n")
    with pytest.raises(ImportRejected) as err:
        with session_scope(engine) as s:
            intake.import_spectra(s, actors["analyst"], [bad], instrument="IR-100")
    assert (err.value.errors[0].line, err.value.errors[0].field) == (2, "taken_at")


def test_reviewer_finds_suspect_results_in_the_list(with_samples, tmp_path):
    engine, actors = with_samples
    body = "R3,RON,ASTM D2699,94.0,,L,2027-03-02\nR3,RON,ASTM D2699,95.0,,L,2027-03-03\n"
    with session_scope(engine) as s:
        references.import_references(s, actors["analyst"], _refs(tmp_path, body))
    with session_scope(engine) as s:
        rows = references.list_references(s, actors["reviewer"], status="suspect")
        assert {r["sample"] for r in rows} == {"R3"} and len(rows) == 2
        assert all("critical range" in r["reason"] for r in rows)
        with pytest.raises(InputError, match="unknown status"):
            references.list_references(s, actors["reviewer"], status="odd")


def test_a_csv_import_stores_what_the_reader_reads_and_names_file_lines(registry, tmp_path):
    """The stored hashes are those of the spectra the CSV reader yields, and a bad cell
    late in the file is reported on its own file line, with nothing stored."""
    engine, actors = registry
    rng = np.random.default_rng(31)
    rows = [(f"W{k:03d}", "PREM95", "2027-03-01", rng.random(AXIS.size).astype(np.float32))
            for k in range(60)]
    good = csv_file(tmp_path, "good.csv", rows)
    with session_scope(engine) as s:
        summary = intake.import_spectra(s, actors["analyst"], [good], instrument="IR-100")
    assert summary.imported == 60
    with session_scope(engine) as s:
        from registry.storage.models import Spectrum

        stored = set(s.exec(select(Spectrum.sha256)).all())
    from registry.spectra.formats import iter_csv_spectra

    expected = {r.content_sha256() for c in iter_csv_spectra(good) for r in c.records()}
    assert stored == expected and len(expected) == 60
    bad_rows = [(f"X{k:03d}", "PREM95", "2027-03-01", rng.random(AXIS.size).astype(np.float32))
                for k in range(60)]
    bad = csv_file(tmp_path, "bad.csv", bad_rows)
    lines = bad.read_text().splitlines()
    cells = lines[55].split(",")
    cells[10] = "oops"
    lines[55] = ",".join(cells)
    bad.write_text("\n".join(lines) + "\n")
    before = snapshot(engine)
    with pytest.raises(ImportRejected) as err:
        with session_scope(engine) as s:
            intake.import_spectra(s, actors["analyst"], [bad], instrument="IR-100")
    e = err.value.errors[0]
    assert (e.line, e.field) == (56, lines[0].split(",")[10]) and "oops" in e.message
    assert snapshot(engine) == before


@pytest.mark.parametrize("bad_at", [None, 7])
def test_a_folder_imports_in_folder_order_or_names_its_bad_file(registry, tmp_path, bad_at):
    """Spectrum ids follow the sorted file names; one bad file rejects the folder and is
    named with the problem, and nothing is stored."""
    engine, actors = registry
    folder = tmp_path / "many"
    folder.mkdir()
    for k in range(12):
        path = jdx(folder, f"s{k:02d}.jdx", f"M{k:02d}", 100 + k)
        if k == bad_at:  # a character no ASDF form has, on the third data line
            lines = path.read_text().splitlines()
            i = next(j for j, line in enumerate(lines) if line.startswith("##XYDATA")) + 3
            lines[i] = lines[i][:-1] + "?"
            path.write_text("\n".join(lines) + "\n")
    before = snapshot(engine)
    try:
        with session_scope(engine) as s:
            summary = intake.import_spectra(s, actors["analyst"], [folder], instrument="IR-100")
    except ImportRejected as exc:
        assert bad_at is not None and snapshot(engine) == before
        [error] = exc.errors
        assert error.file.endswith(f"s{bad_at:02d}.jdx") and "'?'" in error.message
        assert error.line == i + 1
        return
    assert bad_at is None and summary.imported == 12
    with engine.connect() as conn:
        rows = conn.execute(text("SELECT id, source_file FROM spectrum ORDER BY id")).all()
    assert [r[1] for r in rows] == [f"s{k:02d}.jdx" for k in range(12)]
    assert [r[0] for r in rows] == summary.spectrum_ids
