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
from sklearn.base import BaseEstimator, TransformerMixin, clone
from sklearn.utils.validation import check_is_fitted, validate_data

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
def _width_checked(estimator, X, *, reset: bool) -> np.ndarray:
    """``X`` as a finite 2-D float64 array (scikit-learn's own checks and messages);
    ``fit`` (``reset``) records its width in ``n_features_in_``, ``transform`` requires it."""
    return validate_data(estimator, X, reset=reset, dtype=np.float64)


def _fixed_vector(value, width: int, name: str) -> np.ndarray:
    arr = np.array(value, dtype=np.float64)
    if arr.shape != (width,):
        raise InputError(f"{name} has shape {arr.shape}; the spectra have {width} points",
                         field=name)
    return arr


class RegionSelect(TransformerMixin, BaseEstimator):
    """Keep the columns ``columns`` (indices, as :meth:`Recipe.plan` resolves a region step).

    Parameters
    ----------
    columns : array-like of int, optional
        Columns kept, in order; None keeps every column.

    Attributes
    ----------
    columns_ : ndarray of int64
    n_features_in_ : int
    """

    def __init__(self, columns=None):
        self.columns = columns

    def fit(self, X, y=None):
        X = _width_checked(self, X, reset=True)
        columns = (np.arange(X.shape[1]) if self.columns is None
                   else np.asarray(self.columns, dtype=np.int64))
        if columns.ndim != 1 or (columns.size and (columns.min() < 0 or columns.max() >= X.shape[1])):
            raise InputError(f"region columns must be indices below {X.shape[1]}", field="columns")
        self.columns_ = columns
        return self

    def transform(self, X):
        check_is_fitted(self, "columns_")
        return _width_checked(self, X, reset=False)[:, self.columns_]


class Segmentwise(TransformerMixin, BaseEstimator):
    """Apply a clone of ``transformer`` to each contiguous segment of columns on its own, so a
    filter window never reaches across a region that was cut out.

    Parameters
    ----------
    transformer : scikit-learn transformer
        E.g. a chemotools Savitzky–Golay filter or baseline correction.
    segments : list of slice, optional
        Column ranges; None is one segment of every column.

    Attributes
    ----------
    parts_ : list
        One fitted clone of ``transformer`` per segment.
    segments_ : list of slice
    n_features_in_ : int
    """

    def __init__(self, transformer=None, segments=None):
        self.transformer = transformer
        self.segments = segments

    def fit(self, X, y=None):
        X = _width_checked(self, X, reset=True)
        self.segments_ = (list(self.segments) if self.segments is not None
                          else [slice(0, X.shape[1])])
        self.parts_ = [clone(self.transformer).fit(X[:, sl]) for sl in self.segments_]
        return self

    def transform(self, X):
        check_is_fitted(self, "parts_")
        X = _width_checked(self, X, reset=False)
        if len(self.segments_) == 1 and self.segments_[0] == slice(0, X.shape[1]):
            return self.parts_[0].transform(X)
        out = np.empty_like(X, dtype=np.float64)
        for sl, part in zip(self.segments_, self.parts_):
            out[:, sl] = part.transform(X[:, sl])
        return out


class MeanCenter(TransformerMixin, BaseEstimator):
    """Subtract the column mean of the spectra fitted on (or a given ``mean``).

    Parameters
    ----------
    mean : array-like of shape (n_features,), optional
        A mean restored from a stored model; None learns it in ``fit``.

    Attributes
    ----------
    mean_ : ndarray of shape (n_features,)
    n_features_in_ : int
    """

    def __init__(self, mean=None):
        self.mean = mean

    def fit(self, X, y=None):
        X = _width_checked(self, X, reset=True)
        self.mean_ = (X.mean(axis=0) if self.mean is None
                      else _fixed_vector(self.mean, X.shape[1], "mean"))
        return self

    def transform(self, X):
        check_is_fitted(self, "mean_")
        return _width_checked(self, X, reset=False) - self.mean_


#: State arrays of the data-dependent steps: (step name, state key, fitted attribute).
_STATE = {"msc": ("reference", "reference_"), "mean_center": ("mean", "mean_")}


def _make_step(step: dict[str, Any], plan: dict[str, Any], state: np.ndarray | None):
    """The transformer of one recipe step; ``state`` fixes what a data-dependent step
    would otherwise learn (the MSC reference, the mean)."""
    name = step["step"]
    if name == "region":
        return RegionSelect(plan["columns"])
    if name == "snv":
        return StandardNormalVariate()
    if name == "msc":
        # An explicit reference runs the same arithmetic on the same numbers as the
        # original fit on the mean spectrum, so a restored step is bit-identical.
        return (MultiplicativeScatterCorrection(method="mean") if state is None
                else MultiplicativeScatterCorrection(reference=state))
    if name == "mean_center":
        return MeanCenter(mean=state)
    if name == "savgol":
        return Segmentwise(SavitzkyGolay(window_length=step["window_length"],
                                         polyorder=step["polyorder"], deriv=step["deriv"],
                                         mode=step["mode"]), plan["segments"])
    if name == "baseline":
        correction = (LinearCorrection() if step["kind"] == "linear"
                      else PolynomialCorrection(order=step["degree"]))
        return Segmentwise(correction, plan["segments"])
    raise AssertionError(name)  # unreachable: names were validated


