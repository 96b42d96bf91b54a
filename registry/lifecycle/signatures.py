"""Electronic signatures on model versions, and the canonical JSON they hash.

A signature binds a person, an instant and a meaning to the exact content
signed, as 21 CFR Part 11 §11.50 asks of a signed electronic record (printed
name of the signer, date and time, and the meaning of the signature) and
§11.70 asks that it stay linked to its record. The content is referred to by
hashes: the version's artifact, its validation record and its calibration
set. If any of those later changes, :meth:`SignatureRecord.is_intact` turns
false.

:func:`canonical_json` (re-exported from :mod:`registry.lineage.canonical`, the one
implementation, shared with the audit chain) gives the hashed text.
"""

from __future__ import annotations

import hmac
from collections.abc import Hashable, Mapping
from dataclasses import dataclass
from datetime import datetime, timezone

from registry.errors import InputError
from registry.lineage.canonical import utc_text, canonical_json, sha256_hex  # noqa: F401  (re-exported)
from registry.lifecycle.revalidation_rules import to_site_time
from registry.lifecycle.states import LifecycleAction

#: What each signed action means, stated with the signature (§11.50(a)(3)).
SIGNATURE_MEANINGS: dict[LifecycleAction, str] = {
    LifecycleAction.APPROVE: "approved as reviewer",
    LifecycleAction.REJECT: "rejected as reviewer",
    LifecycleAction.ACTIVATE: "activated for use",
    LifecycleAction.RETIRE: "retired from use",
}

#: The hashes a model-version signature covers (services may add more parts).
MODEL_VERSION_PARTS: tuple[str, ...] = (
    "artifact_sha256", "validation_record_sha256", "calibration_set_sha256")


def signed_content_hash(parts: Mapping[str, str]) -> str:
    """SHA-256 over the canonical JSON of the named hashes a signature covers.

    Parameters
    ----------
    parts : mapping of str to str
        e.g. ``{"artifact_sha256": ..., "validation_record_sha256": ...,
        "calibration_set_sha256": ...}``.
    """
    if not isinstance(parts, Mapping) or not parts:
        raise InputError("nothing to sign: parts must be a non-empty mapping", field="parts")
    for name, value in parts.items():
        if not isinstance(name, str) or not name:
            raise InputError(f"part name {name!r} must be a non-empty string", field="parts")
        if not isinstance(value, str) or not value:
            raise InputError(f"part {name!r} must be a non-empty string, got {value!r}",
                             field=f"parts.{name}")
    return sha256_hex(canonical_json(dict(parts)))


def _as_signed_action(action: LifecycleAction | str) -> LifecycleAction:
    try:
        action = LifecycleAction(action)
    except ValueError:
        action = None
    if action not in SIGNATURE_MEANINGS:
        raise InputError(f"action {action!r} is not signed; signed actions: "
                         + ", ".join(a.value for a in SIGNATURE_MEANINGS), field="action")
    return action


@dataclass(frozen=True)
class SignatureRecord:
    """Who signed what, when, and meaning what (21 CFR Part 11 §11.50).

    Create with :meth:`sign`; ``content_hash`` is :func:`signed_content_hash`
    of the parts at signing time.
    """

    signer_id: Hashable
    signer_name: str
    signed_at: datetime
    action: LifecycleAction
    meaning: str
    content_hash: str

    @classmethod
    def sign(cls, *, signer_id: Hashable, signer_name: str, action: LifecycleAction | str,
             parts: Mapping[str, str], signed_at: datetime) -> "SignatureRecord":
        """Sign ``parts`` as ``signer_name`` for ``action`` at ``signed_at`` (timezone-aware)."""
        action = _as_signed_action(action)
        if not isinstance(signer_name, str) or not signer_name.strip():
            raise InputError("a signature needs the signer's name", field="signer_name")
        if signer_id is None:
            raise InputError("a signature needs the signer's id", field="signer_id")
        if not isinstance(signed_at, datetime) or signed_at.utcoffset() is None:
            raise InputError("signing time must be a timezone-aware datetime", field="signed_at")
        return cls(signer_id=signer_id, signer_name=signer_name.strip(),
                   signed_at=signed_at.astimezone(timezone.utc), action=action,
                   meaning=SIGNATURE_MEANINGS[action],
                   content_hash=signed_content_hash(parts))

    def is_intact(self, record_parts_now: Mapping[str, str]) -> bool:
        """True if the content now still hashes to what was signed."""
        try:
            now = signed_content_hash(record_parts_now)
        except InputError:
            return False
        return hmac.compare_digest(now, self.content_hash)

    def as_dict(self) -> dict:
        """Plain fields, e.g. to store or to put in an audit event."""
        return {"signer_id": self.signer_id, "signer_name": self.signer_name,
                "signed_at": utc_text(self.signed_at, "signed_at"),
                "action": self.action.value, "meaning": self.meaning,
                "content_hash": self.content_hash}

    def manifestation(self, tz_name: str | None = None) -> str:
        """Human-readable line: name, date and time, meaning (§11.50(a)).

        The time is shown in ``tz_name`` (an IANA zone) if given, else UTC.
        """
        when = self.signed_at
        if tz_name is not None:
            when = to_site_time(when, tz_name)
        stamp = when.strftime("%Y-%m-%d %H:%M:%S ") + (when.tzname() or "UTC")
        return f"{self.signer_name}, {stamp}: {self.meaning}"
