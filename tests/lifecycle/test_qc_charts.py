"""QC charts against handbook constants, published examples and independent computations."""

import math

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import integrate
from scipy.special import ndtr

from registry.errors import InputError
from registry.lifecycle.qc_charts import (
    D2,
    D3,
    D4,
    E2,
    Rule,
    evaluate,
    ewma_chart,
    individuals_mr_chart,
    qc_report,
)

# --------------------------------------------------------------------------- constants


def _range_moments_n2():
    """E[R] and E[R^2] for the range of two standard normals, by numerical integration.

    Density of the range of n normals (Tippett, Biometrika 17:364, 1925; tabulated in
    quality-control texts): f_R(r) = n(n-1) ∫ φ(x) φ(x+r) [Φ(x+r) - Φ(x)]^(n-2) dx,
    integrated here over r in [0, 12] and x in [-10, 10] (tails below 1e-20).
    """
    n = 2

    def phi(x):
        return math.exp(-0.5 * x * x) / math.sqrt(2 * math.pi)

    def f(x, r):
        return n * (n - 1) * phi(x) * phi(x + r) * (ndtr(x + r) - ndtr(x)) ** (n - 2)

    m1 = integrate.dblquad(lambda x, r: r * f(x, r), 0, 12, -10, 10, epsabs=1e-11)[0]
    m2 = integrate.dblquad(lambda x, r: r * r * f(x, r), 0, 12, -10, 10, epsabs=1e-11)[0]
    return m1, m2


def test_d2_is_two_over_root_pi():
    # E|X1 - X2| for standard normals = 2/sqrt(pi) (X1 - X2 ~ N(0, 2)); tables give 1.128
    assert D2 == pytest.approx(2 / math.sqrt(math.pi), abs=5e-4)


def test_d2_d3_by_numerical_integration():
    m1, m2 = _range_moments_n2()
    d2, d3 = m1, math.sqrt(m2 - m1 ** 2)
    assert d2 == pytest.approx(2 / math.sqrt(math.pi), rel=1e-7)
    # tabulated d2 = 1.128 and d3 = 0.8525 (NIST/SEMATECH e-Handbook §6.3.2; ASTM D6299)
    assert D2 == pytest.approx(d2, abs=5e-4)
    assert D3 == pytest.approx(d3, abs=5e-5)
    # E2 = 3/d2 ≈ 2.66 and D4 = 1 + 3 d3/d2 ≈ 3.267 (e-Handbook §6.3.2.2)
    assert 3 / d2 == pytest.approx(2.66, abs=2e-3)
    assert 1 + 3 * d3 / d2 == pytest.approx(3.267, abs=1e-3)
    assert E2 == pytest.approx(3 / d2, abs=2e-3)
    assert D4 == pytest.approx(1 + 3 * d3 / d2, abs=1e-3)


# --------------------------------------------------------------------------- individuals / MR

# NIST/SEMATECH e-Handbook §6.3.2.2 worked example (flow rate of ten batches), from memory;
# the arithmetic of the published figures was rechecked by hand: mean 508.1/10, MR sum 16.9/9.
NIST_IMR = [49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1]


def test_nist_individuals_example():
    chart = individuals_mr_chart(NIST_IMR)
    assert chart.center == pytest.approx(50.81, abs=1e-9)
    assert chart.mr_bar == pytest.approx(1.8778, abs=1e-4)
    assert chart.i_ucl == pytest.approx(55.8041, abs=1e-3)
    assert chart.i_lcl == pytest.approx(45.8159, abs=1e-3)
    assert chart.mr_ucl == pytest.approx(6.1348, abs=2e-3)   # 3.267 x 1.8778
    assert np.isnan(chart.moving_ranges[0])
    np.testing.assert_allclose(chart.moving_ranges[1:],
                               [2.0, 2.3, 1.4, 3.5, 3.4, 1.4, 0.2, 1.2, 1.5], atol=1e-9)
    # the handbook reads this example as in control
    assert evaluate(NIST_IMR) == []


