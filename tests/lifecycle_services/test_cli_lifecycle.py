"""The lifecycle from the command line: a reviewer approves a validated version
with a signature, the author cannot, QC signals make the model due and `specledger due`
shows it (in the site's time zone).

Sources: the CLI commands as README.md's tour shows them; the lifecycle requirements in
tests/lifecycle/brief.py; 21 CFR Part 11 §11.50 (signer, date and time, meaning shown with a
signature).
"""

from __future__ import annotations

import json

from typer.testing import CliRunner

from registry.cli import app
from registry.services import qc
from registry.storage.engine import session_scope
from tests.conftest import PASSWORD
from tests.lifecycle_services import steps

runner = CliRunner()


def run(reg, args, user, *, password=PASSWORD, stdin=None):
    env = {"SPECLEDGER_DATABASE_URL": reg.url, "SPECLEDGER_USER": user}
    if password is not None:
        env["SPECLEDGER_PASSWORD"] = password
    return runner.invoke(app, args, env=env, input=stdin)


def test_reviewer_approves_from_the_cli_and_the_author_cannot(reg):
    res = run(reg, ["model", "submit", reg.v1, "--reason", "ready"], "anton")
    assert res.exit_code == 0, res.output
    # A user holding analyst and reviewer trains v2 and may not approve it.
    assert run(reg, ["model", "submit", reg.v2], "dora").exit_code == 0
    before = reg.counts()
    res = run(reg, ["model", "approve", reg.v2, "--reason", "mine"], "dora")
    assert res.exit_code != 0 and "author" in res.output
    # The analyst may not approve at all (role table).
    res = run(reg, ["model", "approve", reg.v1], "anton")
    assert res.exit_code != 0 and "allowed roles: reviewer" in res.output
    # Logging in and signing are two acts: right login password, wrong signing password.
    res = run(reg, ["model", "approve", reg.v1], "rita", password=None,
              stdin=f"{PASSWORD}\nwrong-password\n")
    assert res.exit_code != 0 and "signature refused" in res.output
    assert reg.counts() == before
    res = run(reg, ["model", "approve", reg.v1, "--reason", "meets criteria", "--format", "json"],
              "rita", password=None, stdin=f"{PASSWORD}\n{PASSWORD}\n")
    assert res.exit_code == 0, res.output
    doc = json.loads(res.stdout)
    assert doc["state"] == "approved"
    sig = doc["signature"]
    # §11.50: who signed, when, and what the signature means.
    assert (sig["signer"], sig["meaning"], sig["reason"]) == ("rita", "approved as reviewer",
                                                              "meets criteria")
    assert sig["signed_at"].endswith("+00:00")
    assert set(sig["signed_parts"]) == {"artifact_sha256", "validation_record_sha256",
                                        "calibration_set_sha256"}
    res = run(reg, ["model", "activate", reg.v1, "--instrument", "IR-100"], "lena")
    assert res.exit_code == 0 and "activated for use" in res.output, res.output
    res = run(reg, ["model", "signatures", reg.v1, "--format", "json"], "otto")
    assert [s["status"] for s in json.loads(res.stdout)] == ["intact", "intact"]
    res = run(reg, ["model", "show", reg.v1], "otto")
    assert "[signed: approved as reviewer]" in res.output


def test_qc_signal_makes_the_model_due_and_due_shows_it_in_site_time(reg):
    steps.in_service(reg, reg.v1)
    with session_scope(reg.engine) as s:
        for i in range(20):  # baseline alternating 90.0 / 90.2 (see test_qc_services)
            qc.add_qc_result(s, reg.actors["analyst"], instrument="IR-100", material="QC-A",
                             value=90.0 + 0.2 * (i % 2), known_value=90.1 if i == 0 else None,
                             property_code="RON")
    res = run(reg, ["due"], "otto")
    assert res.exit_code == 0 and "OVERDUE" not in res.output
    # 90.1 + 4σ̂, σ̂ = MR̄/1.128 = 0.2/1.128 (NIST e-Handbook §6.3.2): beyond 3σ.
    res = run(reg, ["qc", "add", "--instrument", "IR-100", "--material", "QC-A",
                    "--value", f"{90.1 + 4 * 0.2 / 1.128:.4f}"], "anton")
    assert res.exit_code == 0 and "SIGNAL" in res.output, res.output
    res = run(reg, ["qc", "chart", "--instrument", "IR-100", "--material", "QC-A"], "otto")
    assert "point 21: beyond_3_sigma" in res.output and "open QC signal trigger" in res.output
    res = run(reg, ["due", "--format", "json"], "otto")
    [row] = json.loads(res.stdout)
    assert row["label"] == reg.v1 and row["overdue"] is True
    assert any("qc_signal" in r for r in row["reasons"])
    # Harbour Lab is in Europe/Lisbon: the local time carries WET or WEST (IANA tz abbreviations).
    assert row["due_at_local"][0]["site"] == "Harbour Lab"
    res = run(reg, ["due", "--within", "30"], "otto")
    assert "OVERDUE" in res.output and reg.v1 in res.output
    assert ("WET" in res.output) or ("WEST" in res.output)
    res = run(reg, ["qc", "clear", "1", "--reason", "lamp replaced"], "rita")
    assert res.exit_code == 0, res.output
    assert "OVERDUE" not in run(reg, ["due"], "otto").output


def test_policy_trigger_and_method_commands(reg):
    steps.approved(reg, reg.v1)
    res = run(reg, ["policy", "set", "--property", "RON", "--interval-days", "30"], "ada")
    assert res.exit_code == 0, res.output
    res = run(reg, ["due", "--format", "json"], "otto")
    assert json.loads(res.stdout)[0]["days_left"] in (29, 30)
    res = run(reg, ["trigger", "raise", reg.v1, "--kind", "coverage_drift", "--detail", "seen"],
              "otto")
    assert res.exit_code != 0 and "may not raise revalidation triggers" in res.output
    res = run(reg, ["method", "edit", "ASTM D2699", "--property", "RON", "--reproducibility",
                    "0.75"], "ada")
    assert res.exit_code == 0, res.output
    res = run(reg, ["trigger", "list", "--format", "json"], "otto")
    assert [t["kind"] for t in json.loads(res.stdout)] == ["method_change"]
