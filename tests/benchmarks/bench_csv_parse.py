"""Benchmark: streaming CSV spectrum parser against bare pandas.read_csv.

Writes a wide-form CSV of 10,000 spectra × 1,800 points (float32 written
with %.9g, four metadata columns) to a temporary directory, then times

- reference: ``pandas.read_csv(path, engine="c")`` of the whole file;
- ours: ``iter_csv_spectra(path)`` consuming every chunk (validated,
  float32, ascending axis).

Each is timed several times, interleaved, and the best time kept. Peak
memory is the peak resident set size (VmHWM) of a fresh child process doing
only that read, minus its size after imports.
Our own target (no issue sets one; the issue's goal is the whole import, see
bench_intake.py): ours within ~1.3× of the reference time. Since pandas 3.1 the reference
parses a whole file from a path with several threads, which a chunked read cannot use, so the
ratio against pandas on one thread is printed too.

Run: ``python tests/benchmarks/bench_csv_parse.py [n_spectra] [n_points]``.
"""

from __future__ import annotations

import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd
from threadpoolctl import threadpool_limits

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from registry.spectra.formats.csv_matrix import iter_csv_spectra, write_csv_spectra  # noqa: E402
from registry.spectra.record import SpectrumRecord  # noqa: E402

REPEATS = 5


def make_file(path: Path, n_spectra: int, n_points: int) -> None:
    rng = np.random.default_rng(20261201)
    axis = np.linspace(4000.0, 650.0, n_points)  # descending, as instruments write it
    base = np.exp(-0.5 * ((axis[None, :] - rng.uniform(700, 3900, (8, 1))) / 15.0) ** 2).sum(0)

    def records():
        for i in range(n_spectra):
            y = (base * rng.uniform(0.5, 1.5) + rng.normal(0, 1e-3, n_points)).astype(np.float32)
            yield SpectrumRecord(
                sample_id=f"S{i:06d}", x=axis, y=y,
                metadata={"instrument": f"IR-{i % 3}", "acquired_at": "2026-01-05T10:00:00+00:00",
                          "operator": "op1", "grade": "RON95"})

    write_csv_spectra(records(), path,
                      metadata_fields=["instrument", "acquired_at", "operator", "grade"])


def read_pandas(path: Path) -> int:
    return len(pd.read_csv(path, engine="c"))


def read_pandas_serial(path: Path) -> int:
    try:
        with pd.option_context("mode.max_threads", 1):
            return len(pd.read_csv(path, engine="c"))
    except (KeyError, ValueError):  # pandas before 3.1: no such option, always one thread
        return len(pd.read_csv(path, engine="c"))


def read_ours(path: Path) -> int:
    return sum(len(chunk) for chunk in iter_csv_spectra(path))


def child_peak(kind: str, path: Path) -> float:
    """Peak RSS growth (MB) of a fresh process doing one read."""
    out = subprocess.run([sys.executable, __file__, "--child", kind, str(path)],
                         capture_output=True, text=True, check=True)
    return float(out.stdout.strip())


def peak_rss_kib() -> int:
    """Process peak resident size in KiB.

    VmHWM belongs to this process image; ``ru_maxrss`` is a fallback only,
    because on Linux it carries the parent's peak across fork/exec.
    """
    try:
        with open("/proc/self/status") as status:
            for line in status:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1])
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss


def child_main(kind: str, path: str) -> None:
    before = peak_rss_kib()
    (read_pandas if kind == "pandas" else read_ours)(Path(path))
    print((peak_rss_kib() - before) / 1024.0)


def main() -> None:
    n_spectra = int(sys.argv[1]) if len(sys.argv) > 1 else 10_000
    n_points = int(sys.argv[2]) if len(sys.argv) > 2 else 1_800
    print(f"OPENBLAS_CORETYPE={os.environ.get('OPENBLAS_CORETYPE', '(unset)')}; "
          f"BLAS threads capped at 1")
    with tempfile.TemporaryDirectory() as tmp, threadpool_limits(limits=1):
        path = Path(tmp) / "spectra.csv"
        t0 = time.perf_counter()
        make_file(path, n_spectra, n_points)
        print(f"wrote {n_spectra} x {n_points} CSV ({path.stat().st_size / 1e6:.0f} MB) "
              f"in {time.perf_counter() - t0:.1f} s")
        best = {"pandas": float("inf"), "pandas1": float("inf"), "ours": float("inf")}
        for _ in range(REPEATS):
            for kind, reader in (("pandas", read_pandas), ("pandas1", read_pandas_serial),
                                 ("ours", read_ours)):
                t0 = time.perf_counter()
                rows = reader(path)
                best[kind] = min(best[kind], time.perf_counter() - t0)
                assert rows == n_spectra, (kind, rows)
        ratio = best["ours"] / best["pandas"]
        print(f"pandas.read_csv (C engine, whole file): {best['pandas']:.2f} s")
        print(f"iter_csv_spectra (validated, chunks of 1000): {best['ours']:.2f} s")
        print(f"pandas.read_csv on one thread: {best['pandas1']:.2f} s")
        print(f"ratio ours/pandas: {ratio:.2f}; ours/pandas on one thread: "
              f"{best['ours'] / best['pandas1']:.2f} (own target <= 1.3, not an issue goal)")
        peak_pandas = child_peak("pandas", path)
        peak_ours = child_peak("ours", path)
        print(f"peak RSS growth: pandas {peak_pandas:.0f} MB, ours {peak_ours:.0f} MB "
              f"(float32 matrix alone: {n_spectra * n_points * 4 / 1e6:.0f} MB)")


if __name__ == "__main__":
    if len(sys.argv) > 1 and sys.argv[1] == "--child":
        with threadpool_limits(limits=1):
            child_main(sys.argv[2], sys.argv[3])
    else:
        main()