def test_limits_come_from_the_baseline_only():
    rng = np.random.default_rng(6299)
    x = rng.normal(10.0, 0.5, 30)
    chart = individuals_mr_chart(x, baseline=20)
    # independent: x̄ ± 3·MR̄/d2 over the first 20 (e-Handbook §6.3.2.2), via pandas
    base = pd.Series(x[:20])
    mr_bar = base.diff().abs().mean()
    assert chart.baseline_size == 20
    assert chart.center == pytest.approx(base.mean(), rel=1e-12)
    assert chart.sigma == pytest.approx(mr_bar / 1.128, rel=1e-12)
    assert chart.i_ucl == pytest.approx(base.mean() + 2.66 * mr_bar, rel=1e-3)
    # results after the baseline do not move the limits
    y = x.copy()
    y[25] += 100.0
    assert individuals_mr_chart(y, baseline=20).i_ucl == chart.i_ucl


def test_short_series_uses_all_results_as_baseline():
    chart = individuals_mr_chart(NIST_IMR, baseline=20)
    assert chart.baseline_size == len(NIST_IMR)


def test_known_center_and_sigma_replace_estimates():
    chart = individuals_mr_chart(NIST_IMR, center=50.0, sigma=2.0)
    assert (chart.i_lcl, chart.i_ucl) == (44.0, 56.0)
    # MR̄ expected for known σ is d2·σ; UCL = D4·d2·σ (e-Handbook §6.3.2.2)
    assert chart.mr_ucl == pytest.approx(3.267 * 1.128 * 2.0, abs=2e-3)


@pytest.mark.parametrize("values,field", [([], "values"), ([1.0, float("nan"), 2.0], "values[1]"),
                                          ([[1.0, 2.0]], "values"), ([3.0, 3.0, 3.0], "values"),
                                          ([3.0], "baseline")])
def test_bad_input_names_the_field(values, field):
    with pytest.raises(InputError) as info:
        evaluate(values)
    assert info.value.field == field


# --------------------------------------------------------------------------- EWMA

# NIST/SEMATECH e-Handbook §6.3.2.4 EWMA example: target 50, s = 2.0539, λ = 0.3;
# data and the listed EWMA values from memory.
NIST_EWMA_DATA = [52.0, 47.0, 53.0, 49.3, 50.1, 47.0, 51.0, 50.1, 51.2, 50.5,
                  49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1]


def test_nist_ewma_example():
    ew = ewma_chart(NIST_EWMA_DATA, lam=0.3, center=50.0, sigma=2.0539, exact=False)
    np.testing.assert_allclose(ew.z[:5], [50.60, 49.52, 50.56, 50.18, 50.16], atol=6e-3)
    assert ew.z[-1] == pytest.approx(51.99, abs=6e-3)
    # UCL = 50 + 3(0.4201)(2.0539) = 52.5884, LCL = 47.4115
    assert ew.ucl[0] == pytest.approx(52.5884, abs=2e-4)
    assert ew.lcl[-1] == pytest.approx(47.4115, abs=2e-4)


@given(st.lists(st.floats(-50, 50), min_size=1, max_size=40),
       st.sampled_from([0.05, 0.2, 0.4, 0.7, 1.0]))
@settings(max_examples=40, deadline=None)
def test_ewma_matches_pandas(values, lam):
    # independent recursion: pandas ewm(adjust=False) with the target prepended as z0
    ew = ewma_chart(values, lam=lam, center=1.5, sigma=2.0)
    expected = pd.Series([1.5] + values).ewm(alpha=lam, adjust=False).mean().to_numpy()[1:]
    np.testing.assert_allclose(ew.z, expected, rtol=1e-10, atol=1e-10)


