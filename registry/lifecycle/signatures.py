"""Electronic signatures on model versions, and the canonical JSON they hash.

A signature binds a person, an instant and a meaning to the exact content
signed, as 21 CFR Part 11 §11.50 asks of a signed electronic record (printed
name of the signer, date and time, and the meaning of the signature) and
§11.70 asks that it stay linked to its record. The content is referred to by
hashes: the version's artifact, its validation record and its calibration
set. If any of those later changes, :meth:`SignatureRecord.is_intact` turns
false.

:func:`canonical_json` is general on purpose: the audit chain hashes its
events with it too. Its rules: object keys sorted (by code point), no spaces,
non-ASCII kept as UTF-8, floats as Python ``repr`` (shortest round-trip
form), numpy scalars and arrays as their Python values, datetimes as
ISO-8601 UTC with microseconds and a ``Z``. It resembles RFC 8785 but is not
it (number formatting differs). Ambiguous input is refused rather than
guessed: naive datetimes, NaN/infinity, non-string keys, sets, bytes.
"""

from __future__ import annotations

import hashlib
import hmac
import json
import math
import uuid
from collections.abc import Hashable, Mapping
from dataclasses import dataclass
from datetime import date, datetime, timezone
from enum import Enum
from typing import Any

import numpy as np

from registry.errors import InputError
from registry.lifecycle.revalidation import to_site_time
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


def _utc_text(value: datetime, path: str) -> str:
    if value.tzinfo is None or value.utcoffset() is None:
        raise InputError(f"datetime at {path} has no time zone; cannot place it in UTC",
                         field=path)
    utc = value.astimezone(timezone.utc).replace(tzinfo=None)
    return utc.isoformat(timespec="microseconds") + "Z"


def _plain(obj: Any, path: str) -> Any:
    """``obj`` as plain JSON types, refusing anything without one obvious form."""
    if obj is None or isinstance(obj, (bool, np.bool_)):
        return None if obj is None else bool(obj)
    if isinstance(obj, Enum):
        return _plain(obj.value, path)
    if isinstance(obj, str):
        return str(obj)
    if isinstance(obj, (int, np.integer)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        value = float(obj)
        if not math.isfinite(value):
            raise InputError(f"{value} at {path} has no JSON form", field=path)
        return value
    if isinstance(obj, datetime):
        return _utc_text(obj, path)
    if isinstance(obj, date):
        return obj.isoformat()
    if isinstance(obj, uuid.UUID):
        return str(obj)
    if isinstance(obj, Mapping):
        out = {}
        for key, value in obj.items():
            if isinstance(key, Enum):
                key = key.value
            if not isinstance(key, str):
                raise InputError(f"key {key!r} at {path} is not a string", field=path)
            out[str(key)] = _plain(value, f"{path}.{key}")
        return out
    if isinstance(obj, np.ndarray):
        return [_plain(v, f"{path}[{i}]") for i, v in enumerate(obj.tolist())]
    if isinstance(obj, (list, tuple)):
        return [_plain(v, f"{path}[{i}]") for i, v in enumerate(obj)]
    raise InputError(f"value of type {type(obj).__name__} at {path} has no canonical JSON form",
                     field=path)


def canonical_json(obj: Any) -> str:
    """One fixed JSON text for ``obj``, so equal content always hashes equal.

    Raises
    ------
    InputError
        For values with no single obvious JSON form; ``field`` is the path
        (``$.a[2].b``) to the offending value.
    """
    return json.dumps(_plain(obj, "$"), sort_keys=True, separators=(",", ":"),
                      ensure_ascii=False, allow_nan=False)


def sha256_hex(text: str) -> str:
    """SHA-256 of ``text`` encoded as UTF-8, lower-case hex."""
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


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
                "signed_at": _utc_text(self.signed_at, "signed_at"),
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
