"""Preprocessing recipes: spectral pretreatment written as plain data.

A *recipe* is a JSON-able list of steps, applied in order. Each step is a dict
with a ``"step"`` name and that step's parameters; no other keys are allowed.

=================  ==============================================================
step               parameters (all required unless a default is shown)
=================  ==============================================================
``region``         exactly one of ``keep`` or ``exclude``: a list of
                   ``[a, b]`` wavenumber ranges (cm⁻¹, either order, inclusive).
                   ``keep`` keeps the union of the ranges, ``exclude`` drops it.
``snv``            none. Standard normal variate (Barnes et al., Appl.
                   Spectrosc. 43:772, 1989), per spectrum ``(x - mean) / std``
                   with the population standard deviation (ddof = 0).
``msc``            none. Multiplicative scatter correction (Geladi et al.,
                   Appl. Spectrosc. 39:491, 1985); the reference spectrum is the
                   mean of the spectra the recipe is fitted on.
``savgol``         ``window_length`` (odd int ≥ 3), ``polyorder`` (int,
                   0 ≤ polyorder < window_length), ``deriv`` (int, default 0,
                   ≤ polyorder), ``mode`` (default ``"interp"``, as
                   :func:`scipy.signal.savgol_filter`; also ``"nearest"``,
                   ``"mirror"``, ``"constant"``, ``"wrap"``). Savitzky & Golay,
                   Anal. Chem. 36:1627 (1964).
``baseline``       ``kind``: ``"linear"`` (line through the first and last
                   point) or ``"polynomial"`` with ``degree`` (int 0..6,
                   default 2; least-squares fit over all points, i.e. detrend).
``mean_center``    none. Subtracts the column mean learned in ``fit``.
=================  ==============================================================

Axis rules (checked by :meth:`Recipe.build` before any fitting):

* the axis is a strictly ascending, finite float64 vector in cm⁻¹;
* every range end must lie within the axis span widened by one median point
  spacing (so ``[4000, 3100]`` is accepted on an axis ending at 3999.6), and a
  ``keep`` range must contain at least one point;
* ``savgol`` and ``baseline`` act on each contiguous segment separately, so a
  filter window never straddles a region that was cut out; each segment must be
  at least ``window_length`` points long (``degree + 1`` for a baseline).

Fitted state (MSC reference, column means) is exported as plain arrays with
:meth:`SpectralPipeline.state_arrays` and restored with
:meth:`SpectralPipeline.from_state`; the restored pipeline gives bit-identical
output because it runs the same code on the same numbers.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
from chemotools.baseline import LinearCorrection, PolynomialCorrection
from chemotools.derivative import SavitzkyGolay
from chemotools.scatter import MultiplicativeScatterCorrection, StandardNormalVariate
from sklearn.base import BaseEstimator, TransformerMixin

from registry.errors import InputError

# step name -> {parameter: default}; a default of _REQUIRED means "must be given"
_REQUIRED = object()
_STEP_PARAMS: dict[str, dict[str, Any]] = {
    "region": {"keep": None, "exclude": None},
    "snv": {},
    "msc": {},
    "savgol": {"window_length": _REQUIRED, "polyorder": _REQUIRED, "deriv": 0,
               "mode": "interp"},
    "baseline": {"kind": _REQUIRED, "degree": None},
    "mean_center": {},
}
_SAVGOL_MODES = ("interp", "nearest", "mirror", "constant", "wrap")
_MAX_BASELINE_DEGREE = 6
# steps whose output for one spectrum depends on the other spectra fitted on
DATA_DEPENDENT_STEPS = frozenset({"msc", "mean_center"})


def _err(index: int, name: str | None, key: str | None, message: str) -> InputError:
    label = f"recipe step {index}" + (f" ({name})" if name else "")
    field = f"steps[{index}]" + (f".{key}" if key else "")
    return InputError(f"{label}: {message}", field=field)


def _as_int(value: Any, index: int, name: str, key: str) -> int:
    # bool is an int subclass in Python; True as a window length is a typo
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
        if isinstance(value, float) and value.is_integer():
            return int(value)
        raise _err(index, name, key, f"{key} must be an integer, got {value!r}")
    return int(value)


def _as_ranges(value: Any, index: int, key: str) -> list[list[float]]:
    if not isinstance(value, Sequence) or isinstance(value, (str, bytes)) or not value:
        raise _err(index, "region", key, f"{key} must be a non-empty list of [a, b] ranges")
    ranges = []
    for j, pair in enumerate(value):
        if (not isinstance(pair, Sequence) or isinstance(pair, (str, bytes))
                or len(pair) != 2):
            raise _err(index, "region", f"{key}[{j}]", f"range {j} must be a pair [a, b], got {pair!r}")
        lo_hi = []
        for v in pair:
            if isinstance(v, bool) or not isinstance(v, (int, float, np.integer, np.floating)):
                raise _err(index, "region", f"{key}[{j}]", f"range {j} has a non-numeric end {v!r}")
            if not math.isfinite(float(v)):
                raise _err(index, "region", f"{key}[{j}]", f"range {j} has a non-finite end {v!r}")
            lo_hi.append(float(v))
        a, b = sorted(lo_hi)
        if a == b:
            raise _err(index, "region", f"{key}[{j}]", f"range {j} is empty ({a} to {b})")
        ranges.append([a, b])
    return ranges


def _normalise_step(index: int, raw: Any) -> dict[str, Any]:
    """Check one step's names and values; return it with defaults filled in."""
    if not isinstance(raw, Mapping):
        raise _err(index, None, None, f"a step must be an object, got {type(raw).__name__}")
    name = raw.get("step")
    if name not in _STEP_PARAMS:
        raise _err(index, None, "step", f"unknown step {name!r}; known steps: "
                   + ", ".join(sorted(_STEP_PARAMS)))
    allowed = _STEP_PARAMS[name]
    for key in raw:
        if key != "step" and key not in allowed:
            raise _err(index, name, key, f"unknown parameter {key!r}; allowed: "
                       + (", ".join(sorted(allowed)) or "none"))
    for key, default in allowed.items():
        if default is _REQUIRED and key not in raw:
            raise _err(index, name, key, f"missing required parameter {key!r}")

    step: dict[str, Any] = {"step": name}
    if name == "region":
        given = [k for k in ("keep", "exclude") if raw.get(k) is not None]
        if len(given) != 1:
            raise _err(index, name, "keep", "give exactly one of 'keep' or 'exclude'")
        step[given[0]] = _as_ranges(raw[given[0]], index, given[0])
    elif name == "savgol":
        wl = _as_int(raw["window_length"], index, name, "window_length")
        po = _as_int(raw["polyorder"], index, name, "polyorder")
        deriv = _as_int(raw.get("deriv", 0), index, name, "deriv")
        mode = raw.get("mode", "interp")
        if wl < 3 or wl % 2 == 0:
            raise _err(index, name, "window_length", f"window_length must be an odd integer >= 3, got {wl}")
        if po < 0 or po >= wl:
            raise _err(index, name, "polyorder", f"polyorder must be >= 0 and < window_length ({wl}), got {po}")
        if deriv < 0 or deriv > po:
            raise _err(index, name, "deriv", f"deriv must be >= 0 and <= polyorder ({po}), got {deriv}")
        if mode not in _SAVGOL_MODES:
            raise _err(index, name, "mode", f"mode must be one of {', '.join(_SAVGOL_MODES)}, got {mode!r}")
        step.update(window_length=wl, polyorder=po, deriv=deriv, mode=mode)
    elif name == "baseline":
        kind = raw["kind"]
        if kind == "linear":
            if raw.get("degree") is not None:
                raise _err(index, name, "degree", "degree applies only to kind 'polynomial'")
            step["kind"] = "linear"
        elif kind == "polynomial":
            given = raw.get("degree")
            degree = 2 if given is None else _as_int(given, index, name, "degree")
            if not 0 <= degree <= _MAX_BASELINE_DEGREE:
                raise _err(index, name, "degree",
                           f"degree must be between 0 and {_MAX_BASELINE_DEGREE}, got {degree}")
            step.update(kind="polynomial", degree=degree)
        else:
            raise _err(index, name, "kind", f"kind must be 'linear' or 'polynomial', got {kind!r}")
    return step


