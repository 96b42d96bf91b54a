"""Benchmarks of registry.selection against references measured in the same run.

Plain script (``make bench``); prints figures and ratios. BLAS is capped at
one thread (threadpoolctl): on the shared 2-core machines more threads only
add noise. Peak memory is measured with tracemalloc, which sees numpy's
array allocations (not the input data made before the measurement).

(a) Kennard–Stone, 10,000 × 1,800, k = 200, autoscaled, first pick farthest
    from the mean: ours vs the general-purpose ``kennard-stone`` package
    (same scaling and start; picks must be identical) and vs a textbook
    version that builds the full scipy ``cdist`` matrix (timed on a subset
    and extrapolated by (n/n_sub)²; its matrix alone is n²·8 bytes).
    Goals: >= 10× faster and >= 10× less memory than both.
(b) Kennard–Stone, 1,000,000 × 20, k = 500, start="mean": time vs k bare
    matrix–vector products over the same matrix (the memory-bandwidth
    floor). Goals: <= 2× that floor; extra memory <= 1 GB.
(c) D-optimal, n = 10,000, d = 10, k = 30: our exchange (determinant-lemma
    gains, Sherman–Morrison updates) vs the same Fedorov exchange that
    recomputes slogdet for every candidate swap, both from the same start.
    The reference is timed for a few iterations and extrapolated to the
    number of iterations our exchange needed (said in the output).
    Goals: >= 100× faster; log det at least as high.
"""

from __future__ import annotations

import logging
import os
import sys
import threading
import time
import tracemalloc
from pathlib import Path

import numpy as np
from scipy.spatial.distance import cdist
from threadpoolctl import threadpool_limits

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from registry.selection import d_optimal, design_matrix, kennard_stone  # noqa: E402
from registry.selection.d_optimal import _exchange, _sequential_start  # noqa: E402

MB = 1024**2


def measure(fn, *, memory=True, memory_fn=None):
    """Return (result, seconds, peak traced MB) of ``fn()``.

    Timing runs without tracing; the peak comes from a second, traced run of
    ``memory_fn`` (default ``fn``).
    """
    t0 = time.perf_counter()
    result = fn()
    seconds = time.perf_counter() - t0
    peak = float("nan")
    if memory:
        tracemalloc.start()
        (memory_fn or fn)()
        peak = tracemalloc.get_traced_memory()[1] / MB
        tracemalloc.stop()
    return result, seconds, peak


def peak_rss_increase(fn):
    """Run ``fn`` while a thread polls the resident set size every 2 ms.

    Used for the kennard-stone package, whose per-sample Python loop makes
    tracemalloc impractically slow; its n×n distance matrix dominates anyway.
    Returns (seconds, peak RSS increase in MB).
    """
    page = os.sysconf("SC_PAGE_SIZE")

    def rss():
        with open("/proc/self/statm") as f:
            return int(f.read().split()[1]) * page

    base = rss()
    peak = [base]
    done = threading.Event()

    def poll():
        while not done.is_set():
            peak[0] = max(peak[0], rss())
            time.sleep(0.002)

    watcher = threading.Thread(target=poll)
    watcher.start()
    t0 = time.perf_counter()
    try:
        result = fn()
    finally:
        seconds = time.perf_counter() - t0
        done.set()
        watcher.join()
    return result, seconds, (peak[0] - base) / MB


def verdict(ok: bool) -> str:
    return "goal met" if ok else "GOAL MISSED"


def textbook_kennard_stone(X, k):
    """Full distance matrix, then the maximin loop (Kennard & Stone 1969)."""
    D = cdist(X, X, metric="sqeuclidean")
    first = int(np.argmax(((X - X.mean(axis=0)) ** 2).sum(axis=1)))
    picks = [first]
    nearest = D[first].copy()
    nearest[first] = -np.inf
    while len(picks) < k:
        i = int(np.argmax(nearest))
        picks.append(i)
        np.minimum(nearest, D[i], out=nearest)
        nearest[picks] = -np.inf
    return picks


