"""Derived properties: the grammar against Python's own parser (as an independent
recogniser, never evaluated), values against numpy arithmetic, and the propagated
uncertainty against the first-order formula and Monte Carlo."""

import ast
import re
import warnings

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from registry.chemometrics.families import (
    DerivedProperty,
    family_from_bytes,
    family_sha256,
    family_to_bytes,
    parse,
)
from registry.chemometrics.families.formula import codes
from registry.errors import InputError

TOKENS = ["a", "b", "c", "min", "max", "(", ")", ",", "+", "-", "*", "/", "×", "÷", "−",
          "1", "2.5", "3e2", ".5", "7."]
ALLOWED = set("0123456789.+-−*×/÷(),_") | set("abcdefghijklmnopqrstuvwxyz".upper()) \
    | set("abcdefghijklmnopqrstuvwxyz")


def python_accepts(formula: str) -> bool:
    """Independent recogniser: Python's parser on the ASCII spelling, then a walk
    that allows only numbers, names, + − × ÷ (binary and unary +/−) and min/max
    calls with two or more plain arguments."""
    text = formula.replace("×", "*").replace("÷", "/").replace("−", "-")
    if re.search(r",\s*\)", text):  # a trailing comma is invisible in the tree
        return False
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            tree = ast.parse(text, mode="eval")
    except SyntaxError:
        return False

    def ok(node, call_name_ok=False):
        if isinstance(node, ast.Expression):
            return ok(node.body)
        if isinstance(node, ast.Constant):
            return isinstance(node.value, (int, float)) and not isinstance(node.value, bool)
        if isinstance(node, ast.Name):
            return node.id.upper() not in ("MIN", "MAX")
        if isinstance(node, ast.BinOp):
            return isinstance(node.op, (ast.Add, ast.Sub, ast.Mult, ast.Div)) and \
                ok(node.left) and ok(node.right)
        if isinstance(node, ast.UnaryOp):
            return isinstance(node.op, (ast.UAdd, ast.USub)) and ok(node.operand)
        if isinstance(node, ast.Call):
            return (isinstance(node.func, ast.Name) and node.func.id.upper() in ("MIN", "MAX")
                    and not node.keywords and len(node.args) >= 2
                    and all(ok(arg) for arg in node.args))
        return False

    return ok(tree)


@settings(max_examples=250, deadline=None)
@given(st.lists(st.sampled_from(TOKENS), min_size=1, max_size=14))
def test_grammar_accepts_exactly_what_the_reference_recogniser_accepts(tokens):
    # source: Python's parser (ast.parse, no evaluation) restricted by a tree walk to
    # the grammar's operators: the same strings must be accepted and refused
    formula = " ".join(tokens)
    expected = python_accepts(formula)
    try:
        parse(formula)
        accepted = True
    except InputError as err:
        accepted = False
        assert err.field == "formula" and 1 <= err.position <= len(formula) + 1
    assert accepted == expected, formula


def python_value(formula: str, env: dict) -> float:
    """Reference evaluator walking Python's own syntax tree (no eval)."""
    text = formula.replace("×", "*").replace("÷", "/").replace("−", "-")

    def value(node):
        if isinstance(node, ast.Expression):
            return value(node.body)
        if isinstance(node, ast.Constant):
            return float(node.value)
        if isinstance(node, ast.Name):
            return env[node.id.upper()]
        if isinstance(node, ast.UnaryOp):
            return -value(node.operand) if isinstance(node.op, ast.USub) else value(node.operand)
        if isinstance(node, ast.Call):
            return (min if node.func.id.upper() == "MIN" else max)(value(a) for a in node.args)
        a, b = value(node.left), value(node.right)
        return {ast.Add: a + b, ast.Sub: a - b, ast.Mult: a * b}.get(type(node.op)) \
            if not isinstance(node.op, ast.Div) else a / b

    return value(ast.parse(text, mode="eval"))


