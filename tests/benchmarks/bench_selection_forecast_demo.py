"""Honesty check of the error forecast on the demo history.

The demo (``seed_demo``, invented data) holds a send list chosen in month 7 for the
first-generation RON model and answered by engine tests. For demos built with several
seeds, :func:`registry.services.planning.forecast_backtest` forecasts the RMSEP after
adding the answered picks to that model's calibration (80 % band), from the data as they
stood before the results came in, and compares it with the 10-fold RMSECV of the
calibration plus those results. Printed: each forecast, its band, the realised RMSECV,
and the share inside the band (the generated-history check is
``bench_selection_forecast.py``).

Run: ``python tests/benchmarks/bench_selection_forecast_demo.py``.
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from sqlmodel import select  # noqa: E402

from registry.services import planning  # noqa: E402
from registry.services.auth import actor_of  # noqa: E402
from registry.services.selection_runs import list_runs  # noqa: E402
from registry.storage.engine import make_engine, session_scope, upgrade  # noqa: E402
from registry.storage.models import User  # noqa: E402
from seed_demo.scenario import build_demo  # noqa: E402

SEEDS = (7, 8, 9)


def main() -> int:
    started = time.perf_counter()
    inside = []
    print(f"demo history, seeds {', '.join(map(str, SEEDS))}: forecast before the send list "
          "was answered vs RMSECV after its results")
    with tempfile.TemporaryDirectory() as tmp:
        for seed in SEEDS:
            url = f"sqlite:///{Path(tmp) / f'demo{seed}.db'}"
            upgrade(url)
            engine = make_engine(url)
            build_demo(engine, seed=seed)
            with session_scope(engine) as s:
                mgr = actor_of(s.exec(select(User).where(User.name == "imara")).one())
                for run in list_runs(s, mgr):
                    if not run["answered_picks"]:
                        continue
                    b = planning.forecast_backtest(s, mgr, run["id"])
                    f = b["forecast"]
                    inside.append(b["inside_band"])
                    print(f"  seed {seed} run {b['run']} ({b['model']}): {b['n_before']} + "
                          f"{b['added']} results; RMSECV before {b['rmsecv_before']:.4f}; "
                          f"forecast {f['rmsep']:.4f} (80 % band {f['low']:.4f}-{f['high']:.4f}); "
                          f"realised {b['rmsecv_after']:.4f}: "
                          f"{'inside' if b['inside_band'] else 'OUTSIDE'}")
            engine.dispose()
    share = sum(inside) / len(inside) if inside else float("nan")
    print(f"  inside the 80 % band: {sum(inside)}/{len(inside)} = {share:.2f} "
          f"(few forecasts: read with care)")
    print(f"total {time.perf_counter() - started:.0f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