def bench_a():
    print("\n(a) Kennard–Stone 10,000 × 1,800, k = 200 (autoscaled, first pick farthest "
          "from the mean)")
    from kennard_stone._core._core import _KennardStone
    logging.getLogger("kennard_stone").setLevel(logging.WARNING)  # its per-call INFO lines
    rng = np.random.default_rng(0)
    n, d, k = 10_000, 1_800, 200
    X = rng.normal(size=(n, 30)) @ rng.normal(size=(30, d)) + 0.05 * rng.normal(size=(n, d))

    def run_ours():
        return kennard_stone(X, k, start="farthest-from-mean", scale="auto")

    ours, t_ours, m_ours = measure(run_ours)
    _, _, rss_ours = peak_rss_increase(run_ours)
    # The package returns the whole order reversed; it always autoscales.
    pkg, t_pkg, m_pkg = peak_rss_increase(
        lambda: list(_KennardStone(n_groups=1, scale=True).get_indexes(X)[0])[::-1][:k])
    same = ours.tolist() == pkg
    print(f"  ours                 {t_ours:8.2f} s  peak {m_ours:8.1f} MB traced "
          f"(RSS increase {rss_ours:.1f} MB)")
    print(f"  kennard-stone 3.0.1  {t_pkg:8.2f} s  peak {m_pkg:8.1f} MB RSS increase   "
          f"identical picks: {same}")

    n_sub = 2_000
    Xs = (X[:n_sub] - X[:n_sub].mean(axis=0)) / X[:n_sub].std(axis=0)
    _, t_sub, _ = measure(lambda: textbook_kennard_stone(Xs, k), memory=False)
    # cdist dominates (O(n²d)); the maximin loop is O(nk). Memory: the n×n
    # float64 matrix alone, a lower bound.
    t_text = t_sub * (n / n_sub) ** 2
    m_text = n * n * 8 / MB
    print(f"  textbook full cdist  {t_text:8.2f} s  peak {m_text:8.1f} MB   (time extrapolated "
          f"×(n/n_sub)² from {t_sub:.2f} s at n_sub = {n_sub:,}; memory = the n×n matrix)")
    for name, t, m in (("package", t_pkg, m_pkg), ("textbook", t_text, m_text)):
        speed, mem = t / t_ours, m / m_ours
        print(f"  vs {name:9s}: {speed:6.1f}× faster, {mem:6.1f}× less memory   "
              f"[{verdict(speed >= 10 and mem >= 10)}]")
    if not same:
        print("  PICKS DIFFER from the package")


def bench_b():
    sys.stdout.flush()
    print("\n(b) Kennard–Stone 1,000,000 × 20, k = 500, start='mean'")
    rng = np.random.default_rng(1)
    n, d, k = 1_000_000, 20, 500
    X = rng.normal(size=(n, d))
    # Extra memory does not grow with k (one n-vector of nearest distances plus
    # per-pick temporaries), so it is traced on a 20-pick run to save time.
    _, t_ours, m_ours = measure(lambda: kennard_stone(X, k, start="mean"),
                                memory_fn=lambda: kennard_stone(X, 20, start="mean"))
    v = rng.normal(size=d)

    def floor():
        for _ in range(k):
            X @ v
    _, t_floor, _ = measure(floor, memory=False)
    ratio = t_ours / t_floor
    print(f"  ours                     {t_ours:7.2f} s  extra memory {m_ours:7.1f} MB (k=20 run) "
          f"(X itself is {X.nbytes / MB:.0f} MB)")
    print(f"  {k} bare X @ v products  {t_floor:7.2f} s")
    print(f"  ratio {ratio:.2f}× the bandwidth floor   [{verdict(ratio <= 2)}]; extra memory "
          f"[{verdict(m_ours <= 1024)}]")


