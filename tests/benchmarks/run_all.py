"""Run every benchmark script in this folder (``make bench``) and print a short index.

Each ``bench_*.py`` is a plain script that prints its own figures and ratios
against references measured in the same run. Figures depend on the machine:
OPENBLAS_CORETYPE and the BLAS thread count are printed with them.
"""

from __future__ import annotations

import os
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent


def main(argv: list[str]) -> int:
    names = argv or sorted(p.stem for p in HERE.glob("bench_*.py"))
    print(f"OPENBLAS_CORETYPE={os.environ.get('OPENBLAS_CORETYPE', '(unset)')} "
          f"OMP_NUM_THREADS={os.environ.get('OMP_NUM_THREADS', '(unset)')} cpus={os.cpu_count()}")
    failures = []
    for name in names:
        script = HERE / f"{name.removesuffix('.py')}.py"
        print(f"\n===== {script.name} =====", flush=True)
        started = time.perf_counter()
        rc = subprocess.call([sys.executable, str(script)], cwd=HERE.parents[1])
        print(f"----- {script.name}: exit {rc}, {time.perf_counter() - started:.1f} s", flush=True)
        if rc:
            failures.append(script.name)
    if failures:
        print("\nbenchmarks that failed to run: " + ", ".join(failures))
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
