"""The trace of a prediction, a sample or a model: content, schema, HTML, bounded queries."""

from __future__ import annotations

import json
import shutil
import subprocess
from html.parser import HTMLParser

import jsonschema
import pytest
import sqlalchemy as sa
from sqlalchemy import event

from registry.errors import InputError, NotFoundError, PermissionDenied
from registry.lineage.trace import build_trace, load_schema
from registry.lineage.trace_render import render_html, render_text
from registry.services import audit as audit_svc
from registry.storage.engine import make_engine, session_scope


def _trace(url, **kw):
    engine = make_engine(url)
    try:
        with session_scope(engine) as s:
            return build_trace(s, **kw)
    finally:
        engine.dispose()


def _raw(url, sql, **kw):
    engine = sa.create_engine(url)
    with engine.connect() as conn:
        rows = conn.execute(sa.text(sql), kw).all()
    engine.dispose()
    return rows


def _validator():
    schema = load_schema()
    # jsonschema's own meta-schema check: the file is a valid draft 2020-12 schema.
    jsonschema.Draft202012Validator.check_schema(schema)
    return jsonschema.Draft202012Validator(schema, format_checker=jsonschema.FormatChecker())


@pytest.fixture(scope="module")
def prediction_doc(built_sqlite):
    path, info = built_sqlite
    return _trace(f"sqlite:///{path}", prediction_id=info["prediction_ids"][0]), info, path


def test_prediction_trace_holds_every_calibration_sample_and_its_results(prediction_doc):
    doc, info, path = prediction_doc
    url = f"sqlite:///{path}"
    members = _raw(url, "SELECT sample_id, role, reference_value FROM calibration_member "
                        "WHERE set_id = :s", s=info["calset_id"])
    traced = {m["sample"]["id"]: m for m in doc["calibration_set"]["members"]}
    assert set(traced) == {sid for sid, _, _ in members}
    for sid, role, value in members:
        assert traced[sid]["role"] == role and traced[sid]["reference_value"] == value
        results = _raw(url, "SELECT id, value, lab, operator, status FROM reference_result "
                            "WHERE sample_id = :s", s=sid)
        got = {r["id"]: r for r in traced[sid]["reference_results"]}
        assert set(got) == {r[0] for r in results}
        for rid, v, lab, op, status in results:
            assert (got[rid]["value"], got[rid]["lab"], got[rid]["operator"], got[rid]["status"]) \
                == (v, lab, op, status)
            assert got[rid]["r"] == pytest.approx(0.2) and got[rid]["R"] == pytest.approx(0.7)
        spectra = {r[0] for r in _raw(url, "SELECT id FROM spectrum WHERE sample_id = :s", s=sid)}
        assert {sp["id"] for sp in traced[sid]["spectra"]} == spectra
    assert doc["prediction"]["id"] == info["prediction_ids"][0]
    assert doc["model"]["label"] == info["model"]
    assert all(v is True for k, v in doc["integrity"].items()
               if k.endswith("_ok") or k == "signatures_match_content")


def test_correction_shows_both_results_linked(prediction_doc):
    doc, info, _ = prediction_doc
    results = {r["id"]: r for m in doc["calibration_set"]["members"]
               for r in m["reference_results"]}
    old, new = results[info["corrected_from"]], results[info["corrected_to"]]
    assert old["status"] == "superseded" and old["superseded_by"] == new["id"]
    assert new["supersedes"] == old["id"] and new["used"] and not old["used"]


def test_trace_carries_approval_signature_deployment_qc_and_selection(prediction_doc):
    doc, info, path = prediction_doc
    m = doc["model"]
    approved = [h for h in m["state_history"] if h["to"] == "approved"]
    assert approved and approved[0]["signature"]["signer"] == "rita"
    assert approved[0]["signature"]["parts_match_current"] is True
    assert m["deployments"][0]["instrument"] == "IR-100"
    assert m["qc_at_prediction"]["signal_open"] is True
    assert m["validations"] and m["validations"][0]["hash_ok"]
    chosen = {mem["sample"]["id"]: mem["selection"] for mem in doc["calibration_set"]["members"]
              if mem["selection"]}
    # every sample the selection run picked was then tested (the import answered the picks)
    picks = _raw(f"sqlite:///{path}", "SELECT sample_id, rank FROM selection_pick WHERE run_id = :r",
                 r=info["run_id"])
    assert {sid: rank for sid, rank in picks} == {sid: sel["rank"] for sid, sel in chosen.items()}
    assert all(sel["run_id"] == info["run_id"] and sel["linked_by_result"]
               for sel in chosen.values())