class SpectralPipeline(TransformerMixin, BaseEstimator):
    """A recipe bound to an axis, with scikit-learn ``fit``/``transform``.

    Parameters
    ----------
    recipe : list of dict
        Recipe steps (validated again in ``fit``).
    axis : ndarray of shape (n_points,)
        Ascending float64 axis of the input spectra, cm⁻¹.
    state : mapping of str to ndarray, optional
        Fitted state of the data-dependent steps as :meth:`state_arrays` returns it;
        those steps then take it instead of learning from ``X`` (how a stored model
        is restored, see :meth:`from_state`).

    Attributes
    ----------
    steps_ : list
        Fitted transformers, one per recipe step.
    axis_out_ : ndarray
        Axis of the output columns (after region steps).
    n_features_in_ : int
    """

    def __init__(self, recipe: list[dict[str, Any]], axis: np.ndarray, state=None):
        self.recipe = recipe
        self.axis = axis
        self.state = state

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

    def _fit(self, X) -> np.ndarray:
        """Fit every step on the output of the one before; returns the transformed ``X``."""
        X = self._check_X(X)
        recipe = Recipe.from_json(self.recipe)
        plans = recipe.plan(self.axis)
        widths = [len(self.axis)] + [len(p["axis_out"]) for p in plans]
        steps = []
        for i, (spec, plan) in enumerate(zip(recipe.to_json(), plans)):
            kept = None
            if self.state is not None and spec["step"] in _STATE:
                key = f"step{i}.{_STATE[spec['step']][0]}"
                kept = _state_vector(self.state, key, widths[i])
            step = _make_step(spec, plan, kept)
            X = step.fit(X).transform(X)
            steps.append(step)
        self.steps_ = steps
        self.axis_out_ = plans[-1]["axis_out"] if plans else _check_axis(self.axis)
        self.n_features_in_ = len(self.axis)
        return X

    def fit(self, X, y=None) -> "SpectralPipeline":
        self._fit(X)
        return self

    def fit_transform(self, X, y=None, **fit_params) -> np.ndarray:
        return self._fit(X)

    def transform(self, X) -> np.ndarray:
        check_is_fitted(self, "steps_")
        X = self._check_X(X)
        for step in self.steps_:
            X = step.transform(X)
        return X

    # ----------------------------------------------------------- fitted state
    def state_arrays(self) -> dict[str, np.ndarray]:
        """Fitted state as plain float64 arrays, keyed ``"step{i}.{name}"``."""
        check_is_fitted(self, "steps_")
        out = {}
        for i, (spec, step) in enumerate(zip(Recipe.from_json(self.recipe).to_json(), self.steps_)):
            if spec["step"] in _STATE:
                key, attribute = _STATE[spec["step"]]
                out[f"step{i}.{key}"] = np.array(getattr(step, attribute), dtype=np.float64)
        return out

    def state_json(self) -> dict[str, Any]:
        """The JSON half of the state: the recipe (the axis is stored as an array)."""
        return {"recipe": Recipe.from_json(self.recipe).to_json()}

    @classmethod
    def from_state(cls, recipe: Any, axis: Any, arrays: Mapping[str, np.ndarray]) -> "SpectralPipeline":
        """Rebuild a fitted pipeline from :meth:`state_arrays` output.

        Every data-dependent step takes its stored array, so fitting on any spectrum of
        the right width (here a ramp, which no step rejects) gives the stored pipeline.

        Raises
        ------
        registry.errors.InputError
            If an array the recipe needs is missing or has the wrong length.
        """
        pipe = Recipe.from_json(recipe).build(axis)
        pipe.set_params(state={k: np.asarray(v) for k, v in arrays.items()})
        return pipe.fit(np.linspace(1.0, 2.0, len(pipe.axis))[None, :])


def _state_vector(arrays: Mapping[str, np.ndarray], key: str, width: int) -> np.ndarray:
    if key not in arrays:
        raise InputError(f"preprocessing state is missing array {key!r}", field=key)
    arr = np.ascontiguousarray(arrays[key], dtype=np.float64)
    if arr.shape != (width,):
        raise InputError(f"preprocessing state {key!r} has shape {arr.shape}, "
                         f"expected ({width},)", field=key)
    return arr