def slogdet_exchange(Z, subset, max_iter):
    """Fedorov exchange that recomputes slogdet for every (design row, candidate) swap."""
    subset = subset.copy()
    n, p = Z.shape
    in_design = np.zeros(n, dtype=bool)
    in_design[subset] = True
    swaps = []
    for _ in range(max_iter):
        M = Z[subset].T @ Z[subset]
        base = np.linalg.slogdet(M)[1]
        best, best_move = 0.0, None
        outer_all = Z[:, :, None] * Z[:, None, :]  # z zᵀ of every candidate
        for slot, i in enumerate(subset):
            trial = M - np.outer(Z[i], Z[i]) + outer_all
            sign, value = np.linalg.slogdet(trial)
            gain = np.where((sign > 0) & ~in_design, value - base, -np.inf)
            j = int(np.argmax(gain))
            if gain[j] > best + 1e-12:
                best, best_move = gain[j], (slot, j)
        if best_move is None or best <= np.log1p(1e-10):
            break
        slot, j = best_move
        in_design[subset[slot]] = False
        in_design[j] = True
        subset[slot] = j
        swaps.append((slot, j))
    return subset, swaps


def bench_c():
    sys.stdout.flush()
    print("\n(c) D-optimal n = 10,000, d = 10, k = 30")
    rng = np.random.default_rng(2)
    n, d, k = 10_000, 10, 30
    T = rng.normal(size=(n, d)) * np.linspace(3, 0.3, d)
    Z = design_matrix(T)
    fixed = np.empty(0, dtype=np.int64)
    start = _sequential_start(Z, fixed, k)

    (ours_subset, ours_ld, swaps), t_ours, _ = measure(
        lambda: _exchange(Z, fixed, start.copy(), 1000, 25), memory=False)
    n_ref_iter = 3
    (ref_subset, ref_swaps), t_ref_part, _ = measure(
        lambda: slogdet_exchange(Z, start, n_ref_iter), memory=False)
    # Same rule from the same start: the reference makes the same swaps as ours
    # (checked for its first iterations), so a full run would take our number of
    # swaps + 1 final iteration that finds no improving swap.
    t_ref = t_ref_part / max(len(ref_swaps), 1) * (swaps + 1)
    ours_first = _exchange(Z, fixed, start.copy(), n_ref_iter, 25)[0]
    same_path = np.array_equal(ref_subset, ours_first)
    print(f"  our exchange (one start)     {t_ours:8.3f} s, {swaps} swaps, ln det {ours_ld:.4f}")
    print(f"  slogdet-per-swap exchange    {t_ref:8.2f} s  (extrapolated: {len(ref_swaps)} "
          f"iterations took {t_ref_part:.2f} s, scaled to {swaps + 1}); same first "
          f"{len(ref_swaps)} swaps as ours: {same_path}")
    speed = t_ref / t_ours
    print(f"  {speed:.0f}× faster   [{verdict(speed >= 100)}]")

    full, t_full, _ = measure(lambda: d_optimal(T, k, random_state=0), memory=False)
    start_ld = np.linalg.slogdet(Z[start].T @ Z[start])[1]
    print(f"  d_optimal (sequential + Kennard–Stone + 5 random starts) {t_full:.2f} s, "
          f"ln det {full.log_det:.4f} (start {full.start}); sequential start alone "
          f"{start_ld:.4f}")
    print(f"  ln det at least as high as the reference path's end point "
          f"({ours_ld:.4f}): [{verdict(full.log_det >= ours_ld - 1e-9)}]")


def main():
    print("Selection benchmarks; BLAS threads capped at 1; OPENBLAS_CORETYPE="
          f"{os.environ.get('OPENBLAS_CORETYPE', '(unset)')}")
    t0 = time.perf_counter()
    with threadpool_limits(limits=1):
        bench_a()
        bench_b()
        bench_c()
    print(f"\ntotal {time.perf_counter() - t0:.0f} s", flush=True)


if __name__ == "__main__":
    main()