def _check_axis(axis: Any) -> np.ndarray:
    arr = np.asarray(axis)
    if arr.ndim != 1 or arr.size < 2:
        raise InputError("axis must be a 1-D array with at least 2 points", field="axis")
    if not np.issubdtype(arr.dtype, np.number) or np.iscomplexobj(arr):
        raise InputError("axis must be real numbers", field="axis")
    arr = arr.astype(np.float64)
    if not np.all(np.isfinite(arr)):
        raise InputError("axis contains non-finite values", field="axis")
    if not np.all(np.diff(arr) > 0):
        raise InputError("axis must be strictly ascending", field="axis")
    return arr


def _split_segments(kept: np.ndarray, segment_id: np.ndarray) -> np.ndarray:
    """Segment id per kept point: a new segment starts at every gap."""
    if kept.size == 0:
        return np.zeros(0, dtype=np.int64)
    breaks = (np.diff(kept) != 1) | (np.diff(segment_id[kept]) != 0)
    return np.concatenate([[0], np.cumsum(breaks)]).astype(np.int64)


def _segment_slices(segment_id: np.ndarray) -> list[slice]:
    starts = np.flatnonzero(np.concatenate([[True], np.diff(segment_id) != 0]))
    stops = np.concatenate([starts[1:], [segment_id.size]])
    return [slice(int(a), int(b)) for a, b in zip(starts, stops)]