def test_every_root_validates_against_the_schema(built_sqlite):
    path, info = built_sqlite
    url = f"sqlite:///{path}"
    validator = _validator()
    docs = [_trace(url, prediction_id=info["prediction_ids"][0]),
            _trace(url, sample=info["ids"][1], property_code="RON"),   # has a prediction
            _trace(url, sample=info["ids"][3], property_code="ron"),   # has none
            _trace(url, model=info["model"])]
    for doc in docs:
        errors = sorted(validator.iter_errors(doc), key=lambda e: e.path)
        assert not errors, [f"{list(e.path)}: {e.message}" for e in errors[:5]]
        json.loads(json.dumps(doc, allow_nan=False))  # strict JSON
    assert docs[1]["root"]["prediction_id"] == info["prediction_ids"][1]
    assert docs[2]["root"]["prediction_id"] is None and docs[2]["prediction"] is None
    record = docs[2]["sample_record"]
    assert {r["id"] for r in record["reference_results"]} == {info["corrected_from"],
                                                              info["corrected_to"]}
    assert record["calibration_sets"][0]["models"][0]["label"] == info["model"]
    assert docs[3]["prediction"] is None and docs[3]["model"]["qc_at_prediction"] is None


def test_schema_rejects_a_document_missing_its_calibration_members(prediction_doc):
    doc, _, _ = prediction_doc
    broken = json.loads(json.dumps(doc))
    del broken["calibration_set"]["members"][0]["reference_results"]
    assert not _validator().is_valid(broken)
    broken = json.loads(json.dumps(doc))
    broken["schema_version"] = 2
    assert not _validator().is_valid(broken)


