"""Lifecycle states of a model version and the legal moves between them.

This module is the one place that spells a state: everything else names the
members of :class:`ModelState` (and :class:`DeploymentState`), and the next
state of a move is always read from :data:`TRANSITIONS` (via
:func:`check_transition`), never written down by the caller.

The table here only says which moves are legal; the services decide *whether*
to make one (for example, a failing validation records its result and leaves
the version in ``draft`` by simply not asking for the ``validate`` move).

Life of a model version (state --action--> state)::

    draft      --validate-->  validated
    validated  --validate-->  validated    (re-validation before submission)
    validated  --submit-->    in_review    (author only)
    validated  --reject-->    rejected
    in_review  --approve-->   approved     (not the author, not the calibration-set creator)
    in_review  --reject-->    rejected
    approved   --activate-->  active
    active     --activate-->  active       (deployed on one more instrument)
    approved   --retire-->    retired
    active     --retire-->    retired
    active     --supersede--> superseded   (system action)

``retired``, ``superseded`` and ``rejected`` are terminal: nothing leaves them.
A rejected version is not edited back to life; the author trains a new version.
"""

from __future__ import annotations

from collections.abc import Hashable
from enum import StrEnum

from registry.errors import InputError, PermissionDenied, StateError


class ModelState(StrEnum):
    """State of one model version."""

    DRAFT = "draft"
    VALIDATED = "validated"
    IN_REVIEW = "in_review"
    APPROVED = "approved"
    ACTIVE = "active"
    RETIRED = "retired"
    SUPERSEDED = "superseded"
    REJECTED = "rejected"


class LifecycleAction(StrEnum):
    """A move applied to a model version (the order here is the order shown to users)."""

    VALIDATE = "validate"
    SUBMIT = "submit"
    APPROVE = "approve"
    REJECT = "reject"
    ACTIVATE = "activate"
    RETIRE = "retire"
    SUPERSEDE = "supersede"


S, A = ModelState, LifecycleAction

#: (current state, action) -> next state. Every pair not listed is illegal.
TRANSITIONS: dict[tuple[ModelState, LifecycleAction], ModelState] = {
    (S.DRAFT, A.VALIDATE): S.VALIDATED,
    # re-validation (new validation set, corrected references) before submission
    (S.VALIDATED, A.VALIDATE): S.VALIDATED,
    (S.VALIDATED, A.SUBMIT): S.IN_REVIEW,
    (S.IN_REVIEW, A.APPROVE): S.APPROVED,
    (S.IN_REVIEW, A.REJECT): S.REJECTED,
    # a reviewer may turn down a validated version before it is ever submitted
    (S.VALIDATED, A.REJECT): S.REJECTED,
    (S.APPROVED, A.ACTIVATE): S.ACTIVE,
    # deploying an active version on one more instrument keeps it active
    (S.ACTIVE, A.ACTIVATE): S.ACTIVE,
    # periodic revalidation of a version in service keeps its state (a new record;
    # the record signed at approval is never changed)
    (S.APPROVED, A.VALIDATE): S.APPROVED,
    (S.ACTIVE, A.VALIDATE): S.ACTIVE,
    (S.ACTIVE, A.RETIRE): S.RETIRED,
    # an approved version that will never be deployed can be retired directly
    (S.APPROVED, A.RETIRE): S.RETIRED,
    # the system does this when another version is activated on all of its instruments
    (S.ACTIVE, A.SUPERSEDE): S.SUPERSEDED,
}

del S, A

#: States nothing leaves.
TERMINAL_STATES: frozenset[ModelState] = frozenset(
    {ModelState.RETIRED, ModelState.SUPERSEDED, ModelState.REJECTED})

#: Versions in service: they predict in routine use and fall due for revalidation.
IN_SERVICE_STATES: frozenset[ModelState] = frozenset({ModelState.APPROVED, ModelState.ACTIVE})

#: The current model of a property on a grade is the newest version in the first of these
#: groups of states that has one: an active version; failing that the newest approved or
#: validated one. Its calibration space is the one to show and to select new samples against.
CURRENT_MODEL_PREFERENCE: tuple[tuple[ModelState, ...], ...] = (
    (ModelState.ACTIVE,), (ModelState.APPROVED, ModelState.VALIDATED))
#: Every state a current model can be in (passed validation, neither held nor ended).
CURRENT_MODEL_STATES: frozenset[ModelState] = frozenset(
    s for group in CURRENT_MODEL_PREFERENCE for s in group)


class DeploymentState(StrEnum):
    """State of one deployment of a version on one instrument."""

    ACTIVE = "active"
    SUPERSEDED = "superseded"  # another version was activated there
    RETIRED = "retired"  # taken out of service there


