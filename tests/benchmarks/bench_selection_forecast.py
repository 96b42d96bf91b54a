"""Honesty check of the error forecast: does the realised RMSEP fall inside the 80 % band?

Generated histories (``seed_demo.synthetic``, invented regular-E10 blends, both
seasons): a calibration set of 30, 45 or 60 blends, a pool of 200 and a test set of
200 future blends of the same production, all with reference values carrying the
method's repeatability scatter (σ_r = r/2.77, ISO 5725-6). For each history
:func:`registry.selection.forecast.forecast_error` forecasts the RMSEP after adding
10, 20 and 40 picks (band 80 %, the test-set size passed as ``n_validation``); then
the picks are made — at random, or by Kennard–Stone augmenting the calibration set
when the curve was measured that way — the PLS model is refitted with the same
number of components and scored on the test set against its reference values.

Printed: the share of forecasts whose band holds the realised RMSEP (goal: >= 70 %
for the 80 % band), by curve method and property, and one forecast in the shape a
planning command would show.

Run: ``python tests/benchmarks/bench_selection_forecast.py``.
"""

from __future__ import annotations

import json
import sys
import time
from pathlib import Path

import numpy as np
from threadpoolctl import threadpool_limits

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from registry.chemometrics import PLSRegressor  # noqa: E402
from registry.precision import LIMIT_FACTOR  # noqa: E402
from registry.selection.evaluation import rmsep  # noqa: E402
from registry.selection.forecast import forecast_error  # noqa: E402
from registry.selection.strategies import SelectionProblem  # noqa: E402
from registry.services.models import DEFAULT_RECIPE  # noqa: E402
from registry.spectra.preprocessing import Recipe  # noqa: E402
from seed_demo.synthetic import (PRECISIONS, generate_population, reference_noise,  # noqa: E402
                                 reference_sigma)

PROPERTIES = ("RON", "MON", "DENSITY", "VP", "T50")
CAL_SIZES = (30, 45, 60)
STEPS = (10, 20, 40)
N_HISTORIES = 16
SEED = 20261215


def history(i: int):
    prop = PROPERTIES[i % len(PROPERTIES)]
    n_cal = CAL_SIZES[i % len(CAL_SIZES)]
    method = ("random", "kennard-stone")[i % 2]
    pop = generate_population(n_cal + 400, grade="regular-E10", seed=SEED + i)
    X = Recipe.from_json(DEFAULT_RECIPE).build(pop.axis).fit_transform(pop.spectra)
    y_true = pop.properties[prop].to_numpy()
    y = reference_noise(prop, y_true, np.random.default_rng(SEED + i))
    sigma_r = float(reference_sigma(prop, y_true.mean()))
    sigma_R = float(reference_sigma(prop, y_true.mean(), between_labs=True))
    cal, pool, test = (np.arange(n_cal), np.arange(n_cal, n_cal + 200),
                       np.arange(n_cal + 200, n_cal + 400))
    return prop, method, X, y, cal, pool, test, sigma_r, sigma_R


def main() -> int:
    started = time.perf_counter()
    hits: dict[tuple[str, str], list[bool]] = {}
    example = None
    with threadpool_limits(1):
        for i in range(N_HISTORIES):
            prop, method, X, y, cal, pool, test, sigma_r, sigma_R = history(i)
            fc = forecast_error(X[cal], y[cal], X[pool], sigma_r=sigma_r, sigma_R=sigma_R,
                                steps=STEPS, method=method, n_validation=test.size,
                                cost_per_test=1.0, random_state=SEED + i)
            a = fc.n_components
            if method == "random":
                order = np.random.default_rng(SEED + i).permutation(pool.size)
            else:
                order = SelectionProblem(X[pool], X[cal], y[cal], n_components=a).rank(
                    "ks-augment", max(STEPS))
            for row in fc.rows:
                rows = np.concatenate([cal, pool[order[:row["added"]]]])
                model = PLSRegressor(n_components=min(a, rows.size - 2)).fit(X[rows], y[rows])
                realised = rmsep(y[test], model.predict(X[test]))
                hits.setdefault((method, prop), []).append(row["low"] <= realised <= row["high"])
            if example is None:
                example = (prop, PRECISIONS[prop]["code"], fc.as_dict())
    all_hits = [h for v in hits.values() for h in v]
    print(f"{N_HISTORIES} generated histories x {len(STEPS)} budgets = {len(all_hits)} "
          f"forecasts; 80 % bands")
    for method in ("random", "kennard-stone"):
        per = {p: hits[(method, p)] for p in PROPERTIES if (method, p) in hits}
        flat = [h for v in per.values() for h in v]
        print(f"  curve and picks by {method:<14} coverage {np.mean(flat):.2f} "
              f"({sum(flat)}/{len(flat)}): " + ", ".join(
                  f"{p} {sum(v)}/{len(v)}" for p, v in per.items()))
    share = float(np.mean(all_hits))
    print(f"  overall coverage {share:.2f} ({sum(all_hits)}/{len(all_hits)}); goal >= 0.70: "
          f"{'met' if share >= 0.70 else 'NOT met'}")
    prop, method_name, shape = example
    print(f"\nexample forecast ({prop}, reference method {method_name}; σ_R = R/"
          f"{LIMIT_FACTOR:.2f}; cost 1 per pick):")
    print(json.dumps({k: shape[k] for k in ("now", "forecast", "to_reach", "to_reach_reason",
                                             "floor")},
                     indent=1, default=lambda v: round(v, 4) if isinstance(v, float) else v))
    print(f"total {time.perf_counter() - started:.0f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
