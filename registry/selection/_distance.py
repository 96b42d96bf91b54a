"""Squared distances from one row to all rows, in O(n) extra memory.

The selection algorithms only ever need the distances from the row just
picked to every candidate, so no n×n matrix is ever built. We use

    ||x - y||²_W = ||x - c||²_W + ||y - c||²_W - 2 (x - c)ᵀ W (y - c)

with ``c`` the column mean (centring keeps the cancellation small for
spectra with a large common offset) and ``W`` a diagonal weight (1/scale²
or 1/eigenvalue). The ``||x - c||²_W`` are computed once; each query is one
matrix–vector product ``X @ v``, which is bound by memory bandwidth.

When ``X`` already has the working dtype it is used as given (no copy; the
centring and weights are applied to the query vector). Otherwise a
centred, weighted working copy in the requested dtype is made block by
block.
"""

from __future__ import annotations

import numpy as np

# Target size (elements) of any temporary block: 2 M float64 = 16 MB.
BLOCK_ELEMENTS = 2_000_000


class SquaredDistances:
    """Weighted squared Euclidean distances between rows of ``X``.

    Parameters
    ----------
    X : ndarray of shape (n, d)
        Finite data (already checked).
    weights : ndarray of shape (d,), optional
        Per-column weights ``w`` of ``Σ w_k (x_k - y_k)²``; None = all 1.
    dtype : numpy dtype
        Working precision of the products (float64 or float32).

    Attributes
    ----------
    norms : ndarray of shape (n,)
        ``||x_i - c||²_W`` in float64.
    tol : float
        Squared distances at or below ``tol`` cannot be told from 0 at the
        working precision: such rows are treated as identical, and values
        within ``tol`` of each other as tied.
    """

    def __init__(self, X: np.ndarray, weights: np.ndarray | None, dtype) -> None:
        dtype = np.dtype(dtype)
        if dtype not in (np.dtype(np.float64), np.dtype(np.float32)):
            raise ValueError("dtype must be float64 or float32")
        self.dtype = dtype
        n, d = X.shape
        self.n = n
        centre = X.mean(axis=0, dtype=np.float64)
        step = max(1, BLOCK_ELEMENTS // max(d, 1))
        self.norms = np.empty(n, dtype=np.float64)
        if X.dtype == dtype:
            # Work on the caller's array; centre and weights go into the query.
            self.data = X
            self.centre = centre
            self.weights = weights
            for a in range(0, n, step):
                block = X[a:a + step].astype(np.float64, copy=True)
                block -= centre
                block *= block
                self.norms[a:a + step] = (block @ weights if weights is not None
                                          else block.sum(axis=1))
            # Rounding of X @ v scales with the *uncentred* norms, at most
            # (max ||x - c||_W + ||c||_W)².
            c_norm = float(np.sqrt(centre**2 @ weights if weights is not None else centre @ centre))
            scale = (float(np.sqrt(self.norms.max())) + c_norm) ** 2
        else:
            # dtype conversion needs a copy anyway: store it centred and weighted.
            root_w = np.sqrt(weights) if weights is not None else None
            self.data = np.empty((n, d), dtype=dtype)
            for a in range(0, n, step):
                block = X[a:a + step].astype(np.float64, copy=True)
                block -= centre
                if root_w is not None:
                    block *= root_w
                self.data[a:a + step] = block
                stored = self.data[a:a + step].astype(np.float64)
                self.norms[a:a + step] = np.einsum("ij,ij->i", stored, stored)
            self.centre = None
            self.weights = None
            scale = float(self.norms.max())
        self.tol = 32.0 * float(np.finfo(dtype).eps) * scale

    def _query_vector(self, y: np.ndarray) -> tuple[np.ndarray, float]:
        """Return ``v`` and scalar ``s`` with ``(x_i - c)ᵀ W (y - c) = X_i·v - s``."""
        if self.centre is None:
            return y, 0.0
        v = y.astype(np.float64) - self.centre
        if self.weights is not None:
            v *= self.weights
        return v.astype(self.dtype, copy=False), float(self.centre @ v)

    def _cross_terms(self, i: int) -> np.ndarray:
        """``||x_j - c||²_W + ||x_i - c||²_W - 2 (x_j - c)ᵀW(x_i - c)`` for all j, unclipped."""
        v, s = self._query_vector(self.data[i])
        out = (self.data @ v).astype(np.float64, copy=False)
        out *= -2.0
        out += self.norms
        out += self.norms[i] + 2.0 * s
        return out

    def from_row(self, i: int) -> np.ndarray:
        """Squared distances from row ``i`` to every row (float64, >= 0)."""
        d2 = self._cross_terms(i)
        np.maximum(d2, 0.0, out=d2)
        return d2

    def lower_min(self, i: int, min_d2: np.ndarray) -> None:
        """``min_d2 = min(min_d2, d²(i, ·))`` in place.

        Skips the clip at 0: a rounding-negative value only occurs for rows
        identical to row i, which are <= ``tol`` and so count as 0 anyway.
        """
        np.minimum(min_d2, self._cross_terms(i), out=min_d2)

    def _cross_block(self, a: int, b: int, c0: int) -> np.ndarray:
        """``(x_i - c)ᵀ W (x_j - c)`` for rows a..b-1 against rows c0..n-1."""
        rows = self.data[a:b]
        if self.centre is None:
            return (rows @ self.data[c0:].T).astype(np.float64, copy=False)
        left = rows.astype(np.float64) - self.centre
        if self.weights is not None:
            left *= self.weights
        g = (left.astype(self.dtype, copy=False) @ self.data[c0:].T).astype(np.float64, copy=False)
        g -= (left @ self.centre)[:, None]
        return g

    def farthest_pair(self, allowed: np.ndarray | None = None) -> tuple[int, int, float]:
        """Exact most distant pair ``(i, j)``, ``i < j``, among ``allowed`` rows.

        Blocked: each block of rows is compared with all later rows, so the
        largest temporary is ~``BLOCK_ELEMENTS`` values; time O(n²d).
        Ties (within ``tol``) go to the lexicographically lowest ``(i, j)``.
        Returns ``(i, j, squared_distance)``.
        """
        n = self.n
        row_max = np.full(n, -np.inf)
        rows_per_block = max(1, BLOCK_ELEMENTS // max(n, 1))
        for a in range(0, n, rows_per_block):
            b = min(n, a + rows_per_block)
            d2 = self._cross_block(a, b, a)
            d2 *= -2.0
            d2 += self.norms[a:b, None]
            d2 += self.norms[None, a:]
            # Only pairs j > i: blank the lower triangle of the diagonal square.
            lower = np.tril(np.ones((b - a, b - a), dtype=bool))
            d2[:, : b - a][lower] = -np.inf
            if allowed is not None:
                d2[:, ~allowed[a:]] = -np.inf
            row_max[a:b] = d2.max(axis=1) if d2.shape[1] else -np.inf
        if allowed is not None:
            row_max[~allowed] = -np.inf
        best = float(row_max.max())
        i = int(np.argmax(row_max >= best - self.tol))
        d2_i = self.from_row(i)
        d2_i[: i + 1] = -np.inf
        if allowed is not None:
            d2_i[~allowed] = -np.inf
        best_i = float(d2_i.max())
        j = int(np.argmax(d2_i >= best_i - self.tol))
        return i, j, best_i


def column_variance(X: np.ndarray, ddof: int = 0) -> np.ndarray:
    """Column variances in float64, block by block (no n×d temporary)."""
    n, d = X.shape
    mean = X.mean(axis=0, dtype=np.float64)
    total = np.zeros(d)
    step = max(1, BLOCK_ELEMENTS // max(d, 1))
    for a in range(0, n, step):
        block = X[a:a + step].astype(np.float64, copy=True)
        block -= mean
        total += np.einsum("ij,ij->j", block, block)
    return total / max(n - ddof, 1)


def first_max(values: np.ndarray, tol: float) -> int:
    """Index of the first value within ``tol`` of the maximum (lowest-index tie rule)."""
    top = int(np.argmax(values))
    # Only rows up to the first exact maximum can win a tie.
    return int(np.argmax(values[: top + 1] >= values[top] - tol))


def first_min(values: np.ndarray, tol: float) -> int:
    """Index of the first value within ``tol`` of the minimum (lowest-index tie rule)."""
    return int(np.argmax(values <= values.min() + tol))
