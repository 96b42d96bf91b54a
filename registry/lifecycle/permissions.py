"""Who may do what: one table from user action to the roles allowed to do it.

Roles and their duties:

``admin``
    Master data: users, sites, instruments (including logging instrument
    events), fuel grades, properties, reference methods and policies. An admin
    is not a superuser: it cannot import data, train, approve or deploy models,
    so running the registry does not confer power over its results.
``lab_manager``
    Plans the work and owns deployment: selection runs, calibration sets,
    activating and retiring model versions, raising revalidation triggers, and
    logging instrument events on the lab's own instruments.
``analyst``
    Does the bench work: imports spectra and reference results, corrects
    reference values (always with a reason in the audit trail), trains models,
    predicts, adds QC results, and submits their own model versions for review.
``reviewer``
    Independent checking: validates model versions, approves and rejects them,
    resolves suspect reference results, clears QC signals, raises
    revalidation triggers.
``auditor``
    Reads everything, verifies the audit chain, exports and traces; changes
    nothing.

Every role may ``view``.

Choices not spelled out by the duties above, and why:

* ``model_submit``: analyst and lab_manager. Submitting is the author's act
  (the author check itself is in
  :func:`registry.lifecycle.states.check_separation_of_duties`); authors are
  analysts, or lab managers who trained a version while holding that duty.
* ``instrument_event``: admin and lab_manager. Service, repair and
  requalification happen in the lab, and an event raises a revalidation
  trigger, so the lab manager must be able to record it.
* ``grade_add``: admin, as master data alongside properties and methods.
* ``user_reactivate``: admin, the undoing of ``user_deactivate`` (a locked account
  unlocked).
* ``correct_reference``: analyst; the correction is data entry, while
  deciding that a suspect result is wrong is the reviewer's
  ``resolve_suspect_reference``.
* ``trigger_raise``: lab_manager (owns deployment) and reviewer (judges
  whether a model still holds).
* ``audit_verify``: auditor only, as the duties say.
* ``export_data``: every role that works with the data (analyst, lab_manager,
  reviewer, auditor); exporting spectra is part of bench work too.
* ``trace``: auditor, reviewer and lab_manager (reviewers check evidence,
  lab managers answer customer queries).
* ``calset_create`` and ``model_validate`` also for analysts: the analyst who
  builds a model may freeze its set and record its validation; approval stays
  with a reviewer who neither authored the version nor built its set.

Separation of duties on a single version (author may not approve) is not a
role question and lives in :mod:`registry.lifecycle.states`.
"""

from __future__ import annotations

from collections.abc import Iterable
from enum import StrEnum

from registry.errors import InputError, PermissionDenied
from registry.lifecycle.states import LifecycleAction


class Role(StrEnum):
    ADMIN = "admin"
    LAB_MANAGER = "lab_manager"
    ANALYST = "analyst"
    REVIEWER = "reviewer"
    AUDITOR = "auditor"


class Action(StrEnum):
    """Every action the audit trail records (its ``action`` column holds only these).

    All but the :data:`RECORDED_ONLY` ones are user actions with a row in
    :data:`PERMISSIONS`.
    """

    USER_ADD = "user_add"
    USER_DEACTIVATE = "user_deactivate"
    USER_REACTIVATE = "user_reactivate"
    SITE_ADD = "site_add"
    INSTRUMENT_ADD = "instrument_add"
    INSTRUMENT_EVENT = "instrument_event"
    GRADE_ADD = "grade_add"
    PROPERTY_EDIT = "property_edit"
    METHOD_EDIT = "method_edit"
    IMPORT_SPECTRA = "import_spectra"
    IMPORT_REFERENCES = "import_references"
    EXPORT_DATA = "export_data"
    CORRECT_REFERENCE = "correct_reference"
    RESOLVE_SUSPECT_REFERENCE = "resolve_suspect_reference"
    SELECTION_RUN = "selection_run"
    CALSET_CREATE = "calset_create"
    MODEL_TRAIN = "model_train"
    MODEL_VALIDATE = "model_validate"
    MODEL_SUBMIT = "model_submit"
    MODEL_APPROVE = "model_approve"
    MODEL_REJECT = "model_reject"
    MODEL_ACTIVATE = "model_activate"
    MODEL_RETIRE = "model_retire"
    PREDICT = "predict"
    QC_ADD = "qc_add"
    QC_CLEAR_SIGNAL = "qc_clear_signal"
    POLICY_EDIT = "policy_edit"
    TRIGGER_RAISE = "trigger_raise"
    VIEW = "view"
    AUDIT_VERIFY = "audit_verify"
    TRACE = "trace"
    # recorded under their own name, but not a row of the permission table
    SELECTION_CLOSE = "selection_close"
    TRIGGER_CLEAR = "trigger_clear"
    CATALOG_SEED = "catalog_seed"


