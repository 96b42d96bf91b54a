"""``specledger audit verify`` and ``specledger trace`` from the command line."""

from __future__ import annotations

import json

import sqlalchemy as sa
from typer.testing import CliRunner

from registry.cli import app
from registry.storage.engine import dispose_engines
from tests.conftest import PASSWORD, ROLE_USERS

runner = CliRunner()


def run(args, url, user=ROLE_USERS["auditor"]):
    try:
        return runner.invoke(app, args, env={"SPECLEDGER_DATABASE_URL": url,
                                             "SPECLEDGER_PASSWORD": PASSWORD,
                                             "SPECLEDGER_USER": user})
    finally:
        dispose_engines()


def test_verify_exit_codes_and_json(lineage_sqlite):
    url, info = lineage_sqlite
    ok = run(["audit", "verify"], url)
    assert ok.exit_code == 0, ok.output
    assert "INTACT" in ok.stdout
    doc = json.loads(run(["audit", "verify", "--format", "json"], url).stdout)
    assert doc["intact"] and doc["first_broken_link"] is None
    # a head recorded elsewhere that no longer matches means events were cut off the end
    assert run(["audit", "verify", "--expect-head", doc["head"]], url).exit_code == 0
    assert run(["audit", "verify", "--expect-head", "0" * 64], url).exit_code == 1

    engine = sa.create_engine(url)
    with engine.begin() as conn:
        conn.execute(sa.text("UPDATE reference_result SET value = value + 2 WHERE id = 5"))
    engine.dispose()
    bad = run(["audit", "verify"], url)
    assert bad.exit_code == 1
    assert "NOT INTACT" in bad.stdout and "reference_result 5 (sample L0004)" in bad.stdout
    doc = json.loads(run(["audit", "verify", "--format", "json"], url).stdout)
    assert not doc["intact"]
    assert [p["entity_id"] for p in doc["content_problems"]
            if p["entity_type"] == "reference_result"] == [5]


def test_verify_refuses_other_roles(lineage_sqlite):
    url, _ = lineage_sqlite
    res = run(["audit", "verify"], url, user=ROLE_USERS["analyst"])
    assert res.exit_code == 2 and "may not verify the audit trail" in res.output


def test_trace_formats_and_out_file(lineage_sqlite, tmp_path):
    url, info = lineage_sqlite
    pid = str(info["prediction_ids"][0])
    text = run(["trace", "--prediction", pid], url)
    assert text.exit_code == 0, text.output
    assert text.stdout.startswith(f"Trace of prediction {pid}")
    doc = json.loads(run(["trace", "--prediction", pid, "--format", "json"], url).stdout)
    assert doc["schema"] == "specledger-trace" and doc["schema_version"] == 1
    out = tmp_path / "trace.html"
    res = run(["trace", "--sample", info["ids"][3], "--property", "RON", "--format", "html",
               "--out", str(out)], url)
    assert res.exit_code == 0, res.output
    assert out.read_text(encoding="utf-8").startswith("<!DOCTYPE html>")
    model = run(["trace", "--model", info["model"], "--format", "json"], url)
    assert json.loads(model.stdout)["root"] == {"kind": "model", "model": info["model"]}
    assert run(["trace", "--prediction", pid, "--model", info["model"]], url).exit_code == 2
    assert run(["trace", "--prediction", pid, "--format", "pdf"], url).exit_code == 2