class Recipe:
    """A validated, immutable preprocessing recipe.

    Build with :meth:`from_json`; every parameter is checked there (and the
    axis-dependent ones again in :meth:`build`) before anything is fitted.
    """

    def __init__(self, steps: list[dict[str, Any]]):
        self._steps = [dict(s) for s in steps]

    @classmethod
    def from_json(cls, obj: Any, axis: Any = None) -> "Recipe":
        """Validate a recipe given as a list of step dicts (parsed JSON).

        Parameters
        ----------
        obj : list of dict
            The recipe; see the module docstring for the step vocabulary.
        axis : array-like, optional
            When given, the axis-dependent checks (ranges, segment lengths)
            run now as well.

        Raises
        ------
        registry.errors.InputError
            Naming the step index and the field (``steps[i].key``).
        """
        if isinstance(obj, Recipe):
            obj = obj.to_json()
        if not isinstance(obj, Sequence) or isinstance(obj, (str, bytes)):
            raise InputError("a recipe must be a list of steps", field="steps")
        recipe = cls([_normalise_step(i, raw) for i, raw in enumerate(obj)])
        if axis is not None:
            recipe.plan(axis)
        return recipe

    def to_json(self) -> list[dict[str, Any]]:
        """The recipe as plain JSON-able data (defaults filled in)."""
        return [
            {k: ([list(r) for r in v] if k in ("keep", "exclude") else v) for k, v in s.items()}
            for s in self._steps
        ]

    @property
    def steps(self) -> list[dict[str, Any]]:
        return self.to_json()

    @property
    def is_row_wise(self) -> bool:
        """True if every step transforms each spectrum on its own (no MSC, no centring)."""
        return not any(s["step"] in DATA_DEPENDENT_STEPS for s in self._steps)

    def __eq__(self, other: object) -> bool:
        return isinstance(other, Recipe) and self.to_json() == other.to_json()

    def __repr__(self) -> str:
        return f"Recipe({self.to_json()!r})"

    def plan(self, axis: Any) -> list[dict[str, Any]]:
        """Resolve the recipe on an axis: per step, the point mask or segments.

        Returns one dict per step with ``"columns"`` (indices kept by a region
        step, else None) and ``"segments"`` (list of slices of the step's input
        for segment-wise steps). Raises InputError for ranges outside the axis
        and segments too short for a filter.
        """
        current = _check_axis(axis)
        segment_id = np.zeros(current.size, dtype=np.int64)
        spacing = float(np.median(np.diff(current)))
        plans = []
        for i, step in enumerate(self._steps):
            name = step["step"]
            plan: dict[str, Any] = {"columns": None, "segments": _segment_slices(segment_id)}
            if name == "region":
                key = "keep" if "keep" in step else "exclude"
                lo_ax, hi_ax = current[0] - spacing, current[-1] + spacing
                inside = np.zeros(current.size, dtype=bool)
                for j, (a, b) in enumerate(step[key]):
                    if a < lo_ax or b > hi_ax:
                        raise _err(i, name, f"{key}[{j}]",
                                   f"range [{a:g}, {b:g}] lies outside the axis "
                                   f"({current[0]:g} to {current[-1]:g} cm-1)")
                    in_range = (current >= a) & (current <= b)
                    if key == "keep" and not in_range.any():
                        raise _err(i, name, f"{key}[{j}]",
                                   f"range [{a:g}, {b:g}] contains no axis point")
                    inside |= in_range
                kept = np.flatnonzero(inside if key == "keep" else ~inside)
                if kept.size < 2:
                    raise _err(i, name, key, f"fewer than 2 points remain ({kept.size})")
                new_segments = _split_segments(kept, segment_id)
                current, segment_id = current[kept], new_segments
                plan = {"columns": kept, "segments": _segment_slices(segment_id)}
            elif name == "savgol":
                for sl in plan["segments"]:
                    if sl.stop - sl.start < step["window_length"]:
                        raise _err(i, name, "window_length",
                                   f"window_length {step['window_length']} is longer than a "
                                   f"contiguous segment of {sl.stop - sl.start} points "
                                   f"({current[sl.start]:g} to {current[sl.stop - 1]:g} cm-1)")
            elif name == "baseline" and step["kind"] == "polynomial":
                for sl in plan["segments"]:
                    if sl.stop - sl.start <= step["degree"]:
                        raise _err(i, name, "degree",
                                   f"a segment of {sl.stop - sl.start} points is too short "
                                   f"for degree {step['degree']}")
            plan["axis_out"] = current
            plans.append(plan)
        return plans

    def output_axis(self, axis: Any) -> np.ndarray:
        """The axis values that remain after all region steps."""
        plans = self.plan(axis)
        return plans[-1]["axis_out"] if plans else _check_axis(axis)

    def build(self, axis: Any) -> "SpectralPipeline":
        """Check the recipe against ``axis`` and return an unfitted pipeline."""
        self.plan(axis)  # raises before anything is fitted
        return SpectralPipeline(recipe=self.to_json(), axis=np.asarray(axis, dtype=np.float64))


