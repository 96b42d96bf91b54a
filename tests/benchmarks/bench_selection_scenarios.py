"""Evidence on the lab's situations: how many reference tests each selection method needs.

A lab selects samples for reference testing when production moves, so the test
set is future production, not a random share of the pool. Three such scenarios,
and an unchanged production for reference, are built from the synthetic fuel generator (``seed_demo.synthetic``; invented
blends, mid-IR spectra by Beer–Lambert, properties by blending rules):

``new component``
    An existing calibration of 50 regular-E10 blends without the new blend
    component; a pool of 300 recent blends, a quarter of them holding the new
    component (2–12 % v/v); the test set is 300 future blends that all hold it.
    Property RON.
``new grade``
    A first calibration (nothing existing) for premium-E10 from a mixed pool
    of 300 blends of all four gasoline grades; the test set is 300 premium-E10
    blends. Property RON.
``unchanged``
    For reference, production that has not moved: existing 50, pool 300 and
    test 300 regular-E10 blends, all from one distribution (a test that favours
    random picks, which follow the test set's distribution). Property RON.
``season``
    An existing calibration of 50 summer regular-E10 blends; a pool of 300
    blends from the change-over, half summer and half winter; the test set is
    300 winter blends. Properties VP and T50.

Calibration reference values carry the reference method's repeatability scatter
(σ_r = r/2.77, ISO 5725-6); test values are the true ones, so RMSEP measures the
model. Spectra: the registry's default recipe (CO₂ region cut, first
Savitzky–Golay derivative). PLS components: chosen once per population by
10-fold cross-validation (Haaland–Thomas rule) on existing + pool with their
reference values, capped at n − 2, and used by every method, so the tables
isolate which samples are picked.

Methods: those of :mod:`registry.selection.strategies` (random; Kennard–Stone in
the current model's score space and on full spectra; KS augmenting the existing set
in the PCA space of existing + pool; D-optimal on the model's PLS scores and on that
PCA space; outside-coverage first; SPXY with the model's predicted values; largest
bootstrap prediction spread), and the registry's default recommendation
(:func:`registry.selection.recommend.recommend_method` for the situation of each
population). Without an existing set the model-space variants equal the PCA ones and
the value-based ones cannot run; they are left out of that table.

Figure of merit: the tests a method needs before its RMSEP reaches the RMSEP that
random picks reach with N tests (mean of 30 random draws), as a ratio to N
("tests saved" = 1 − ratio); also RMSEP at equal budget, method / random. Curves
are averaged over the populations first (10 per scenario, 20 for "new
component", on which the goal is set); 95 % intervals are bootstrap percentiles over
populations (Efron & Tibshirani 1993). A ratio shown as ">x" means the averaged
curve did not reach the target within the largest budget tried (60 tests). The
figures of the methods the recommendation chooses among are compared with
``registry.selection.recommend.EVIDENCE``.

Real data: the fermentation data shipped by chemotools (ATR-FTIR spectra, glucose
by HPLC; Cabaneros Lopez et al., "Transforming data into information: a parallel
hybrid model for real-time state estimation in lignocellulose ethanol
fermentations", Biotechnol. Bioeng. 2021, from memory). The 21 off-line training
spectra are the existing calibration; the 34 on-line spectra nearest in time to an
HPLC sample are pool and test: the 1629 on-line spectra are taken 1.25 min apart
(they then span the 33.9 h of HPLC times, and an off-line model's predictions track
the HPLC values best at that spacing; checked, not documented). They are split
at random into a pool of 17 and a test set of 17, 20 times (budgets N = 4 and 8).
The 20 splits reuse the same 34 samples, so their intervals understate the
uncertainty of this one small data set.

Run: ``python tests/benchmarks/bench_selection_scenarios.py``.
"""

from __future__ import annotations

