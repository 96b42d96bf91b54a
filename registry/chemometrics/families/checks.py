"""Prediction-time checks of the non-PLS model families, as values, limits and flags.

:class:`FamilyChecks` is read the same way as
:class:`registry.chemometrics.diagnostics.DiagnosticsResult`: per-sample value
arrays, limits, one boolean array per check, ``flag_names(i)`` in a fixed
order and ``records()`` giving one plain JSON-able dict per sample. Each family
names its own checks; the keys of ``values`` and ``limits`` become the keys of
the records, next to ``y_pred`` and ``flags``.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np


def plain(value: Any) -> Any:
    """A float, list or None for JSON: NaN (no value) becomes None."""
    arr = np.asarray(value)
    if arr.ndim == 0:
        x = arr.item()
        if isinstance(x, float) and not np.isfinite(x):
            return None
        return x
    return [plain(v) for v in arr]


@dataclass
class FamilyChecks:
    """Per-sample predictions, check values, limits and flags.

    Attributes
    ----------
    y_pred : ndarray (n,) or (n, m)
        Predictions; NaN where a family gives no value (only a flag).
    values : dict of str to ndarray
        Per-sample check values, first axis = samples (a second axis for
        per-sample lists such as neighbour distances).
    limits : dict of str to float or ndarray
        Limits the values were compared with (the same for every sample).
    flags : dict of str to ndarray of bool (n,)
        One entry per check, in ``flag_order``.
    flag_order : tuple of str
        The family's check names, in the order flags are listed.
    """

    y_pred: np.ndarray
    values: dict[str, np.ndarray]
    limits: dict[str, Any]
    flags: dict[str, np.ndarray]
    flag_order: tuple[str, ...] = field(default=())

    @property
    def n_samples(self) -> int:
        return int(self.y_pred.shape[0])

    @property
    def any_flag(self) -> np.ndarray:
        if not self.flag_order:
            return np.zeros(self.n_samples, dtype=bool)
        return np.any(np.stack([self.flags[k] for k in self.flag_order]), axis=0)

    def flag_names(self, i: int) -> list[str]:
        """Names of the checks sample ``i`` failed, in ``flag_order``."""
        return [k for k in self.flag_order if bool(self.flags[k][i])]

    def flag_lists(self) -> list[list[str]]:
        return [self.flag_names(i) for i in range(self.n_samples)]

    def records(self) -> list[dict[str, Any]]:
        """One plain dict per sample: values, limits, ``y_pred`` and flag names."""
        limits = {k: plain(v) for k, v in self.limits.items()}
        out = []
        for i in range(self.n_samples):
            rec: dict[str, Any] = {k: plain(v[i]) for k, v in self.values.items()}
            rec.update(limits)
            rec["y_pred"] = plain(self.y_pred[i])
            rec["flags"] = self.flag_names(i)
            out.append(rec)
        return out