# ---------------------------------------------------------------- step objects
class _Region:
    def __init__(self, columns: np.ndarray):
        self.columns = columns

    def fit(self, X):
        return self

    def transform(self, X):
        return X[:, self.columns]


class _Segmentwise:
    """Applies one chemotools transformer per contiguous segment."""

    def __init__(self, segments: list[slice], factory):
        self.segments = segments
        self.factory = factory
        self.parts_: list = []

    def fit(self, X):
        self.parts_ = [self.factory().fit(X[:, sl]) for sl in self.segments]
        return self

    def transform(self, X):
        if len(self.segments) == 1:
            return self.parts_[0].transform(X)
        out = np.empty_like(X, dtype=np.float64)
        for sl, part in zip(self.segments, self.parts_):
            out[:, sl] = part.transform(X[:, sl])
        return out


class _Whole:
    def __init__(self, factory):
        self.factory = factory
        self.part_ = None

    def fit(self, X):
        self.part_ = self.factory().fit(X)
        return self

    def transform(self, X):
        return self.part_.transform(X)


class _Msc:
    def __init__(self):
        self.part_ = None

    def fit(self, X):
        self.part_ = MultiplicativeScatterCorrection(method="mean").fit(X)
        return self

    def restore(self, reference: np.ndarray):
        # fitting with an explicit reference runs the same arithmetic on the
        # same numbers as the original fit, so the output is bit-identical
        self.part_ = MultiplicativeScatterCorrection(reference=reference).fit(reference[None, :])
        return self

    def state(self) -> dict[str, np.ndarray]:
        return {"reference": np.array(self.part_.reference_, dtype=np.float64)}

    def transform(self, X):
        return self.part_.transform(X)


class _MeanCenter:
    def __init__(self):
        self.mean_ = None

    def fit(self, X):
        self.mean_ = X.mean(axis=0)
        return self

    def restore(self, mean: np.ndarray):
        self.mean_ = mean
        return self

    def state(self) -> dict[str, np.ndarray]:
        return {"mean": np.array(self.mean_, dtype=np.float64)}

    def transform(self, X):
        return X - self.mean_


def _make_step(step: dict[str, Any], plan: dict[str, Any]):
    name = step["step"]
    if name == "region":
        return _Region(plan["columns"])
    if name == "snv":
        return _Whole(StandardNormalVariate)
    if name == "msc":
        return _Msc()
    if name == "mean_center":
        return _MeanCenter()
    if name == "savgol":
        wl, po, d, mode = step["window_length"], step["polyorder"], step["deriv"], step["mode"]
        return _Segmentwise(plan["segments"], lambda: SavitzkyGolay(
            window_length=wl, polyorder=po, deriv=d, mode=mode))
    if name == "baseline":
        if step["kind"] == "linear":
            return _Segmentwise(plan["segments"], LinearCorrection)
        degree = step["degree"]
        return _Segmentwise(plan["segments"], lambda: PolynomialCorrection(order=degree))
    raise AssertionError(name)  # unreachable: names were validated


