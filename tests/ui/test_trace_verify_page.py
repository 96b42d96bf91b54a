"""The auditor's page under AppTest: the trace as a collapsible tree with HTML and JSON
downloads, and a failed verification as a readable table.

What the page shows is compared with what the services return for the same registry,
and the "vouched for by" column with the audit trail's own rows, read with plain SQL.
"""

from __future__ import annotations

import json
import sqlite3
from html import escape

from registry.lineage.trace_render import tree
from registry.services import views
from registry.storage.engine import make_engine, session_scope
from tests.ui.helpers import frame, open_page, signed_in, texts


def trace_doc(reg, pid: int) -> dict:
    engine = make_engine(reg.url)
    try:
        with session_scope(engine) as s:
            return views.trace_documents(s, reg.actors["auditor"], pid)["document"]
    finally:
        engine.dispose()


def test_the_trace_is_a_tree_of_the_services_document(ui_reg):
    pid = ui_reg.prediction_ids[3]
    at = open_page(signed_in("auditor"), "trace")
    at.number_input(key="trace_id").set_value(pid)
    at.form_submit_button[0].click().run()
    assert not at.exception and not at.error
    title, branches = tree(trace_doc(ui_reg, pid))
    assert at.subheader[0].value == title
    body = at.html[0].value
    # every branch of the document is on the page, escaped; branches with children fold
    # (<details>) and the calibration set's members are closed until clicked
    for label, kids in branches:
        assert escape(label) in body
        if kids:
            assert f"<summary>{escape(label)} " in body
    calset = next(label for label, _ in branches if label.startswith("calibration set"))
    assert f"<details><summary>{escape(calset)}" in body
    assert body.count("<details") == sum(_folds(branches))  # one fold per node with children
    assert not at.code  # no long text block any more
    labels = {b.key: b.proto.label for b in at.download_button}
    assert labels == {"trace_download": "Trace as HTML", "trace_download_json": "Trace as JSON"}


def _folds(nodes):
    for _, kids in nodes:
        if kids:
            yield 1
            yield from _folds(kids)


def vouching_event(db_path, kind: str, entity_id: int) -> int:
    """The last audit event whose payload vouches for (kind, id): read from the raw table."""
    with sqlite3.connect(db_path) as con:
        rows = con.execute("SELECT id, payload FROM audit_event ORDER BY id").fetchall()
    con.close()
    last = None
    for seq, payload in rows:
        hashes = (json.loads(payload).get("data") or {}).get("hashes") or {}
        if any(int(pair[0]) == entity_id for pair in hashes.get(kind, [])):
            last = seq
    assert last is not None
    return last


def test_a_failed_verification_is_a_table_of_records_and_the_events_that_vouched(ui_reg):
    with sqlite3.connect(ui_reg.path) as con:
        rid = con.execute("SELECT min(id) FROM reference_result").fetchone()[0]
        con.execute("UPDATE reference_result SET value = value + 0.5 WHERE id = ?", (rid,))
    con.close()
    at = open_page(signed_in("auditor"), "trace")
    at.button(key="verify_button").click().run()
    assert not at.exception
    assert len(at.error) == 1
    message = at.error[0].value
    assert message.startswith("Not intact: 1 problem(s)") and "every link of the chain holds" in message
    table = frame(at, "what changed")
    assert table.columns.tolist() == ["record", "id", "what changed", "vouched for by"]
    row = table.iloc[0].to_dict()
    assert row["record"].startswith("reference result (sample ")
    assert row["id"] == str(rid)
    assert "altered" in row["what changed"]
    assert row["vouched for by"] == f"audit event {vouching_event(ui_reg.path, 'reference_result', rid)}"
    shown = " ".join(str(v) for v in table.to_numpy().ravel()) + texts(at)
    assert "None" not in shown and "Problem(" not in shown
    keys = {b.key for b in at.download_button}
    assert keys == {"verify_download", "verify_download_csv"}


def test_an_intact_trail_says_so_in_words_and_offers_the_report(ui_reg):
    at = open_page(signed_in("auditor"), "trace")
    at.button(key="verify_button").click().run()
    assert not at.error
    ok = at.success[0].value
    # counts in words: every spectrum the registry was given (one per sample id) was checked
    assert f"{len(ui_reg.info['ids'])} spectra" in ok and "spectrum," not in ok
    assert {b.key for b in at.download_button} == {"verify_download"}
