"""Canonical JSON and hashing: one byte-exact text for any payload.

The one implementation for the audit chain, signatures and content hashes.
Hashes are always computed over this text, never over what a database returns
(PostgreSQL's JSONB reorders keys).

Rules: object keys sorted (by code point), no spaces, non-ASCII kept as UTF-8,
floats as Python ``repr`` (shortest round-trip form), numpy scalars and arrays
as their Python values, enums as their values, datetimes as ISO-8601 UTC with
microseconds and a ``Z``. It resembles RFC 8785 but is not it (number
formatting differs). Ambiguous input is refused rather than guessed: naive
datetimes, NaN/infinity, non-string keys, sets, bytes.
"""

from __future__ import annotations

import hashlib
import json
import math
import uuid
from collections.abc import Mapping
from datetime import date, datetime, timezone
from enum import Enum
from typing import Any

import numpy as np

from ..errors import InputError

def utc_text(value: datetime, path: str) -> str:
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
        return utc_text(obj, path)
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


def sha256_hex(data: bytes | str) -> str:
    """SHA-256 of ``data`` (text is encoded as UTF-8), lower-case hex."""
    if isinstance(data, str):
        data = data.encode("utf-8")
    return hashlib.sha256(data).hexdigest()


def content_hash(obj: Any) -> str:
    """SHA-256 of the canonical JSON of ``obj``."""
    return sha256_hex(canonical_json(obj))
