"""Benchmark: cross-validated PLS1 (RMSECV for A = 1..20, 10 contiguous folds).

Data: random-but-structured spectra, n × 1,800 points: 25 Gaussian bands with
random concentrations, a per-spectrum offset and slope, and white noise; y is
a linear function of three concentrations plus noise.

Timed, all with one BLAS thread (threadpoolctl):

- ours: ``registry.chemometrics.cross_validate_pls(X, y, 20, folds=10)``;
- bare ikpls: a loop over the same ``KFold(10)`` folds, one
  ``ikpls.numpy.PLS(algorithm=1, scale_X=False, scale_Y=False)`` fit per fold;
- scikit-learn: ``cross_val_predict(PLSRegression(A, scale=False), cv=KFold(10))``
  for every A. At n = 3,000 only A ∈ {1, 4, 8, 12, 16, 20} is timed and the
  other A values are linearly interpolated from them (the figure says so).

Goals: ours ≥ 50× faster than scikit-learn at n = 1,000 and ≥ 40× at 3,000,
≤ 1.25× the bare ikpls loop; max relative RMSECV difference to scikit-learn
≤ 1e-6 (over the A values actually run).

Run: ``python tests/benchmarks/bench_pls_cv.py [n ...]`` (default 1000 3000).
"""

from __future__ import annotations

import os
import sys
import time
from pathlib import Path

import numpy as np
from ikpls.numpy import PLS
from sklearn.cross_decomposition import PLSRegression
from sklearn.model_selection import KFold, cross_val_predict
from threadpoolctl import threadpool_limits

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from registry.chemometrics import cross_validate_pls  # noqa: E402

N_POINTS = 1800
A_MAX = 20
FOLDS = 10
REPEATS = 3


def make_data(n: int, seed: int = 20261202) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    axis = np.linspace(650.0, 4000.0, N_POINTS)
    centres = rng.uniform(700, 3950, 25)
    widths = rng.uniform(8, 60, 25)
    bands = np.exp(-0.5 * ((axis[None, :] - centres[:, None]) / widths[:, None]) ** 2)
    conc = rng.lognormal(0.0, 0.4, (n, 25))
    X = conc @ bands
    X += rng.normal(0.3, 0.05, (n, 1)) + rng.normal(0, 2e-5, (n, 1)) * (axis - 2000.0)
    X += rng.normal(0, 1e-3, X.shape)
    y = 2.0 * conc[:, 0] - 1.5 * conc[:, 3] + conc[:, 7] + rng.normal(0, 0.02, n)
    return X, y


def best_time(fn, repeats: int = REPEATS):
    best, out = np.inf, None
    for _ in range(repeats):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


def bare_ikpls(X, y) -> np.ndarray:
    pred = np.empty((len(y), A_MAX))
    for train, test in KFold(FOLDS).split(X):
        model = PLS(algorithm=1, center_X=True, center_Y=True, scale_X=False, scale_Y=False)
        model.fit(X[train], y[train], A_MAX)
        pred[test] = model.predict(X[test])[:, :, 0].T
    return np.sqrt(np.mean((y[:, None] - pred) ** 2, axis=0))


def sklearn_rmsecv(X, y, a: int) -> float:
    pred = cross_val_predict(PLSRegression(a, scale=False), X, y, cv=KFold(FOLDS)).ravel()
    return float(np.sqrt(np.mean((y - pred) ** 2)))


def run(n: int) -> dict:
    X, y = make_data(n)
    t_ours, res = best_time(lambda: cross_validate_pls(X, y, A_MAX, folds=FOLDS))
    t_bare, rmse_bare = best_time(lambda: bare_ikpls(X, y))
    subset = list(range(1, A_MAX + 1)) if n <= 1000 else [1, 4, 8, 12, 16, 20]
    t_sk_a, rmse_sk = {}, {}
    for a in subset:
        t0 = time.perf_counter()
        rmse_sk[a] = sklearn_rmsecv(X, y, a)
        t_sk_a[a] = time.perf_counter() - t0
    a_all = np.arange(1, A_MAX + 1)
    t_sk = float(np.interp(a_all, subset, [t_sk_a[a] for a in subset]).sum())
    rel = max(abs(res.rmsecv[a - 1] - rmse_sk[a]) / rmse_sk[a] for a in subset)
    rel_bare = float(np.max(np.abs(res.rmsecv - rmse_bare) / rmse_bare))
    return dict(n=n, t_ours=t_ours, t_bare=t_bare, t_sk=t_sk, rel=rel, rel_bare=rel_bare,
                extrapolated=len(subset) < A_MAX, subset=subset, selected=res.selected_components)


def main(argv: list[str]) -> int:
    sizes = [int(a) for a in argv] or [1000, 3000]
    print(f"PLS1 RMSECV benchmark: A = 1..{A_MAX}, {FOLDS} contiguous folds, "
          f"{N_POINTS} points, 1 BLAS thread, best of {REPEATS} (ours, bare ikpls)")
    print(f"OPENBLAS_CORETYPE={os.environ.get('OPENBLAS_CORETYPE', '(unset)')}")
    goals = {1000: 50.0, 3000: 40.0}
    with threadpool_limits(limits=1, user_api="blas"):
        for n in sizes:
            r = run(n)
            goal = goals.get(n, 40.0)
            speedup = r["t_sk"] / r["t_ours"]
            overhead = r["t_ours"] / r["t_bare"]
            note = (f" (scikit-learn timed for A in {r['subset']}, other A interpolated)"
                    if r["extrapolated"] else "")
            print(f"\nn = {n}{note}")
            print(f"  ours (cross_validate_pls) {r['t_ours']:8.3f} s   selected A = {r['selected']}")
            print(f"  bare ikpls fold loop      {r['t_bare']:8.3f} s")
            print(f"  scikit-learn loop over A  {r['t_sk']:8.3f} s")
            print(f"  speed-up vs scikit-learn  {speedup:8.1f}x  (goal >= {goal:.0f}x: "
                  f"{'met' if speedup >= goal else 'MISSED'})")
            print(f"  ours / bare ikpls         {overhead:8.2f}   (goal <= 1.25: "
                  f"{'met' if overhead <= 1.25 else 'MISSED'})")
            print(f"  max rel. RMSECV diff vs scikit-learn {r['rel']:.2e} (goal <= 1e-6: "
                  f"{'met' if r['rel'] <= 1e-6 else 'MISSED'}); vs bare ikpls {r['rel_bare']:.1e}")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