class SpectralPipeline(TransformerMixin, BaseEstimator):
    """A recipe bound to an axis, with scikit-learn ``fit``/``transform``.

    Parameters
    ----------
    recipe : list of dict
        Recipe steps (validated again in ``fit``).
    axis : ndarray of shape (n_points,)
        Ascending float64 axis of the input spectra, cm⁻¹.

    Attributes
    ----------
    steps_ : list
        Fitted step objects.
    axis_out_ : ndarray
        Axis of the output columns (after region steps).
    n_features_in_ : int
    """

    def __init__(self, recipe: list[dict[str, Any]], axis: np.ndarray):
        self.recipe = recipe
        self.axis = axis

    def _prepare(self):
        recipe = Recipe.from_json(self.recipe)
        plans = recipe.plan(self.axis)
        steps = [_make_step(s, p) for s, p in zip(recipe.to_json(), plans)]
        axis_out = plans[-1]["axis_out"] if plans else _check_axis(self.axis)
        return recipe, steps, axis_out

    def _check_X(self, X) -> np.ndarray:
        X = np.asarray(X, dtype=np.float64)
        if X.ndim != 2:
            raise InputError(f"spectra must be a 2-D array, got {X.ndim} dimensions", field="X")
        if X.shape[1] != len(self.axis):
            raise InputError(f"spectra have {X.shape[1]} points but the axis has "
                             f"{len(self.axis)}", field="X")
        if not np.all(np.isfinite(X)):
            bad = int(np.argwhere(~np.isfinite(X))[0, 0])
            raise InputError(f"spectrum {bad} contains non-finite values", field="X")
        return X

    def fit(self, X, y=None) -> "SpectralPipeline":
        X = self._check_X(X)
        _, steps, axis_out = self._prepare()
        for step in steps:
            X = step.fit(X).transform(X)
        self.steps_ = steps
        self.axis_out_ = axis_out
        self.n_features_in_ = len(self.axis)
        return self

    def transform(self, X) -> np.ndarray:
        X = self._check_X(X)
        for step in self.steps_:
            X = step.transform(X)
        return X

    def fit_transform(self, X, y=None, **fit_params) -> np.ndarray:
        X = self._check_X(X)
        _, steps, axis_out = self._prepare()
        for step in steps:
            X = step.fit(X).transform(X)
        self.steps_ = steps
        self.axis_out_ = axis_out
        self.n_features_in_ = len(self.axis)
        return X

    # ----------------------------------------------------------- fitted state
    def state_arrays(self) -> dict[str, np.ndarray]:
        """Fitted state as plain float64 arrays, keyed ``"step{i}.{name}"``."""
        out = {}
        for i, step in enumerate(self.steps_):
            if hasattr(step, "state"):
                for key, arr in step.state().items():
                    out[f"step{i}.{key}"] = arr
        return out

    def state_json(self) -> dict[str, Any]:
        """The JSON half of the state: the recipe (the axis is stored as an array)."""
        return {"recipe": Recipe.from_json(self.recipe).to_json()}

    @classmethod
    def from_state(cls, recipe: Any, axis: Any, arrays: Mapping[str, np.ndarray]) -> "SpectralPipeline":
        """Rebuild a fitted pipeline from :meth:`state_arrays` output.

        Raises
        ------
        registry.errors.InputError
            If an array the recipe needs is missing or has the wrong length.
        """
        recipe = Recipe.from_json(recipe)
        pipe = recipe.build(axis)
        _, steps, axis_out = pipe._prepare()
        plans = recipe.plan(pipe.axis)
        widths = [len(pipe.axis)] + [len(p["axis_out"]) for p in plans]
        for i, (step, spec) in enumerate(zip(steps, recipe.to_json())):
            if spec["step"] == "msc":
                step.restore(_state_vector(arrays, f"step{i}.reference", widths[i]))
            elif spec["step"] == "mean_center":
                step.restore(_state_vector(arrays, f"step{i}.mean", widths[i]))
            else:
                # stateless steps learn nothing from data; fitting on a
                # placeholder of the right width only records that width
                step.fit(np.ones((1, widths[i])))
        pipe.steps_ = steps
        pipe.axis_out_ = axis_out
        pipe.n_features_in_ = len(pipe.axis)
        return pipe


def _state_vector(arrays: Mapping[str, np.ndarray], key: str, width: int) -> np.ndarray:
    if key not in arrays:
        raise InputError(f"preprocessing state is missing array {key!r}", field=key)
    arr = np.ascontiguousarray(arrays[key], dtype=np.float64)
    if arr.shape != (width,):
        raise InputError(f"preprocessing state {key!r} has shape {arr.shape}, "
                         f"expected ({width},)", field=key)
    return arr
