"""Per-property acceptance criteria, edited by an admin, decide validation verdicts."""

from __future__ import annotations

import pytest

from registry.errors import InputError, PermissionDenied
from registry.services import calibration, models
from registry.services.properties import acceptance_for, edit_property
from registry.storage.engine import session_scope
from tests.factories import referenced_registry


def test_only_admin_edits_and_bad_criteria_are_refused(registry):
    engine, actors = registry
    for role in ("lab_manager", "analyst", "reviewer", "auditor"):
        with pytest.raises(PermissionDenied):
            with session_scope(engine) as s:
                edit_property(s, actors[role], "RON", acceptance={"min_r2": 0.9})
    with pytest.raises(InputError, match="unknown acceptance criterion"):
        with session_scope(engine) as s:
            edit_property(s, actors["admin"], "RON", acceptance={"max_rmsep": 1})
    # the rule before revision 0003 compared the RMSEP with R; its name is refused with the
    # new one (stored overrides were migrated by 0003)
    with pytest.raises(InputError, match="max_sep_over_sigma_r"):
        with session_scope(engine) as s:
            edit_property(s, actors["admin"], "RON", acceptance={"max_sep_over_reproducibility": 1})
    with pytest.raises(InputError, match="below upper"):
        with session_scope(engine) as s:
            edit_property(s, actors["admin"], "RON", lower_limit=130)
    with session_scope(engine) as s:
        prop = edit_property(s, actors["admin"], "RON", acceptance={"min_r2": "0.95"})
        assert acceptance_for(prop).min_r2 == 0.95
        assert acceptance_for(prop).bias_alpha == 0.05  # untouched defaults stay


def test_stricter_criteria_turn_a_pass_into_a_fail(registry, tmp_path):
    engine, actors = registry
    referenced_registry(engine, actors, tmp_path, n=80)
    with session_scope(engine) as s:
        calibration.create_calibration_set(s, actors["lab_manager"], "RON-P", property_code="RON",
                                           grade_code="PREM95", all_referenced=True,
                                           validation="duplex:0.25")
    with session_scope(engine) as s:
        mv = models.train_model_version(s, actors["analyst"], "RON-P", max_components=10)
    with session_scope(engine) as s:
        first = models.validate_model(s, actors["reviewer"], mv.label)
    # An R² no model can reach: the same predictions must now fail, naming the criterion.
    with session_scope(engine) as s:
        edit_property(s, actors["admin"], "RON", acceptance={"min_r2": 0.99999})
    with session_scope(engine) as s:
        second = models.validate_model(s, actors["reviewer"], mv.label)
    assert second.rmsep == pytest.approx(first.rmsep)
    assert not second.passed and any("R²" in r or "r2" in r.lower() for r in second.reasons)
    assert second.criteria["min_r2"] == 0.99999
    # the record states the rule it was judged by: SEP against σ_R = R/2.77 (ISO 5725-6)
    assert "SEP ≤ 1·σ_R, σ_R = R/2.77" in second.criteria["rule"] and "R² ≥ 0.99999" in \
        second.criteria["rule"]
    R = second.statistics["reproducibility"]
    assert second.sep_over_sigma_r == pytest.approx(second.sep * 1.96 * 2 ** 0.5 / R)
