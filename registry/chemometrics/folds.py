"""Cross-validation fold assignment, group-aware.

Folds are assigned to *units*: the unique groups when ``groups`` is given
(replicate spectra of one physical sample share a group, so they always land
in the same fold), otherwise the individual samples. Units are taken in order
of first appearance in the data.

methods
    ``"venetian"``  (default) venetian blinds: unit ``j`` goes to fold ``j mod k``.
                    Every fold spans the whole data order, so rows ordered by time or
                    by value are interpolated, not extrapolated (common practice).
    ``"kfold"``     contiguous blocks, identical to
                    ``sklearn.model_selection.KFold(n_splits=k, shuffle=False)``
                    on the units (the first ``n_units % k`` folds get one extra).
                    On rows sorted by time or value each test block lies outside
                    the range of its training rows, so RMSECV measures extrapolation.
    ``"loso"``      leave one sample (group) out: one unit per fold, ``k`` ignored.
    ``"random"``    identical to ``KFold(n_splits=k, shuffle=True,
                    random_state=random_state)`` on the units.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from registry.errors import InputError

FOLD_METHODS = ("venetian", "kfold", "loso", "random")


def _units(n_samples: int, groups: Any) -> tuple[np.ndarray, int]:
    """Unit index per sample (0..n_units-1, in order of first appearance)."""
    if groups is None:
        return np.arange(n_samples), n_samples
    groups = np.asarray(groups)
    if groups.ndim != 1 or groups.shape[0] != n_samples:
        raise InputError(f"groups must have one label per sample ({n_samples}), "
                         f"got shape {groups.shape}", field="groups")
    _, first, inverse = np.unique(groups, return_index=True, return_inverse=True)
    # renumber the sorted unique labels by where each first appears
    order_of_label = np.argsort(np.argsort(first))
    return order_of_label[inverse], first.size


def assign_folds(n_samples: int, folds: int = 10, groups: Any = None, *,
                 method: str = "venetian", random_state: Any = None) -> np.ndarray:
    """Fold index (0-based) of every sample.

    Parameters
    ----------
    n_samples : int
    folds : int
        Number of folds (ignored by ``"loso"``).
    groups : array-like of shape (n_samples,), optional
        Group label per sample; samples with one label share a fold.
    method : {"venetian", "kfold", "loso", "random"}, default "venetian"
    random_state : int or None
        Seed for ``"random"``; record it to reproduce the folds.

    Returns
    -------
    ndarray of shape (n_samples,), int64
    """
    if method not in FOLD_METHODS:
        raise InputError(f"unknown fold method {method!r}; use one of {', '.join(FOLD_METHODS)}",
                         field="method")
    unit, n_units = _units(n_samples, groups)
    if method == "loso":
        return unit.astype(np.int64)
    if isinstance(folds, bool) or not isinstance(folds, (int, np.integer)) or folds < 2:
        raise InputError(f"folds must be an integer >= 2, got {folds!r}", field="folds")
    if folds > n_units:
        what = "groups" if groups is not None else "samples"
        raise InputError(f"folds={folds} exceeds the number of {what} ({n_units})", field="folds")
    if method == "venetian":
        return (unit % folds).astype(np.int64)
    order = np.arange(n_units)
    if method == "random":
        # same draw as sklearn KFold(shuffle=True): check_random_state(seed).shuffle
        from sklearn.utils import check_random_state
        check_random_state(random_state).shuffle(order)
    sizes = np.full(folds, n_units // folds, dtype=np.int64)
    sizes[: n_units % folds] += 1
    fold_of_unit = np.empty(n_units, dtype=np.int64)
    fold_of_unit[order] = np.repeat(np.arange(folds), sizes)
    return fold_of_unit[unit]