def test_exact_ewma_limits():
    lam, sigma = 0.4, 1.0
    ew = ewma_chart(np.zeros(200), lam=lam, center=0.0, sigma=sigma)
    # t = 1: z1 = λx1 + (1-λ)μ has variance λ²σ², so the limit is 3λσ (derived)
    assert ew.ucl[0] == pytest.approx(3 * lam * sigma, rel=1e-12)
    # large t: asymptotic 3σ·sqrt(λ/(2-λ)) = 1.5σ for λ = 0.4 (e-Handbook §6.3.2.4)
    assert ew.ucl[-1] == pytest.approx(1.5 * sigma, rel=1e-12)
    assert np.all(np.diff(ew.ucl) >= 0)  # limits widen towards the asymptote
    # variance of z_t = σ² λ²Σ(1-λ)^(2k), k < t: summed directly, not by the closed form
    t = 5
    var = sigma ** 2 * lam ** 2 * sum((1 - lam) ** (2 * k) for k in range(t))
    assert ew.ucl[t - 1] == pytest.approx(3 * math.sqrt(var), rel=1e-12)


def test_ewma_with_lambda_one_is_the_shewhart_chart():
    # e-Handbook §6.3.2.4: λ = 1 gives all weight to the newest result
    x = [0.0, 3.5, -1.0, -3.2, 0.4]
    ew = ewma_chart(x, lam=1.0, center=0.0, sigma=1.0)
    np.testing.assert_array_equal(ew.z, x)
    np.testing.assert_allclose(ew.ucl, 3.0)
    report = qc_report(x, center=0.0, sigma=1.0, lam=1.0)
    by_rule = lambda r: [s.index for s in report.signals if s.rule == r]  # noqa: E731
    assert by_rule(Rule.EWMA_BEYOND_LIMITS) == by_rule(Rule.BEYOND_3_SIGMA) == [1, 3]


def test_lambda_outside_range_is_refused():
    with pytest.raises(InputError):
        ewma_chart([1.0, 2.0], lam=0.0, center=0.0, sigma=1.0)


# --------------------------------------------------------------------------- run rules

# Centre 0, σ 1 known, so the zones are exact: 1σ, 2σ, 3σ at 1, 2, 3.
# Each pattern below is built to break one Western Electric / Nelson rule (WE
# Statistical Quality Control Handbook 1956; Nelson 1984), expected indices by hand.
DESIGNED = [
    0.5, -0.5, 0.5, -0.5,
    3.5,                # 4: beyond 3σ (rule 1); moving range 4.0 > 3.267·1.128 = 3.685
    0.5, -0.5,
    2.5, 2.5,           # 8: second of 3 beyond 2σ on the same side (rule 2)
    -0.5, 0.5, -0.5,    # neutral, so the 2σ points do not count towards rule 3 below
    1.5, 1.5, 0.5, 1.5, 1.5,   # 16: fourth of 5 beyond 1σ on the same side (rule 3)
    -0.5,
    0.5, 0.5, 0.5, 0.5, 0.5, 0.5, 0.5, 0.5, 0.5,   # 18..26: nine in a row above (rule 4 at 26)
    -0.5, 0.5, -0.5,
]
EXPECTED_BY_HAND = {(4, Rule.BEYOND_3_SIGMA), (4, Rule.MR_ABOVE_UCL),
                    (8, Rule.TWO_OF_THREE_BEYOND_2_SIGMA),
                    (16, Rule.FOUR_OF_FIVE_BEYOND_1_SIGMA),
                    (26, Rule.RUN_ON_ONE_SIDE)}


def _ewma_signals_independently(x, lam, center, sigma):
    """EWMA beyond its exact limits: pandas recursion, limits from e-Handbook §6.3.2.4."""
    z = pd.Series([center] + list(x)).ewm(alpha=lam, adjust=False).mean().to_numpy()[1:]
    t = np.arange(1, len(x) + 1)
    half = 3 * sigma * np.sqrt(lam / (2 - lam) * (1 - (1 - lam) ** (2 * t)))
    return {(int(i), Rule.EWMA_BEYOND_LIMITS) for i in np.flatnonzero(np.abs(z - center) > half)}