import sys
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from threadpoolctl import threadpool_limits

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from registry.chemometrics import PLSRegressor, cross_validate_pls  # noqa: E402
from registry.selection.evaluation import rmsep  # noqa: E402
from registry.selection.recommend import EVIDENCE, recommend_method  # noqa: E402
from registry.selection.strategies import METHODS, NEEDS_MODEL, SelectionProblem  # noqa: E402
from registry.services.models import DEFAULT_RECIPE  # noqa: E402
from registry.spectra.preprocessing import Recipe  # noqa: E402
from seed_demo.synthetic import (NEW_COMPONENT, REFERENCE_ANALYZER, blend_properties,  # noqa: E402
                                 generate_population, reference_noise, render_spectra)

N_POPULATIONS = 10
N_POPULATIONS_GOAL = 20  # the scenario the goal is set on gets more, for a tighter interval
#: the methods the recommendation chooses among; their figures are kept in EVIDENCE
EVIDENCE_METHODS = ("ks-augment", "spxy")
BUDGETS = (20, 40)
N_RANDOM = 30
N_BOOT = 2000
GRID = np.array(list(range(0, 21)) + list(range(22, 41, 2)) + list(range(44, 61, 4)))
SEED = 20261214
# without a model these equal ks-augment / d-optimal-pca (all in the pool's PCA space)
SAME_WITHOUT_MODEL = ("ks-model", "d-optimal-pls")


@dataclass
class Situation:
    """One population of one scenario, preprocessed."""

    X_existing: np.ndarray
    y_existing: np.ndarray
    X_pool: np.ndarray
    y_pool: np.ndarray
    X_test: np.ndarray
    y_test: np.ndarray
    n_components: int

    def __post_init__(self):
        # Every PLS regression vector fitted on existing + pool rows lies in the span of
        # those rows (the weights are combinations of X'y and X'X products; Helland,
        # Commun. Stat. Simul. Comput. 17:581, 1988). Scoring in an orthonormal basis of
        # that span gives the same predictions with a fraction of the columns.
        basis = np.linalg.svd(np.vstack([self.X_existing, self.X_pool]),
                              full_matrices=False)[2]
        self.Z_existing = self.X_existing @ basis.T
        self.Z_pool = self.X_pool @ basis.T
        self.Z_test = self.X_test @ basis.T


def _prep(axis, *spectra):
    pipe = Recipe.from_json(DEFAULT_RECIPE).build(axis)
    return [pipe.fit_transform(s) for s in spectra]  # row-wise recipe: no leakage


def _with_new_component(composition: pd.DataFrame, rows, rng) -> pd.DataFrame:
    """Blend the new component into ``rows`` at 2–12 % v/v, the rest scaled down."""
    share = rng.uniform(0.02, 0.12, rows.size)
    v = composition.to_numpy(copy=True)
    v[rows] *= (1.0 - share)[:, None]
    v[rows, list(composition.columns).index(NEW_COMPONENT)] = share
    return pd.DataFrame(v, columns=composition.columns)