_ATOMS = st.sampled_from(["a", "B", "c", "2", "0.5", "1e1", ".25"])
_FORMULAS = st.recursive(_ATOMS, lambda inner: st.one_of(
    st.tuples(inner, st.sampled_from(["+", "-", "*", "/", "×", "÷", "−"]), inner).map(" ".join),
    inner.map(lambda x: f"({x})"),
    inner.map(lambda x: f"- {x}"),
    st.lists(inner, min_size=2, max_size=3).flatmap(
        lambda xs: st.sampled_from(["min", "MAX"]).map(lambda f: f"{f}({', '.join(xs)})")),
), max_leaves=12)


@settings(max_examples=150, deadline=None)
@given(_FORMULAS)
def test_valid_formulas_evaluate_like_pythons_syntax_tree(formula):
    # source: Python's operator precedence and left associativity (the language
    # reference), applied by a walk over ast.parse's tree
    env = {"A": 1.7, "B": -0.6, "C": 3.1}
    assert python_accepts(formula)
    if not codes(parse(formula)):
        return  # a formula of numbers only is refused by DerivedProperty (tested below)
    model = DerivedProperty(formula).fit()
    try:
        expected = python_value(formula, env)
    except ZeroDivisionError:
        expected = float("nan")
    got = model.predict({k: [v] for k, v in env.items()})[0]
    if not np.isfinite(expected):
        assert np.isnan(got)
    else:
        assert got == pytest.approx(expected, rel=1e-12, abs=1e-12)


@settings(max_examples=150, deadline=None)
@given(st.text(min_size=1, max_size=30))
def test_anything_outside_the_alphabet_is_refused_at_or_before_it(text):
    # source: the grammar's alphabet; the error names a position no later than the
    # first foreign character (1-based)
    bad = [i for i, ch in enumerate(text) if ch not in ALLOWED and not ch.isspace()]
    try:
        parse(text)
    except InputError as err:
        assert err.field == "formula"
        if bad:
            assert err.position <= bad[0] + 1
        return
    assert not bad, text


@pytest.mark.parametrize("formula, position", [
    ("RON + ", 7), ("(RON + MON", 11), ("RON MON", 5), ("2 ** RON", 4),
    ("sqrt(RON)", 1), ("min(RON)", 1), ("RON; MON", 4), ("max", 1), ("", 1),
    ("__import__('os')", 1), ("RON + 'MON'", 7), ("RON MON $", 5), ("RON + MON)", 10),
    ("1e999 * RON", 1),
])
def test_refusals_name_the_position(formula, position):
    with pytest.raises(InputError) as err:
        parse(formula)
    assert err.value.field == "formula" and err.value.position == position
    assert f"position {position}" in str(err.value)


def test_values_equal_numpy_arithmetic():
    # source: numpy elementwise arithmetic with the usual precedence
    rng = np.random.default_rng(1)
    ron, mon, aro = rng.uniform(80, 100, 50), rng.uniform(75, 90, 50), rng.uniform(5, 40, 50)
    model = DerivedProperty("(ron + MON) ÷ 2 − max(0, AROMATICS − 35) × 0.1 + −2 * -1").fit()
    assert model.inputs_ == ["AROMATICS", "MON", "RON"]
    got = model.predict({"RON": ron, "MON": mon, "AROMATICS": aro})
    np.testing.assert_allclose(got, (ron + mon) / 2 - np.maximum(0, aro - 35) * 0.1 + 2, rtol=1e-14)
    np.testing.assert_allclose(model.predict(np.column_stack([aro, mon, ron])), got, rtol=0)
    assert parse("1 - 2 - 3") == parse("(1 - 2) - 3") and parse("8 / 4 / 2") == parse("(8/4)/2")
    assert DerivedProperty("min(a, b, c) - 1").fit().predict(
        {"a": [3.0], "b": [1.0], "c": [2.0]})[0] == 0.0