def test_designed_sequence_gives_exactly_the_expected_signals():
    signals = evaluate(DESIGNED, center=0.0, sigma=1.0)
    got = {(s.index, s.rule) for s in signals}
    ewma = _ewma_signals_independently(DESIGNED, 0.4, 0.0, 1.0)
    assert ewma  # the 2σ and 1σ shifts move the EWMA too
    assert got == EXPECTED_BY_HAND | ewma
    assert len(signals) == len(got)  # no duplicates
    assert [s.index for s in signals] == sorted(s.index for s in signals)


def test_run_length_is_configurable():
    # 8 in a row: Western Electric handbook (1956); 9: Nelson (1984) — both common practice
    got8 = {s.index for s in evaluate(DESIGNED, center=0.0, sigma=1.0, run_length=8)
            if s.rule == Rule.RUN_ON_ONE_SIDE}
    assert got8 == {25, 26}


def test_below_centre_patterns_signal_too():
    mirrored = [-v for v in DESIGNED]
    got = {(s.index, s.rule) for s in evaluate(mirrored, center=0.0, sigma=1.0)}
    assert got == EXPECTED_BY_HAND | _ewma_signals_independently(mirrored, 0.4, 0.0, 1.0)
    assert "below" in next(s.message for s in evaluate(mirrored, center=0.0, sigma=1.0)
                           if s.rule == Rule.BEYOND_3_SIGMA)


def test_in_control_sequence_gives_no_signal():
    x = [0.5 if i % 2 else -0.5 for i in range(60)]
    assert evaluate(x, center=0.0, sigma=1.0) == []


def test_point_on_the_centre_line_ends_a_run():
    x = [0.5] * 8 + [0.0] + [0.5] * 8
    assert evaluate(x, center=0.0, sigma=1.0) == []


@given(st.lists(st.integers(-20, 20), min_size=3, max_size=40).filter(lambda v: len(set(v[:20])) > 1),
       st.integers(-4, 4))
@settings(max_examples=60, deadline=None)
def test_signals_do_not_depend_on_units_or_direction(values, k):
    # control charts are scale-free and the rules symmetric about the centre line;
    # scaling by 2^k and negation are exact in floating point
    x = np.asarray(values, dtype=float)
    base = [(s.index, s.rule) for s in evaluate(x)]
    assert [(s.index, s.rule) for s in evaluate(x * 2.0 ** k)] == base
    assert [(s.index, s.rule) for s in evaluate(-x)] == base


def test_plot_data_is_json_ready():
    import json

    data = qc_report(DESIGNED, center=0.0, sigma=1.0).plot_data()
    text = json.dumps(data, allow_nan=False)
    assert data["moving_range"][0] is None
    assert len(data["ewma_ucl"]) == len(DESIGNED)
    assert {"index": 4, "rule": "beyond_3_sigma"}.items() <= data["signals"][0].items()
    assert "NaN" not in text


# --------------------------------------------------------------------------- every window

# Western Electric, Statistical Quality Control Handbook (1956), and Nelson, J. Qual.
# Technol. 16:237 (1984), define each rule on every window of consecutive points, so a
# pattern is the same signal at the start, in the middle and at the end of a chart. Each
# pattern is placed at those three positions in a quiet series (±0.5σ alternating, 0 on
# the centre line around the pattern so no run leaks in); the expected index is where the
# pattern is complete, worked out by hand: the last point that counts towards it.
PATTERNS = {
    # rule: (pattern, offset of the completing point)
    Rule.BEYOND_3_SIGMA: ([3.5], 0),
    # 2 of 3 beyond 2σ: adjacent, and with an in-zone point between
    Rule.TWO_OF_THREE_BEYOND_2_SIGMA: ([2.5, 2.5], 1),
    "2_of_3_split": ([2.5, 0.5, 2.5], 2),
    # 4 of 5 beyond 1σ: four adjacent, and four with an in-zone point between
    Rule.FOUR_OF_FIVE_BEYOND_1_SIGMA: ([1.5, 1.5, 1.5, 1.5], 3),
    "4_of_5_split": ([1.5, 1.5, 0.5, 1.5, 1.5], 4),
    # nine in a row on one side (Nelson 1984)
    Rule.RUN_ON_ONE_SIDE: ([0.5] * 9, 8),
}
RULE_OF = {"2_of_3_split": Rule.TWO_OF_THREE_BEYOND_2_SIGMA,
           "4_of_5_split": Rule.FOUR_OF_FIVE_BEYOND_1_SIGMA}
