"""Derived properties: a formula over other properties' results.

The formula is parsed by :mod:`registry.chemometrics.families.formula` into a
tree (never ``eval``). Its uncertainty is propagated to first order from the
input models' SEPs, treating the inputs as independent (JCGM 100:2008, *Guide
to the expression of uncertainty in measurement*, §5.1.2, eq. 10):

    u(f)² = Σᵢ (∂f/∂xᵢ)² · SEPᵢ²

with the partial derivatives evaluated at each sample's input values.

Prediction-time check (:meth:`DerivedProperty.check`):

``undefined``
    the formula has no finite value for the sample (division by zero, or an
    input result missing); no value is given then.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np

from registry.chemometrics.families._state import take_arrays
from registry.chemometrics.families.checks import FamilyChecks
from registry.chemometrics.families.formula import codes, evaluate, parse
from registry.errors import InputError

FLAGS = ("undefined",)


class DerivedProperty:
    """A property computed from other properties' results.

    Parameters
    ----------
    formula : str
        In the grammar of :mod:`registry.chemometrics.families.formula`,
        e.g. ``"(RON + MON) / 2"``.

    Attributes
    ----------
    tree_ : formula tree
    inputs_ : list of str
        Property codes the formula uses (upper case, sorted).
    input_sep_ : ndarray (k,)
        SEP of each input, in ``inputs_`` order (NaN where unknown).
    """

    family = "derived"

    def __init__(self, formula: str):
        self.formula = formula

    def fit(self, input_sep: Mapping[str, float | None] | None = None) -> "DerivedProperty":
        """Parse the formula and take the inputs' SEPs (None: unknown).

        Parameters
        ----------
        input_sep : mapping of property code to SEP, optional
            One entry per code the formula uses; the code's letter case does
            not matter.
        """
        self.tree_ = parse(self.formula)
        self.inputs_ = codes(self.tree_)
        if not self.inputs_:
            raise InputError("the formula uses no property code", field="formula")
        given = {} if input_sep is None else {str(k).upper(): v for k, v in input_sep.items()}
        sep = np.full(len(self.inputs_), np.nan)
        for j, code in enumerate(self.inputs_):
            if input_sep is not None and code not in given:
                raise InputError(f"no SEP given for input {code}", field="input_sep")
            value = given.get(code)
            if value is None:
                continue
            value = float(value)
            if not (np.isfinite(value) and value >= 0):
                raise InputError(f"SEP of {code} must be a finite number ≥ 0, got {value!r}",
                                 field="input_sep")
            sep[j] = value
        self.input_sep_ = sep
        return self

    def _inputs(self, inputs) -> dict[str, np.ndarray]:
        if isinstance(inputs, Mapping):
            by_code = {str(k).upper(): v for k, v in inputs.items()}
            missing = [c for c in self.inputs_ if c not in by_code]
            if missing:
                raise InputError(f"no values given for {', '.join(missing)}", field="inputs")
            columns = [np.asarray(by_code[c], dtype=np.float64).reshape(-1) for c in self.inputs_]
        else:
            X = np.asarray(inputs, dtype=np.float64)
            if X.ndim != 2 or X.shape[1] != len(self.inputs_):
                raise InputError(f"inputs must have one column per code "
                                 f"({', '.join(self.inputs_)})", field="inputs")
            columns = list(X.T)
        try:
            columns = np.broadcast_arrays(*columns) if columns else []
        except ValueError:
            raise InputError("input value arrays differ in length", field="inputs") from None
        # an infinite input is as undefined as a missing one
        return {c: np.where(np.isfinite(col), col, np.nan) for c, col in zip(self.inputs_, columns)}

    def predict_with_uncertainty(self, inputs) -> tuple[np.ndarray, np.ndarray]:
        """Values and first-order standard uncertainties (NaN where undefined).

        Parameters
        ----------
        inputs : mapping of code to values (n,), or ndarray (n, k) in ``inputs_`` order
        """
        env = self._inputs(inputs)
        n = next(iter(env.values())).shape[0]
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            value, grad = evaluate(self.tree_, env)
            value = np.broadcast_to(value, (n,)).astype(np.float64)
            var = np.zeros(n)
            for j, code in enumerate(self.inputs_):
                d = np.broadcast_to(grad.get(code, 0.0), (n,))
                var = var + (d * self.input_sep_[j]) ** 2
        u = np.sqrt(var)
        bad = ~np.isfinite(value)
        value[bad] = np.nan
        u[bad | ~np.isfinite(u)] = np.nan
        return value, u

    def predict(self, inputs) -> np.ndarray:
        return self.predict_with_uncertainty(inputs)[0]

    def check(self, inputs) -> FamilyChecks:
        """Values, their uncertainty and the ``undefined`` flag."""
        value, u = self.predict_with_uncertainty(inputs)
        return FamilyChecks(y_pred=value, values={"uncertainty": u}, limits={},
                            flags={"undefined": np.isnan(value)}, flag_order=FLAGS)

    # ----------------------------------------------------------- evidence
    def evidence(self) -> dict[str, Any]:
        """The formula, its inputs and the SEPs the uncertainty is propagated from."""
        return {"formula": self.formula, "inputs": list(self.inputs_),
                "input_sep": [None if not np.isfinite(v) else float(v) for v in self.input_sep_]}

    def explain(self, inputs) -> dict[str, Any]:
        """One sample: each input's value, ∂f/∂x, SEP and share (∂f/∂x·SEP)² of u(f)²."""
        env = {c: v[:1] for c, v in self._inputs(inputs).items()}
        value, u = self.predict_with_uncertainty(env)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            _, grad = evaluate(self.tree_, env)
        rows = []
        for j, code in enumerate(self.inputs_):
            d = float(np.broadcast_to(grad.get(code, 0.0), (1,))[0])
            sep = float(self.input_sep_[j])
            rows.append({"code": code, "value": float(env[code][0]), "derivative": d,
                         "sep": sep if np.isfinite(sep) else None,
                         "contribution": (d * sep) ** 2 if np.isfinite(d * sep) else None})
        ok = np.isfinite(value[0])
        return {"formula": self.formula, "inputs": rows,
                "y_pred": float(value[0]) if ok else None,
                "uncertainty": float(u[0]) if np.isfinite(u[0]) else None}

    # ----------------------------------------------------------- plain state
    def state_arrays(self) -> dict[str, np.ndarray]:
        return {"input_sep": np.ascontiguousarray(self.input_sep_)}

    def state_json(self) -> dict[str, Any]:
        return {"family": self.family, "formula": self.formula, "inputs": list(self.inputs_)}

    @classmethod
    def from_state(cls, arrays: dict[str, np.ndarray], meta: dict[str, Any]) -> "DerivedProperty":
        model = cls(meta["formula"]).fit(None)
        if model.inputs_ != list(meta["inputs"]):
            raise InputError("derived state: the formula's inputs do not match the stored ones",
                             field="inputs")
        sep = take_arrays(arrays, ("input_sep",), cls.family)["input_sep"]
        if sep.shape != (len(model.inputs_),):
            raise InputError("derived state: one SEP per input is needed", field="input_sep")
        model.input_sep_ = sep
        return model