def _eval_components(X, y) -> int:
    n = X.shape[0]
    return int(cross_validate_pls(X, y, min(15, n - n // 10 - 2), folds=10).selected_components)


def _situation(Xe, ye, Xp, yp, Xt, yt) -> Situation:
    A = _eval_components(np.vstack([Xe, Xp]), np.concatenate([ye, yp]))
    return Situation(Xe, ye, Xp, yp, Xt, yt, A)


def new_component(seed: int, prop: str = "RON") -> Situation:
    rng = np.random.default_rng(seed)
    old = generate_population(50, grade="regular-E10", seed=seed)
    new = generate_population(600, grade="regular-E10", seed=seed + 1)
    rows = np.concatenate([np.flatnonzero(rng.random(300) < 0.25), np.arange(300, 600)])
    comp = _with_new_component(new.composition, rows, rng)
    y_new = blend_properties(comp, "gasoline")[prop].to_numpy()
    Xe, Xn = _prep(old.axis, old.spectra, render_spectra(comp, REFERENCE_ANALYZER, rng,
                                                          axis=old.axis))
    ye = reference_noise(prop, old.properties[prop].to_numpy(), rng)
    yp = reference_noise(prop, y_new[:300], rng)
    return _situation(Xe, ye, Xn[:300], yp, Xn[300:], y_new[300:])


def new_grade(seed: int, prop: str = "RON") -> Situation:
    rng = np.random.default_rng(seed)
    pool = generate_population(300, seed=seed)  # all four grades, both seasons
    test = generate_population(300, grade="premium-E10", seed=seed + 1)
    Xp, Xt = _prep(pool.axis, pool.spectra, test.spectra)
    yp = reference_noise(prop, pool.properties[prop].to_numpy(), rng)
    empty = np.empty((0, Xp.shape[1]))
    return _situation(empty, np.empty(0), Xp, yp, Xt, test.properties[prop].to_numpy())


def unchanged(seed: int, prop: str = "RON") -> Situation:
    rng = np.random.default_rng(seed)
    pop = generate_population(650, grade="regular-E10", seed=seed)
    (X,) = _prep(pop.axis, pop.spectra)
    y_true = pop.properties[prop].to_numpy()
    y = reference_noise(prop, y_true, rng)
    return _situation(X[:50], y[:50], X[50:350], y[50:350], X[350:], y_true[350:])


def season(seed: int, prop: str) -> Situation:
    rng = np.random.default_rng(seed)
    summer = generate_population(200, grade="regular-E10", season="summer", seed=seed)
    winter = generate_population(450, grade="regular-E10", season="winter", seed=seed + 1)
    Xs, Xw = _prep(summer.axis, summer.spectra, winter.spectra)
    ys = reference_noise(prop, summer.properties[prop].to_numpy(), rng)
    yw_true = winter.properties[prop].to_numpy()
    yw = reference_noise(prop, yw_true, rng)
    # existing: 50 summer; pool: 150 summer + 150 winter; test: 300 winter
    return _situation(Xs[:50], ys[:50], np.vstack([Xs[50:], Xw[:150]]),
                      np.concatenate([ys[50:], yw[:150]]), Xw[150:], yw_true[150:])


# --------------------------------------------------------------- measuring
def _score(s: Situation, picks) -> float:
    X = np.vstack([s.Z_existing, s.Z_pool[picks]])
    y = np.concatenate([s.y_existing, s.y_pool[picks]])
    a = max(1, min(s.n_components, y.size - 2))
    return rmsep(s.y_test, PLSRegressor(n_components=a).fit(X, y).predict(s.Z_test))


def measure(s: Situation, grid, budgets, seed: int) -> dict:
    """RMSEP curves of every applicable method, random at each budget, the situation."""
    grid = grid[(grid <= s.X_pool.shape[0]) & (grid + s.y_existing.size >= 3)]
    problem = SelectionProblem(s.X_pool, s.X_existing, s.y_existing, random_state=seed)
    curves = {}
    for method in METHODS[1:]:
        if not problem.has_model and (method in NEEDS_MODEL or method in SAME_WITHOUT_MODEL):
            continue
        order = problem.rank(method, int(grid.max()))
        curves[method] = np.array([_score(s, order[:k]) for k in grid])
    rng = np.random.default_rng(seed)
    random_at = {N: float(np.mean([_score(s, rng.choice(s.X_pool.shape[0], N, replace=False))
                                   for _ in range(N_RANDOM)])) for N in budgets}
    rec = recommend_method(problem.outside_share, problem.n_existing,
                           references_known=problem.has_model)
    return {"grid": grid, "curves": curves, "random": random_at, "default": rec.method,
            "outside_share": problem.outside_share, "n_existing": problem.n_existing}


def tests_needed(grid, curve, target) -> float:
    """Tests at which ``curve`` first reaches ``target`` (linear between grid points)."""
    below = np.flatnonzero(curve <= target)
    if below.size == 0:
        return np.inf
    j = int(below[0])
    if j == 0:
        return float(grid[0])
    k0, k1, e0, e1 = grid[j - 1], grid[j], curve[j - 1], curve[j]
    return float(k0 + (k1 - k0) * (e0 - target) / (e0 - e1))


def summarise(runs: list[dict], budgets, rng) -> dict:
    """Ratios on the population-mean curves, with bootstrap intervals over populations."""
    grid = runs[0]["grid"]
    methods = list(runs[0]["curves"]) + ["default"]

    def curve_of(run, m):
        return run["curves"][run["default"] if m == "default" else m]

    def ratios(sample):
        out = {}
        for m in methods:
            mean_curve = np.mean([curve_of(r, m) for r in sample], axis=0)
            for N in budgets:
                target = np.mean([r["random"][N] for r in sample])
                idx = int(np.searchsorted(grid, N))
                out[(m, N, "tests")] = tests_needed(grid, mean_curve, target) / N
                out[(m, N, "rmsep")] = mean_curve[idx] / target
        return out

    point = ratios(runs)
    boots = [ratios([runs[i] for i in rng.integers(0, len(runs), len(runs))])
             for _ in range(N_BOOT)]
    ci = {}
    for key in point:
        # "never reached" is +inf: it sorts last, so percentiles are order statistics
        values = np.sort([b[key] for b in boots])
        ci[key] = (float(values[int(0.025 * (len(values) - 1))]),
                   float(values[int(np.ceil(0.975 * (len(values) - 1)))]))
    return {"point": point, "ci": ci, "methods": methods, "grid": grid}


def _fmt(value, lo, hi, cap) -> str:
    def one(v):
        return f">{cap:.2f}" if not np.isfinite(v) else f"{v:.2f}"
    return f"{one(value)} ({one(lo)}–{one(hi)})"


def print_table(title: str, runs: list[dict], budgets, rng) -> dict:
    res = summarise(runs, budgets, rng)
    grid = res["grid"]
    defaults = sorted({r["default"] for r in runs})
    print(f"\n{title}")
    print(f"  {len(runs)} populations; outside-coverage share of the pool "
          f"{np.mean([r['outside_share'] for r in runs]):.2f} (mean); existing "
          f"{runs[0]['n_existing']}; random RMSEP " + ", ".join(
              f"N={N}: {np.mean([r['random'][N] for r in runs]):.4f}" for N in budgets)
          + (f"; existing set alone {np.mean([r['curves'][defaults[0]][0] for r in runs]):.4f}"
             if runs[0]["n_existing"] else ""))
    head = "".join(f"  tests/N at N={N:<3}   RMSEP/random N={N:<3}" for N in budgets)
    print(f"  {'method':<16}{head}")
    for m in res["methods"]:
        cells = []
        for N in budgets:
            cap = grid.max() / N
            t, r = (m, N, "tests"), (m, N, "rmsep")
            cells.append(f"  {_fmt(res['point'][t], *res['ci'][t], cap):<20}"
                         f"  {_fmt(res['point'][r], *res['ci'][r], cap):<20}")
        label = m if m != "default" else f"default ({'/'.join(defaults)})"
        print(f"  {label:<16}" + "".join(cells))
    return res


# --------------------------------------------------------------- real data
def fermentation_situations(n_splits: int, rng):
    """Off-line training spectra as the existing set; on-line spectra with HPLC as pool/test."""
    from chemotools.datasets import load_fermentation_test, load_fermentation_train
    train_spectra, train_hplc = load_fermentation_train()
    online_spectra, online_hplc = load_fermentation_test()
    axis = train_spectra.columns.to_numpy(dtype=float)
    # a region with the sugar bands and a first derivative (common practice for ATR-FTIR)
    recipe = [{"step": "region", "keep": [[950, 1550]]},
              {"step": "savgol", "window_length": 15, "polyorder": 2, "deriv": 1}]
    pipe = Recipe.from_json(recipe).build(axis)
    X_train = pipe.fit_transform(train_spectra.to_numpy())
    X_online = pipe.fit_transform(online_spectra.to_numpy())
    # on-line spectra are 1.25 min apart; the nearest one to each HPLC time
    idx = np.clip(np.round(online_hplc["time"].to_numpy() * 60 / 1.25).astype(int), 0,
                  X_online.shape[0] - 1)
    X_lab, y_lab = X_online[idx], online_hplc["glucose"].to_numpy()
    y_train = train_hplc["glucose"].to_numpy()
    A = _eval_components(np.vstack([X_train, X_lab]), np.concatenate([y_train, y_lab]))
    for _ in range(n_splits):
        perm = rng.permutation(y_lab.size)
        pool, test = perm[: y_lab.size // 2], perm[y_lab.size // 2:]
        yield Situation(X_train, y_train, X_lab[pool], y_lab[pool], X_lab[test], y_lab[test], A)


def evidence_entry(res: dict, runs: list[dict], budgets) -> dict:
    """The figures of EVIDENCE_METHODS in the shape of recommend.EVIDENCE."""
    out = {}
    for m in EVIDENCE_METHODS:
        if m not in res["methods"]:
            continue
        out[m] = {"budgets": {N: tuple(round(v, 2) for v in (res["point"][(m, N, "tests")],
                                                            *res["ci"][(m, N, "tests")]))
                              for N in budgets},
                  "populations": len(runs)}
    return out


def main() -> int:
    started = time.perf_counter()
    print(f"1 BLAS thread; {N_POPULATIONS} populations per scenario ({N_POPULATIONS_GOAL} for "
          f"'new component'); random = mean of {N_RANDOM} draws; 95 % intervals: {N_BOOT} "
          "bootstrap resamples of populations")
    rng = np.random.default_rng(SEED)
    scenarios = [
        ("new component", "augment after a new blend component (RON)", new_component, "RON",
         N_POPULATIONS_GOAL),
        ("unchanged", "production as before, i.i.d. test set, for reference (RON)",
         unchanged, "RON", N_POPULATIONS),
        ("new grade", "first premium-E10 calibration from a mixed pool (RON)", new_grade,
         "RON", N_POPULATIONS),
        ("season VP", "summer calibration, winter production (VP)", season, "VP",
         N_POPULATIONS),
        ("season T50", "summer calibration, winter production (T50)", season, "T50",
         N_POPULATIONS),
    ]
    fresh: dict[str, dict] = {}
    with threadpool_limits(1):
        for key, title, build, prop, n_pop in scenarios:
            t0 = time.perf_counter()
            runs = [measure(build(SEED + 100 * p, prop), GRID, BUDGETS, SEED + p)
                    for p in range(n_pop)]
            res = print_table(f"{key}: {title}  [{time.perf_counter() - t0:.0f} s]", runs,
                              BUDGETS, rng)
            fresh[key] = evidence_entry(res, runs, BUDGETS)
            if key == "new component":
                goal = res
        t0 = time.perf_counter()
        splits = np.random.default_rng(SEED + 7)
        real_runs = [measure(s, np.arange(0, 18), (4, 8), SEED + i)
                     for i, s in enumerate(fermentation_situations(20, splits))]
        res = print_table("fermentation (real data): chemotools fermentation dataset, ATR-FTIR, "
                          "glucose g/L by HPLC; 21 off-line spectra existing, on-line pool 17 / "
                          f"test 17, 20 splits  [{time.perf_counter() - t0:.0f} s]", real_runs,
                          (4, 8), rng)
        fresh["fermentation"] = evidence_entry(res, real_runs, (4, 8))
    print("\ngoal on 'new component': the default reaches random's RMSEP at N = 20 and 40 "
          "with <= 0.40 of the tests, upper 95 % limit < 0.60:")
    for N in BUDGETS:
        v = goal["point"][("default", N, "tests")]
        hi = goal["ci"][("default", N, "tests")][1]
        print(f"  N={N}: ratio {v:.2f}, upper limit {hi:.2f} -> "
              f"{'met' if v <= 0.40 and hi < 0.60 else 'NOT met'}")
    best = {N: min((goal["point"][(m, N, "tests")], m) for m in goal["methods"]
                   if m != "default") for N in BUDGETS}
    print("  best single method: " + "; ".join(
        f"N={N}: {m} {v:.2f} (upper {goal['ci'][(m, N, 'tests')][1]:.2f})"
        for N, (v, m) in best.items()))
    if fresh == EVIDENCE:
        print("\nregistry.selection.recommend.EVIDENCE matches this run")
    else:
        print("\nregistry.selection.recommend.EVIDENCE differs from this run; this run's "
              "figures:\nEVIDENCE = " + repr(fresh))
    print(f"total {time.perf_counter() - started:.0f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
