"""The registry's lifecycle and permission requirements, written down here as the test oracle.

The tests compare the code's tables with these, so a slip in either shows up.
Nothing here is imported from ``registry``.
"""

# Requirement, model lifecycle: "<state> --<action>--> <state>" for every legal move.
BRIEF_MOVES_TEXT = """
draft --validate--> validated
validated --validate--> validated
validated --submit--> in_review
in_review --approve--> approved
in_review --reject--> rejected
validated --reject--> rejected
approved --activate--> active
active --activate--> active
approved --validate--> approved
active --validate--> active
active --retire--> retired
approved --retire--> retired
active --supersede--> superseded
"""

BRIEF_STATES = ["draft", "validated", "in_review", "approved", "active", "retired",
                "superseded", "rejected"]
BRIEF_LIFECYCLE_ACTIONS = ["validate", "submit", "approve", "reject", "activate", "retire",
                           "supersede"]


def brief_moves() -> dict[tuple[str, str], str]:
    moves = {}
    for line in BRIEF_MOVES_TEXT.strip().splitlines():
        source, action, target = line.replace("--", " ").replace(">", " ").split()
        moves[(source, action)] = target
    return moves


# Requirement, permissions: the roles' duties, then the
# documented decisions for actions the duties do not name (marked "decided").
BRIEF_ROLE_DUTIES = {
    "admin": "user_add user_deactivate site_add instrument_add property_edit method_edit "
             "policy_edit view"
             " grade_add instrument_event user_reactivate",      # decided
    "lab_manager": "selection_run calset_create model_activate model_retire view"
                   " model_submit instrument_event trigger_raise"  # decided
                   " export_data trace",                           # decided
    "analyst": "import_spectra import_references model_train predict qc_add view"
               " model_submit correct_reference"               # decided
               " calset_create model_validate export_data",     # decided
    "reviewer": "model_validate model_approve model_reject resolve_suspect_reference "
                "qc_clear_signal view"
                " trigger_raise export_data trace",               # decided
    "auditor": "view audit_verify export_data trace",
}

# Decided: periodic revalidation of a version in service keeps its state, and
# analysts may freeze calibration sets and validate (the chemometrics workflow
# has an analyst do both; approval stays with a reviewer who neither
# authored the version nor built its calibration set).

# Requirement: the list of user actions the registry has.
BRIEF_ACTIONS = (
    "user_add user_deactivate user_reactivate site_add instrument_add instrument_event grade_add property_edit "
    "method_edit import_spectra import_references export_data correct_reference "
    "resolve_suspect_reference selection_run calset_create model_train model_validate "
    "model_submit model_approve model_reject model_activate model_retire predict qc_add "
    "qc_clear_signal policy_edit trigger_raise view audit_verify trace").split()

BRIEF_ROLES = ["admin", "lab_manager", "analyst", "reviewer", "auditor"]


def brief_allows(role: str, action: str) -> bool:
    return action in BRIEF_ROLE_DUTIES[role].split()