#: Audit names that are not permissions: closing a selection run is allowed by
#: ``selection_run``, withdrawing a trigger by ``trigger_raise``, and the registry itself
#: seeds the catalog of an empty database.
RECORDED_ONLY: frozenset[Action] = frozenset(
    {Action.SELECTION_CLOSE, Action.TRIGGER_CLEAR, Action.CATALOG_SEED})


def _roles(*names: Role) -> frozenset[Role]:
    return frozenset(names)


_ALL = _roles(*Role)
_ADMIN, _MGR, _ANALYST, _REVIEWER, _AUDITOR = (
    Role.ADMIN, Role.LAB_MANAGER, Role.ANALYST, Role.REVIEWER, Role.AUDITOR)

#: The one permission table: action -> roles allowed to perform it.
PERMISSIONS: dict[Action, frozenset[Role]] = {
    Action.USER_ADD: _roles(_ADMIN),
    Action.USER_DEACTIVATE: _roles(_ADMIN),
    Action.USER_REACTIVATE: _roles(_ADMIN),
    Action.SITE_ADD: _roles(_ADMIN),
    Action.INSTRUMENT_ADD: _roles(_ADMIN),
    Action.INSTRUMENT_EVENT: _roles(_ADMIN, _MGR),
    Action.GRADE_ADD: _roles(_ADMIN),
    Action.PROPERTY_EDIT: _roles(_ADMIN),
    Action.METHOD_EDIT: _roles(_ADMIN),
    Action.POLICY_EDIT: _roles(_ADMIN),
    Action.SELECTION_RUN: _roles(_MGR),
    Action.CALSET_CREATE: _roles(_MGR, _ANALYST),
    Action.MODEL_ACTIVATE: _roles(_MGR),
    Action.MODEL_RETIRE: _roles(_MGR),
    Action.TRIGGER_RAISE: _roles(_MGR, _REVIEWER),
    Action.IMPORT_SPECTRA: _roles(_ANALYST),
    Action.IMPORT_REFERENCES: _roles(_ANALYST),
    Action.CORRECT_REFERENCE: _roles(_ANALYST),
    Action.MODEL_TRAIN: _roles(_ANALYST),
    Action.MODEL_SUBMIT: _roles(_ANALYST, _MGR),
    Action.PREDICT: _roles(_ANALYST),
    Action.QC_ADD: _roles(_ANALYST),
    Action.MODEL_VALIDATE: _roles(_REVIEWER, _ANALYST),
    Action.MODEL_APPROVE: _roles(_REVIEWER),
    Action.MODEL_REJECT: _roles(_REVIEWER),
    Action.RESOLVE_SUSPECT_REFERENCE: _roles(_REVIEWER),
    Action.QC_CLEAR_SIGNAL: _roles(_REVIEWER),
    Action.EXPORT_DATA: _roles(_AUDITOR, _ANALYST, _MGR, _REVIEWER),
    Action.AUDIT_VERIFY: _roles(_AUDITOR),
    Action.TRACE: _roles(_AUDITOR, _MGR, _REVIEWER),
    Action.VIEW: _ALL,
}

