"""QC results through the services: a known out-of-control sequence, its trigger and flags.

Chart formulas used for the expected values (computed here, independently of the
registry's chart code): σ̂ = MR̄/d₂ with d₂ = 1.128, individuals limits x̄ ± 3σ̂
(= x̄ ± 2.66·MR̄), moving-range upper limit 3.267·MR̄ (NIST/SEMATECH e-Handbook of
Statistical Methods §6.3.2; ASTM D6299); EWMA z_t = λx_t + (1 − λ)z_{t−1} with
limits ±3σ̂·√(λ/(2 − λ)·(1 − (1 − λ)^{2t})) (e-Handbook §6.3.2.4), λ = 0.4.
"""

from __future__ import annotations

import math

import pytest
from sqlmodel import select

from registry.errors import InputError, PermissionDenied, StateError
from registry.services import predictions, qc
from registry.storage.engine import session_scope
from registry.storage.models import QCResult, RevalidationTrigger
from registry.services.revalidation import due_list
from tests.lifecycle_services import steps

# Baseline of 20 results alternating around 90.1 (moving range 0.2 throughout).
BASELINE = [90.0 if i % 2 == 0 else 90.2 for i in range(20)]
MR_BAR = 0.2
SIGMA = MR_BAR / 1.128
CENTER = sum(BASELINE) / len(BASELINE)
LAM = 0.4


def _expected_single_point_rules(values: list[float]) -> set[str]:
    """Rules that judge the last point alone: 3σ, EWMA and moving range."""
    rules = set()
    x = values[-1]
    if abs(x - CENTER) > 3 * SIGMA:
        rules.add("beyond_3_sigma")
    z = CENTER
    for v in values:
        z = LAM * v + (1 - LAM) * z
    t = len(values)
    half = 3 * SIGMA * math.sqrt(LAM / (2 - LAM) * (1 - (1 - LAM) ** (2 * t)))
    if abs(z - CENTER) > half:
        rules.add("ewma_beyond_limits")
    if abs(values[-1] - values[-2]) > 3.267 * MR_BAR:
        rules.add("mr_above_ucl")
    return rules


def _add(reg, value, *, known=None, who="analyst"):
    with session_scope(reg.engine) as s:
        r = qc.add_qc_result(s, reg.actors[who], instrument="IR-100", material="QC-RON-A",
                             value=value, known_value=known, property_code="RON")
        return r


def _open_qc_triggers(reg):
    with session_scope(reg.engine) as s:
        return s.exec(select(RevalidationTrigger).where(
            RevalidationTrigger.kind == "qc_signal",
            RevalidationTrigger.cleared_at == None)).all()  # noqa: E711


def test_out_of_control_sequence_raises_the_expected_signals_and_one_trigger(reg):
    steps.in_service(reg, reg.v1)
    for i, v in enumerate(BASELINE):
        r = _add(reg, v, known=90.1 if i == 0 else None)
        assert r.signals == []  # alternating within ±0.6σ: in control on every rule
    assert _open_qc_triggers(reg) == []
    # One result 4σ̂ above the centre line.
    spike = CENTER + 4 * SIGMA
    r = _add(reg, spike)
    expected = _expected_single_point_rules(BASELINE + [spike])
    # Only this point is beyond 1σ and the baseline alternates sides, so the 2-of-3,
    # 4-of-5 and run rules cannot fire (Western Electric rules, by construction).
    assert expected == {"beyond_3_sigma", "ewma_beyond_limits"}
    assert {s["rule"] for s in r.signals} == expected
    trig = _open_qc_triggers(reg)
    assert len(trig) == 1
    assert trig[0].detail["instrument"] == "IR-100" and trig[0].detail["qc_result_id"] == r.id
    assert trig[0].detail["rule"] == "beyond_3_sigma"
    # Back at the centre: the jump down is a moving range of 4σ̂ = 0.709 > 3.267·MR̄ = 0.653.
    r2 = _add(reg, CENTER)
    expected2 = _expected_single_point_rules(BASELINE + [spike, CENTER])
    assert expected2 == {"mr_above_ucl"}
    assert {s["rule"] for s in r2.signals} == expected2
    assert len(_open_qc_triggers(reg)) == 1  # one open signal per model and instrument
    with session_scope(reg.engine) as s:
        chart = qc.qc_chart(s, reg.actors["auditor"], instrument="IR-100", material="QC-RON-A")
    c = chart["chart"]
    assert c["center"] == pytest.approx(CENTER) and c["mr_bar"] == pytest.approx(MR_BAR)
    assert c["i_ucl"] == pytest.approx(CENTER + 2.66 * MR_BAR, abs=1e-3)  # x̄ + 2.66·MR̄
    assert c["mr_ucl"] == pytest.approx(3.267 * MR_BAR, abs=1e-3)
    assert [s["index"] for s in chart["signals"]] == [20, 20, 21]
    assert chart["known_value"] == 90.1 and chart["n"] == 22