LENGTH = 40


def _placed(pattern, where, side):
    quiet = [0.5 if i % 2 else -0.5 for i in range(LENGTH)]
    start = {"start": 0, "middle": 17, "end": LENGTH - len(pattern)}[where]
    x = quiet[:start] + [side * v for v in pattern] + quiet[start + len(pattern):]
    # the centre line ends any run of the quiet points into or out of the pattern
    if start > 0:
        x[start - 1] = 0.0
    if start + len(pattern) < LENGTH:
        x[start + len(pattern)] = 0.0
    return x, start


@pytest.mark.parametrize("side", [1, -1], ids=["above", "below"])
@pytest.mark.parametrize("where", ["start", "middle", "end"])
@pytest.mark.parametrize("key", list(PATTERNS), ids=str)
def test_each_rule_signals_at_start_middle_and_end(key, where, side):
    pattern, completes = PATTERNS[key]
    rule = RULE_OF.get(key, key)
    x, start = _placed(pattern, where, side)
    signals = evaluate(x, center=0.0, sigma=1.0)
    zone_and_run = {Rule.BEYOND_3_SIGMA, Rule.TWO_OF_THREE_BEYOND_2_SIGMA,
                    Rule.FOUR_OF_FIVE_BEYOND_1_SIGMA, Rule.RUN_ON_ONE_SIDE}
    got = [(s.index, s.rule) for s in signals if s.rule in zone_and_run]
    # exactly one signal, by this rule, where the pattern completes: the other rules stay
    # quiet, and the overlapping windows that hold the same points add no second signal
    assert got == [(start + completes, rule)]


def test_two_of_three_in_the_first_two_results_signals():
    # the first two results beyond 2σ, the third back in
    # zone; every window of three that holds them is a 2-of-3 pattern (Nelson 1984)
    x = [2.5, 2.5, 0.0] + [0.5 if i % 2 else -0.5 for i in range(20)]
    got = [s.index for s in evaluate(x, center=0.0, sigma=1.0)
           if s.rule == Rule.TWO_OF_THREE_BEYOND_2_SIGMA]
    assert got == [1]


def test_a_pattern_that_goes_on_signals_at_each_new_point_that_completes_it():
    # three results beyond 2σ: the second completes 2 of 3, the third completes the
    # window (1, 2, 3) again; each point signals once, as the run rule does
    x = [0.5, -0.5, 2.5, 2.5, 2.5, 0.0, -0.5, 0.5]
    got = [s.index for s in evaluate(x, center=0.0, sigma=1.0)
           if s.rule == Rule.TWO_OF_THREE_BEYOND_2_SIGMA]
    assert got == [3, 4]


def test_zone_points_on_opposite_sides_do_not_add_up():
    # "on the same side" (Western Electric 1956): one point above and one below 2σ is
    # no 2-of-3 pattern
    x = [2.5, -2.5, 0.0] + [0.5 if i % 2 else -0.5 for i in range(10)]
    assert not [s for s in evaluate(x, center=0.0, sigma=1.0)
                if s.rule == Rule.TWO_OF_THREE_BEYOND_2_SIGMA]