class _Collector(HTMLParser):
    """Collects tags, attributes and text; html.parser is the standard library's parser."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.tags: list[str] = []
        self.attrs: list[tuple[str, str | None]] = []
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        self.attrs += attrs

    def handle_data(self, data):
        self.text.append(data)


def test_html_is_self_contained_and_lists_every_sample(prediction_doc):
    doc, info, _ = prediction_doc
    page = render_html(doc)
    assert "http://" not in page and "https://" not in page and "//" not in page.replace("<!DOCTYPE", "")
    parser = _Collector()
    parser.feed(page)
    parser.close()
    assert not {"script", "link", "img", "iframe", "object"} & set(parser.tags)
    assert not [a for a, _ in parser.attrs if a in ("src", "href")]
    text = "".join(parser.text)
    for mem in doc["calibration_set"]["members"]:
        assert mem["sample"]["external_id"] in text
    assert "do not replace the specification test method" in text


def test_html_escapes_registry_text(lineage_sqlite):
    url, info = lineage_sqlite
    engine = sa.create_engine(url)
    with engine.begin() as conn:  # a batch label is free text and is not hashed
        conn.execute(sa.text("UPDATE sample SET batch = '<script>alert(1)</script>' WHERE id = 1"))
    engine.dispose()
    page = render_html(_trace(url, sample=info["ids"][0], property_code="RON"))
    parser = _Collector()
    parser.feed(page)
    assert "script" not in parser.tags
    assert "&lt;script&gt;" in page


@pytest.mark.skipif(not (shutil.which("chromium") or shutil.which("chromium-browser")),
                    reason="no headless chromium on this machine")
def test_html_renders_in_headless_chromium_offline(prediction_doc, tmp_path):
    doc, _, _ = prediction_doc
    page = tmp_path / "trace.html"
    page.write_text(render_html(doc), encoding="utf-8")
    browser = shutil.which("chromium") or shutil.which("chromium-browser")
    out = subprocess.run([browser, "--headless", "--no-sandbox", "--disable-gpu",
                          "--disable-background-networking", "--dump-dom", page.as_uri()],
                         capture_output=True, text=True, timeout=60)
    assert out.returncode == 0
    assert doc["calibration_set"]["members"][0]["sample"]["external_id"] in out.stdout


def test_text_tree_lists_the_chain(prediction_doc):
    doc, info, _ = prediction_doc
    text = render_text(doc)
    assert text.splitlines()[1].startswith("Model results do not replace")
    for mem in doc["calibration_set"]["members"]:
        assert f"sample {mem['sample']['external_id']} (" in text
    assert f"corrects #{info['corrected_from']}" in text
    assert "approved as reviewer" in text and "QC SIGNAL OPEN" in text
    # the Q-residual limit's form, as the model artifact records it (Box 1954 by default)
    assert doc["model"]["q_limit"]["form"] == "box"
    assert "Q-residual limit: Box g·χ²(h) at 99 %" in text
    assert "scaled for fitted degrees of freedom" in text
    assert "Q-residual limit" in render_html(doc)
    # the validation says which acceptance rule judged it and shows SEP/σ_R and 1.96·SEP vs R
    # (R = 2.77·σ_R, ISO 5725-6); the HTML table carries the same rule
    [v] = doc["model"]["validations"]
    assert f"rule: {v['rule']}" in text and "σ_R = R/2.77" in v["rule"]
    assert "SEP/σ_R=" in text and "1.96·SEP=" in text and "vs R=" in text
    assert v["rule"] in render_html(doc).replace("&#x27;", "'")


def test_trace_reports_altered_content(lineage_sqlite):
    url, info = lineage_sqlite
    engine = sa.create_engine(url)
    with engine.begin() as conn:
        conn.execute(sa.text("UPDATE reference_result SET value = value + 1 WHERE id = :i"),
                     {"i": info["corrected_to"]})
        blob = conn.execute(sa.text("SELECT artifact FROM model_version")).scalar()
        b = bytearray(blob)
        b[100] ^= 0xFF
        conn.execute(sa.text("UPDATE model_version SET artifact = :a"), {"a": bytes(b)})
    engine.dispose()
    doc = _trace(url, prediction_id=info["prediction_ids"][0])
    integ = doc["integrity"]
    assert integ["reference_results_hash_ok"] is False and integ["artifact_hash_ok"] is False
    assert f"reference_result {info['corrected_to']}" in integ["altered"]
    assert f"model_version {info['model_id']}" in integ["altered"]
    assert doc["model"]["q_limit"] is None  # an altered artifact is not read
    assert integ["calibration_set_hash_ok"] is True  # the frozen set itself is unchanged


def test_trace_uses_a_bounded_number_of_queries(built_sqlite):
    path, info = built_sqlite
    engine = make_engine(f"sqlite:///{path}")
    statements = []
    event.listen(engine, "before_cursor_execute",
                 lambda conn, cur, stmt, *a: statements.append(stmt))
    with session_scope(engine) as s:
        doc = build_trace(s, prediction_id=info["prediction_ids"][0])
    engine.dispose()
    selects = [q for q in statements if q.lstrip().upper().startswith("SELECT")]
    n_members = len(doc["calibration_set"]["members"])
    # 80 members, 160 spectra, 81 results: a per-member lookup would need 80+ queries alone
    assert n_members == 80
    assert len(selects) <= 32, len(selects)


def test_trace_refuses_bad_requests_and_other_roles(registry, built_sqlite):
    path, info = built_sqlite
    engine = make_engine(f"sqlite:///{path}")
    with session_scope(engine) as s:
        with pytest.raises(PermissionDenied):
            audit_svc.trace(s, info["actors"]["analyst"], prediction_id=1)
        assert audit_svc.trace(s, info["actors"]["auditor"], prediction_id=1)["root"]["kind"] \
            == "prediction"
        with pytest.raises(InputError):
            build_trace(s, prediction_id=1, model=info["model"])
        with pytest.raises(InputError):
            build_trace(s, sample=info["ids"][0])
        with pytest.raises(NotFoundError):
            build_trace(s, prediction_id=10_000)
        with pytest.raises(NotFoundError):
            build_trace(s, sample="NO-SUCH", property_code="RON")
    engine.dispose()
