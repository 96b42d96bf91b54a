"""Plain JSON values for output and JSON columns: the one lenient converter.

Hashing never uses this: it needs one byte-exact text and refuses ambiguous
values (:mod:`registry.lineage.canonical`). Output and stored documents need
something gentler: a non-finite number (an undefined diagnostic) becomes
``null``, numpy scalars and arrays become Python numbers and lists, enums their
values, and datetimes ISO-8601 text in UTC.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from datetime import date, datetime
from enum import Enum
from typing import Any, Callable

import numpy as np

from .storage.types import as_utc


def utc_iso(value: datetime) -> str:
    """ISO-8601 text of ``value`` in UTC (naive values are taken as UTC), ``+00:00`` form."""
    return as_utc(value).isoformat()


def plain_json(obj: Any, *, datetime_text: Callable[[datetime], str] = utc_iso,
               default: Callable[[Any], Any] | None = None) -> Any:
    """``obj`` as dicts, lists, strings, finite numbers, booleans and ``None``.

    Parameters
    ----------
    obj
        Nested dicts, lists, tuples, numpy arrays and scalars, datetimes,
        dates, enums and plain values.
    datetime_text : callable
        How a datetime is written (default :func:`utc_iso`).
    default : callable, optional
        Called with any other object; its result is converted in turn. Without
        it such an object raises TypeError (bytes always do: blobs are never output).

    Returns
    -------
    The converted value; NaN and infinities become ``None``.
    """
    def convert(value: Any) -> Any:
        if value is None or isinstance(value, (bool, str)):
            return value
        if isinstance(value, np.bool_):
            return bool(value)
        if isinstance(value, Enum):
            return convert(value.value)
        if isinstance(value, (int, np.integer)):
            return int(value)
        if isinstance(value, (float, np.floating)):
            number = float(value)
            return number if math.isfinite(number) else None
        if isinstance(value, datetime):
            return datetime_text(value)
        if isinstance(value, date):
            return value.isoformat()
        if isinstance(value, Mapping):
            return {str(convert(k)): convert(v) for k, v in value.items()}
        if isinstance(value, np.ndarray):
            return [convert(v) for v in value.tolist()]
        if isinstance(value, (list, tuple)):
            return [convert(v) for v in value]
        if isinstance(value, (bytes, bytearray, memoryview)) or default is None:
            raise TypeError(f"a {type(value).__name__} has no plain JSON form")
        return convert(default(value))

    return convert(obj)