def test_uncertainty_equals_first_order_formula():
    # source: GUM (JCGM 100:2008) eq. 10 with the partial derivatives written out by
    # hand for f = (x + y)/(2z) + x·y: ∂f/∂x = 1/(2z) + y, ∂f/∂y = 1/(2z) + x,
    # ∂f/∂z = −(x + y)/(2z²)
    rng = np.random.default_rng(2)
    x, y, z = rng.uniform(1, 3, 20), rng.uniform(2, 5, 20), rng.uniform(0.5, 2, 20)
    sep = {"X": 0.05, "Y": 0.2, "Z": 0.01}
    model = DerivedProperty("(X + Y) / (2 * Z) + X * Y").fit(sep)
    value, u = model.predict_with_uncertainty({"X": x, "Y": y, "Z": z})
    dfx, dfy, dfz = 1 / (2 * z) + y, 1 / (2 * z) + x, -(x + y) / (2 * z ** 2)
    expected = np.sqrt((dfx * 0.05) ** 2 + (dfy * 0.2) ** 2 + (dfz * 0.01) ** 2)
    np.testing.assert_allclose(u, expected, rtol=1e-12)
    # the same code used twice counts once, with the summed derivative: d(x − x/2)/dx = 1/2
    _, u2 = DerivedProperty("X - X / 2").fit({"X": 0.4}).predict_with_uncertainty({"X": [3.0]})
    assert u2[0] == pytest.approx(0.2, rel=1e-14)


def test_uncertainty_equals_numerical_gradient_and_monte_carlo():
    # source: (1) central finite differences of the evaluated formula; (2) Monte Carlo
    # (GUM Supplement 1, JCGM 101:2008): the SD of f over 200 000 normal draws of the
    # inputs equals the first-order value when the SEPs are small
    formula = "max(A, B) * C / (A + 2) - min(B, 3) + A * A"
    sep = {"A": 0.02, "B": 0.03, "C": 0.01}
    model = DerivedProperty(formula).fit(sep)
    point = {"A": np.array([1.5]), "B": np.array([2.2]), "C": np.array([4.0])}
    _, u = model.predict_with_uncertainty(point)
    grad = {}
    for code in point:
        h = 1e-6
        up = {k: v + (h if k == code else 0) for k, v in point.items()}
        dn = {k: v - (h if k == code else 0) for k, v in point.items()}
        grad[code] = (model.predict(up)[0] - model.predict(dn)[0]) / (2 * h)
    first_order = np.sqrt(sum((grad[k] * sep[k]) ** 2 for k in sep))
    assert u[0] == pytest.approx(first_order, rel=1e-7)
    rng = np.random.default_rng(4)
    draws = {k: point[k][0] + rng.normal(0, sep[k], 200_000) for k in sep}
    mc = model.predict(draws).std(ddof=1)
    # relative SE of a sample SD is 1/√(2N) = 0.16 %; curvature adds well under 1 %
    assert mc == pytest.approx(u[0], rel=0.01)


def test_division_by_zero_and_missing_input_give_only_a_flag():
    model = DerivedProperty("A / B").fit({"A": 0.1, "B": 0.1})
    res = model.check({"A": [1.0, 1.0, np.nan], "B": [2.0, 0.0, 1.0]})
    assert res.flag_lists() == [[], ["undefined"], ["undefined"]]
    # IEEE arithmetic would give 1/(1/0) = 0; a division by zero anywhere is undefined
    assert np.isnan(DerivedProperty("1 / (1 / B)").fit().predict({"B": [0.0]})[0])
    recs = res.records()
    assert recs[0]["y_pred"] == 0.5 and recs[1]["y_pred"] is None and recs[1]["uncertainty"] is None


def test_missing_sep_and_inputs_are_refused():
    with pytest.raises(InputError) as err:
        DerivedProperty("A + B").fit({"A": 0.1})
    assert err.value.field == "input_sep"
    with pytest.raises(InputError) as err:
        DerivedProperty("A + B").fit({"A": 0.1, "B": 0.2}).predict({"A": [1.0]})
    assert err.value.field == "inputs"
    with pytest.raises(InputError) as err:
        DerivedProperty("2 + 3").fit()
    assert err.value.field == "formula"


def test_state_round_trip():
    # source: artifact contract (plain arrays + JSON, hash checked on load)
    model = DerivedProperty("(RON + MON) / 2").fit({"RON": 0.3, "MON": None})
    loaded, _, _ = family_from_bytes(family_to_bytes(model), family_sha256(model))
    inputs = {"RON": [95.0, 98.2], "MON": [85.1, 87.0]}
    assert loaded.check(inputs).records() == model.check(inputs).records()
    assert model.check(inputs).records()[0]["uncertainty"] is None  # MON's SEP unknown