#: Words used in refusal messages: "may not <phrase>".
ACTION_PHRASES: dict[Action, str] = {
    Action.USER_ADD: "add users",
    Action.USER_DEACTIVATE: "deactivate users",
    Action.USER_REACTIVATE: "reactivate users",
    Action.SITE_ADD: "add sites",
    Action.INSTRUMENT_ADD: "add instruments",
    Action.INSTRUMENT_EVENT: "record instrument events",
    Action.GRADE_ADD: "add fuel grades",
    Action.PROPERTY_EDIT: "edit properties",
    Action.METHOD_EDIT: "edit reference methods",
    Action.POLICY_EDIT: "edit policies",
    Action.SELECTION_RUN: "run sample selections",
    Action.CALSET_CREATE: "create calibration sets",
    Action.MODEL_ACTIVATE: "activate model versions",
    Action.MODEL_RETIRE: "retire model versions",
    Action.TRIGGER_RAISE: "raise revalidation triggers",
    Action.IMPORT_SPECTRA: "import spectra",
    Action.IMPORT_REFERENCES: "import reference results",
    Action.CORRECT_REFERENCE: "correct reference results",
    Action.MODEL_TRAIN: "train models",
    Action.MODEL_SUBMIT: "submit model versions for review",
    Action.PREDICT: "predict",
    Action.QC_ADD: "add QC results",
    Action.MODEL_VALIDATE: "validate model versions",
    Action.MODEL_APPROVE: "approve model versions",
    Action.MODEL_REJECT: "reject model versions",
    Action.RESOLVE_SUSPECT_REFERENCE: "resolve suspect reference results",
    Action.QC_CLEAR_SIGNAL: "clear QC signals",
    Action.EXPORT_DATA: "export data",
    Action.AUDIT_VERIFY: "verify the audit trail",
    Action.TRACE: "trace records",
    Action.VIEW: "view records",
}

#: The permission each user-made lifecycle move needs (``supersede`` is a system move).
LIFECYCLE_PERMISSIONS: dict[LifecycleAction, Action] = {
    LifecycleAction.VALIDATE: Action.MODEL_VALIDATE,
    LifecycleAction.SUBMIT: Action.MODEL_SUBMIT,
    LifecycleAction.APPROVE: Action.MODEL_APPROVE,
    LifecycleAction.REJECT: Action.MODEL_REJECT,
    LifecycleAction.ACTIVATE: Action.MODEL_ACTIVATE,
    LifecycleAction.RETIRE: Action.MODEL_RETIRE,
}


def _as_action(action: Action | str) -> Action:
    try:
        action = Action(action)
    except ValueError:
        raise InputError(f"unknown action {action!r}", field="action") from None
    if action in RECORDED_ONLY:
        raise InputError(f"{action.value} is recorded in the audit trail but is not a "
                         "permission of its own", field="action")
    return action


def _as_roles(roles: Iterable[Role | str]) -> frozenset[Role]:
    if isinstance(roles, str):
        # a bare string would otherwise be read letter by letter
        roles = [roles]
    out = set()
    for role in roles:
        try:
            out.add(Role(role))
        except ValueError:
            raise InputError(f"unknown role {role!r}; known roles: "
                             + ", ".join(r.value for r in Role), field="roles") from None
    return frozenset(out)


def roles_allowed(action: Action | str) -> frozenset[Role]:
    """Roles allowed to perform ``action``."""
    return PERMISSIONS[_as_action(action)]


def is_allowed(roles: Iterable[Role | str], action: Action | str) -> bool:
    """True if any of ``roles`` may perform ``action``."""
    return bool(_as_roles(roles) & roles_allowed(action))


def allowed_actions(roles: Iterable[Role | str]) -> list[Action]:
    """Actions any of ``roles`` may perform, in :class:`Action` order (for menus)."""
    held = _as_roles(roles)
    return [action for action in Action if held & PERMISSIONS.get(action, frozenset())]


def require(roles: Iterable[Role | str], action: Action | str, *, user: str | None = None) -> None:
    """Refuse unless one of ``roles`` may perform ``action``.

    Parameters
    ----------
    roles : iterable of Role or str
        Roles the acting user holds.
    action : Action or str
    user : str, optional
        User name for the message.

    Raises
    ------
    PermissionDenied
        e.g. ``"user 'x' (roles: analyst) may not approve model versions;
        allowed roles: reviewer"``.
    InputError
        Unknown role or action.
    """
    action = _as_action(action)
    held = _as_roles(roles)
    allowed = PERMISSIONS[action]
    if held & allowed:
        return
    who = f"user {user!r}" if user is not None else "a user"
    held_text = ", ".join(r.value for r in Role if r in held) or "none"
    allowed_text = ", ".join(r.value for r in Role if r in allowed)
    raise PermissionDenied(f"{who} (roles: {held_text}) may not {ACTION_PHRASES[action]}; "
                           f"allowed roles: {allowed_text}")