#: Actions only the registry itself performs, never a user.
SYSTEM_ACTIONS: frozenset[LifecycleAction] = frozenset({LifecycleAction.SUPERSEDE})


def as_state(state: ModelState | str) -> ModelState:
    """``state`` as a :class:`ModelState`; InputError (field ``state``) for an unknown name."""
    try:
        return ModelState(state)
    except ValueError:
        raise InputError(f"unknown model state {state!r}; known states: "
                         + ", ".join(s.value for s in ModelState), field="state") from None


def _as_action(action: LifecycleAction | str) -> LifecycleAction:
    try:
        return LifecycleAction(action)
    except ValueError:
        raise InputError(f"unknown lifecycle action {action!r}; known actions: "
                         + ", ".join(a.value for a in LifecycleAction), field="action") from None


def allowed_actions(state: ModelState | str, *, include_system: bool = False) -> list[LifecycleAction]:
    """Actions legal in ``state``, in :class:`LifecycleAction` order.

    System actions (``supersede``) are left out unless ``include_system`` is true,
    because users cannot perform them.
    """
    state = as_state(state)
    return [action for action in LifecycleAction
            if (state, action) in TRANSITIONS
            and (include_system or action not in SYSTEM_ACTIONS)]


def is_terminal(state: ModelState | str) -> bool:
    """True if no action can leave ``state``."""
    return as_state(state) in TERMINAL_STATES


def check_transition(state: ModelState | str, action: LifecycleAction | str, *,
                     label: str = "model version") -> ModelState:
    """Return the state ``action`` leads to from ``state``, or refuse.

    Parameters
    ----------
    state : ModelState or str
        Current state of the version.
    action : LifecycleAction or str
        Requested move.
    label : str
        How to name the version in the message, e.g. ``"model v3"``.

    Returns
    -------
    ModelState
        The next state.

    Raises
    ------
    StateError
        The move is not legal; the message names the current state and the
        actions that are allowed in it, e.g.
        ``"cannot activate: model v3 is in_review; allowed actions: approve, reject"``.
    InputError
        ``state`` or ``action`` is not a known value.
    """
    state = as_state(state)
    action = _as_action(action)
    new_state = TRANSITIONS.get((state, action))
    if new_state is not None:
        return new_state
    if state in TERMINAL_STATES:
        raise StateError(f"cannot {action}: {label} is {state}; {state} is final, "
                         "no further actions are allowed")
    allowed = allowed_actions(state, include_system=action in SYSTEM_ACTIONS)
    raise StateError(f"cannot {action}: {label} is {state}; allowed actions: "
                     + ", ".join(a.value for a in allowed))


def check_separation_of_duties(action: LifecycleAction | str, actor_id: Hashable,
                               author_id: Hashable, calset_creator_id: Hashable | None) -> None:
    """Refuse a move that the acting user may not make on *this* version.

    Rules:

    * ``submit``: only the author submits their own version for review.
    * ``approve``: the approver is neither the author of the version nor the
      creator of the calibration set it was trained on (four-eyes principle;
      common practice for regulated records).
    * other moves carry no person-specific rule here (role checks live in
      :mod:`registry.lifecycle.permissions`). ``reject`` is deliberately left
      open: turning a version down cannot put an unchecked model into use.

    Parameters
    ----------
    action : LifecycleAction or str
    actor_id, author_id : hashable
        User ids of the acting user and of the version's author.
    calset_creator_id : hashable or None
        User id of whoever created the calibration set; None if not recorded.

    Raises
    ------
    PermissionDenied
        The actor may not make this move on this version.
    InputError
        ``actor_id`` or ``author_id`` is missing, or ``action`` is unknown.
    """
    action = _as_action(action)
    if actor_id is None:
        raise InputError("acting user is missing", field="actor_id")
    if author_id is None:
        raise InputError("model version has no recorded author", field="author_id")
    if action is LifecycleAction.SUBMIT and actor_id != author_id:
        raise PermissionDenied(f"user {actor_id!r} may not submit this model version: "
                               f"only its author (user {author_id!r}) may submit it for review")
    if action is LifecycleAction.APPROVE:
        if actor_id == author_id:
            raise PermissionDenied(f"user {actor_id!r} may not approve this model version: "
                                   "they are its author (separation of duties: the approver "
                                   "must be neither the author nor the creator of its "
                                   "calibration set)")
        if calset_creator_id is not None and actor_id == calset_creator_id:
            raise PermissionDenied(f"user {actor_id!r} may not approve this model version: "
                                   "they created its calibration set (separation of duties: "
                                   "the approver must be neither the author nor the creator "
                                   "of its calibration set)")
