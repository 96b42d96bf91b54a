"""Small helpers shared by the families' plain-array state."""

from __future__ import annotations

from typing import Any

import numpy as np

from registry.errors import InputError


def take_arrays(arrays: dict[str, np.ndarray], names: tuple[str, ...], family: str
                ) -> dict[str, np.ndarray]:
    """The named arrays as contiguous float64, refusing a state that lacks one."""
    out = {}
    for key in names:
        if key not in arrays:
            raise InputError(f"{family} state is missing array {key!r}", field=key)
        out[key] = np.ascontiguousarray(arrays[key], dtype=np.float64)
    return out


def optional_float(value: Any) -> float | None:
    """JSON has no NaN/Inf: store None for 'no limit'."""
    return None if value is None or not np.isfinite(value) else float(value)


def finite_json(document: dict[str, Any]) -> dict[str, Any]:
    """A flat dict with non-finite floats replaced by None (JSON refuses NaN/Inf)."""
    return {k: optional_float(v) if isinstance(v, float) else v for k, v in document.items()}