def test_signal_makes_the_model_due_and_flags_predictions_until_cleared(reg):
    steps.in_service(reg, reg.v1)
    for i, v in enumerate(BASELINE):
        _add(reg, v, known=90.1 if i == 0 else None)
    _add(reg, CENTER + 4 * SIGMA)
    with session_scope(reg.engine) as s:
        rows = due_list(s, reg.actors["auditor"])
        assert rows[0]["label"] == reg.v1 and rows[0]["overdue"]
        assert any("qc_signal" in reason for reason in rows[0]["reasons"])
        batch = predictions.predict(s, reg.actors["analyst"], reg.v1, spectrum_ids=[1, 2])
        assert all({"qc_signal", "overdue"} <= set(p["flags"]) for p in batch.predictions)
    trig = _open_qc_triggers(reg)[0]
    with session_scope(reg.engine) as s, pytest.raises(PermissionDenied):
        qc.clear_qc_signal(s, reg.actors["analyst"], trig.id, "looked fine")
    with session_scope(reg.engine) as s, pytest.raises(InputError, match="reason"):
        qc.clear_qc_signal(s, reg.actors["reviewer"], trig.id, "")
    with session_scope(reg.engine) as s:
        qc.clear_qc_signal(s, reg.actors["reviewer"], trig.id, "cell window replaced")
    with session_scope(reg.engine) as s:
        t = s.get(RevalidationTrigger, trig.id)
        assert t.cleared_by_id == reg.actors["reviewer"].id and t.clear_reason
        batch = predictions.predict(s, reg.actors["analyst"], reg.v1, spectrum_ids=[3])
        assert not {"qc_signal", "overdue"} & set(batch.predictions[0]["flags"])
        assert due_list(s, reg.actors["auditor"])[0]["overdue"] is False
    with session_scope(reg.engine) as s, pytest.raises(StateError, match="already cleared"):
        qc.clear_qc_signal(s, reg.actors["reviewer"], trig.id, "again")


def test_no_signal_before_the_baseline_has_enough_results(reg):
    steps.in_service(reg, reg.v1)
    # A wild third result: limits from 3 points mean nothing, so no signal is raised
    # (the registry waits for 15 results; from memory, ASTM D6299 asks for 15–20).
    for i, v in enumerate([90.0, 90.2, 95.0, 90.1]):
        assert _add(reg, v, known=90.1 if i == 0 else None).signals == []
    assert _open_qc_triggers(reg) == []


def test_known_value_rules_and_active_model_required(reg):
    with session_scope(reg.engine) as s, pytest.raises(StateError, match="no active model"):
        qc.add_qc_result(s, reg.actors["analyst"], instrument="IR-100", material="QC-RON-A",
                         value=90.0, known_value=90.1, property_code="RON")
    steps.in_service(reg, reg.v1)
    with pytest.raises(InputError, match="known value"):
        _add(reg, 90.0)
    _add(reg, 90.0, known=90.1)
    with pytest.raises(InputError, match="own name"):
        _add(reg, 90.0, known=91.0)
    r = _add(reg, 90.05)  # known value reused
    assert r.known_value == 90.1
    with session_scope(reg.engine) as s:
        assert len(s.exec(select(QCResult)).all()) == 2
    with pytest.raises(InputError, match="finite"):
        _add(reg, float("nan"))
