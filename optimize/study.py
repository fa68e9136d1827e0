"""Study files: a stack file whose layer keys may be ranges, plus a spec and search settings.

A study file is a stack file (see :mod:`physics.stack`) with

- ranges in place of layer values: ``thickness_ml = {min = 4, max = 12}``
  (whole monolayers), ``x = {min = 0.45, max = 0.80, step = 0.01}``,
  ``doping_cm3 = {min = 1e17, max = 5e18, log = true}``; a layer may be tied
  to another with ``same_as = "barrier1"`` (it then takes every key of that
  layer, ranges included, and shares its parameters);
- ``[targets]``: a window per figure of merit (``{min, max}`` or
  ``{target, tolerance}``) and ``maximize`` / ``minimize`` lists;
- ``[constraints]``: ``max_active_thickness_nm``, ``critical_thickness``
  and figure-of-merit bounds;
- ``[search]`` and ``[sweep]`` settings;
- ``[growth]``, ``[tolerance]``, ``[report]`` (and a layer's ``growth``
  table), which belong to later stages: they are kept raw in
  :attr:`Study.reserved` and :attr:`Study.layer_growth`, not checked here.

The search parameter of a range is named ``<layer name>.<key>``, e.g.
``barrier1.thickness_ml``.

How a design is scored (what the search minimises or pushes) is documented
in :meth:`Study.spec_violation`, :meth:`Study.single_score` and
:meth:`Study.constraint_values`.
"""

from __future__ import annotations

import copy
import hashlib
import json
import math
import tomllib
import warnings
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from physics import materials
from physics.errors import InputError
from physics.iv import METRIC_NAMES
from physics.stack import LAYER_KEYS, TOP_KEYS, CriticalThicknessWarning, Stack, parse_stack

__all__ = [
    "Variable",
    "Window",
    "Objective",
    "Constraints",
    "SearchSettings",
    "SweepSettings",
    "Study",
    "load_study",
    "parse_study",
    "NAN_VIOLATION",
    "SAMPLERS",
    "RESERVED_TABLES",
]

#: Tables of later stages (growth tolerance, report) passed through unchecked.
RESERVED_TABLES = ("growth", "tolerance", "report")
STUDY_TABLES = ("targets", "constraints", "search", "sweep")
ALLOWED_TOP_KEYS = tuple(sorted(TOP_KEYS | set(STUDY_TABLES) | set(RESERVED_TABLES)))
SAMPLERS = ("tpe", "nsga2", "random")
#: Layer keys that may be ranges (every numeric stack key).
RANGE_KEYS = tuple(sorted(k for k, kind in LAYER_KEYS.items() if kind is float))
#: Spec violation counted for each figure of merit that is NaN (no NDR in the
#: sweep): larger than log1p of any plausible miss (e^10 ~ 2e4 window widths).
NAN_VIOLATION = 10.0
#: Scale of each figure of merit used only to spread a pushed objective over
#: (0, 1) when the spec gives no window for it (ordering is unaffected).
#: Typical magnitudes for RTDs, common practice.
DEFAULT_REFERENCE = {
    "peak_current_density_a_cm2": 1e5,
    "valley_current_density_a_cm2": 1e4,
    "delta_current_density_a_cm2": 1e5,
    "peak_voltage_v": 0.5,
    "valley_voltage_v": 0.8,
    "delta_voltage_v": 0.2,
    "pvcr": 3.0,
}
MAX_TRIALS = 1_000_000
MAX_WORKERS = 256
MAX_POINTS = 2001
MAX_ABS_BIAS_V = 10.0


# --------------------------------------------------------------------------- data


@dataclass(frozen=True)
class Variable:
    """One search parameter: a range of one layer key, applied to one or more layers.

    Attributes
    ----------
    name
        ``<layer name>.<key>``, the Optuna parameter name.
    key
        The layer key (``thickness_ml``, ``x``, ...).
    layers
        Indices of the layers that take the value (several with ``same_as``).
    low, high
        Inclusive bounds, in the key's unit.
    step
        Grid step, or ``None`` for a continuous range (``thickness_ml``: 1
        unless given).
    log
        Sample uniformly in the logarithm.
    integer
        Whole values (``thickness_ml``).
    """

    name: str
    key: str
    layers: tuple[int, ...]
    low: float
    high: float
    step: float | None = None
    log: bool = False
    integer: bool = False

    def contains(self, value: float) -> bool:
        """Whether ``value`` is in the range and on its grid."""
        if not self.low - 1e-12 * abs(self.low) <= value <= self.high + 1e-12 * abs(self.high):
            return False
        if self.step is not None:
            k = (value - self.low) / self.step
            return abs(k - round(k)) < 1e-6
        return True

    def describe(self) -> str:
        """The range as written in a study file."""
        parts = [f"min = {self.low:g}", f"max = {self.high:g}"]
        if self.step is not None and not (self.integer and self.step == 1):
            parts.append(f"step = {self.step:g}")
        if self.log:
            parts.append("log = true")
        return "{" + ", ".join(parts) + "}"


@dataclass(frozen=True)
class Window:
    """Allowed interval of one figure of merit.

    ``low``/``high`` are ``-inf``/``inf`` when open. ``scale`` normalises the
    distance outside the window: the half width of a two-sided window (the
    tolerance of a target), else the magnitude of the one bound (1 if it is 0).
    """

    metric: str
    low: float
    high: float
    scale: float

    @property
    def two_sided(self) -> bool:
        return math.isfinite(self.low) and math.isfinite(self.high)

    @property
    def reference(self) -> float:
        """Characteristic value: the centre of a two-sided window, else its bound."""
        if self.two_sided:
            return 0.5 * (self.low + self.high)
        return self.low if math.isfinite(self.low) else self.high

    def distance(self, values: np.ndarray) -> np.ndarray:
        """Normalised distance outside the window (0 inside, NaN stays NaN)."""
        v = np.asarray(values, float)
        with np.errstate(invalid="ignore"):
            gap = np.maximum(self.low - v, 0.0) + np.maximum(v - self.high, 0.0)
        return np.where(np.isnan(v), np.nan, gap / self.scale)

    def margin(self, values: np.ndarray) -> np.ndarray:
        """Signed normalised distance to the nearest bound: > 0 outside, <= 0 inside."""
        v = np.asarray(values, float)
        with np.errstate(invalid="ignore"):
            m = np.maximum(self.low - v, v - self.high) / self.scale
        return m

    def describe(self) -> str:
        if self.two_sided:
            return f"{self.low:g} <= {self.metric} <= {self.high:g}"
        if math.isfinite(self.low):
            return f"{self.metric} >= {self.low:g}"
        return f"{self.metric} <= {self.high:g}"


@dataclass(frozen=True)
class Objective:
    """A figure of merit to push once the spec is met."""

    metric: str
    direction: str  #: "maximize" or "minimize"


@dataclass(frozen=True)
class Constraints:
    """The ``[constraints]`` table. Each becomes one named Optuna constraint."""

    max_active_thickness_nm: float | None = None
    critical_thickness: bool = False
    metric_bounds: tuple[Window, ...] = ()

    @property
    def names(self) -> tuple[str, ...]:
        """Names of the constraint values every trial carries, in order."""
        names = ["stack_valid"]
        if self.max_active_thickness_nm is not None:
            names.append("max_active_thickness_nm")
        if self.critical_thickness:
            names.append("critical_thickness")
        names += [f"metric:{w.metric}" for w in self.metric_bounds]
        return tuple(names)


@dataclass(frozen=True)
class SearchSettings:
    """The ``[search]`` table (defaults in the field values)."""

    trials: int = 100  #: complete trials the study should hold (a total, not an increment)
    sampler: str = "tpe"
    seed: int = 0
    workers: int = 1
    study_name: str | None = None  #: default: the study's name
    baseline: tuple[dict[str, float], ...] = ()  #: parameter sets enqueued first
    #: trials asked together and evaluated in one batched kernel call; 4 evaluates
    #: about 1.7x faster per stack than 1 and found the planted designs as
    #: reliably (measured, see benchmarks/bench_search.py and tests/test_search.py)
    batch: int = 4
    startup_trials: int = 10  #: random trials before TPE models the history
    multivariate: bool = True  #: TPE models parameters jointly
    top: int = 10  #: designs written to designs.csv/json (and growth sheets)


@dataclass(frozen=True)
class SweepSettings:
    """The ``[sweep]`` table: the bias grid every design is evaluated on."""

    bias_min_v: float = 0.0
    bias_max_v: float = 1.0
    points: int = 61

    @property
    def bias_v(self) -> np.ndarray:
        return np.linspace(self.bias_min_v, self.bias_max_v, self.points)


@dataclass(frozen=True)
class Study:
    """A validated study file. Plain data: picklable, so worker processes get a copy.

    Attributes
    ----------
    name
        Study name (default: the file stem); also the Optuna study name unless
        ``[search] study_name`` is given.
    source
        File name used in messages.
    base
        The stack part of the file as a dictionary, with every range replaced
        by its lower bound and ``same_as`` resolved; :meth:`stack_dict` fills
        in parameter values.
    variables
        The search parameters.
    targets
        Windows of the spec.
    objectives
        Figures of merit to push once the spec is met (two or more: Pareto).
    constraints, search, sweep
        The corresponding tables.
    reserved
        ``[growth]``, ``[tolerance]``, ``[report]`` as read (unchecked).
    layer_growth
        Each layer's own ``growth`` table by layer name (unchecked).
    """

    name: str
    source: str
    base: dict[str, Any]
    variables: tuple[Variable, ...]
    targets: tuple[Window, ...] = ()
    objectives: tuple[Objective, ...] = ()
    constraints: Constraints = field(default_factory=Constraints)
    search: SearchSettings = field(default_factory=SearchSettings)
    sweep: SweepSettings = field(default_factory=SweepSettings)
    reserved: dict[str, Any] = field(default_factory=dict)
    layer_growth: dict[str, Any] = field(default_factory=dict)

    # ------------------------------------------------------------ parameters

    @property
    def parameter_names(self) -> tuple[str, ...]:
        return tuple(v.name for v in self.variables)

    @property
    def layer_names(self) -> tuple[str, ...]:
        return tuple(layer["name"] for layer in self.base["layers"])

    @property
    def multi_objective(self) -> bool:
        return len(self.objectives) >= 2

    @property
    def directions(self) -> tuple[str, ...]:
        """Optuna study directions: one "minimize" (the score) or one per objective."""
        if self.multi_objective:
            return tuple(o.direction for o in self.objectives)
        return ("minimize",)

    @property
    def constraint_names(self) -> tuple[str, ...]:
        """Names of the constraint values every trial carries (see :meth:`constraint_values`)."""
        return self.constraints.names + (("spec",) if self.multi_objective else ())

    @property
    def optuna_name(self) -> str:
        return self.search.study_name or self.name

    def stack_dict(self, params: dict[str, float]) -> dict[str, Any]:
        """A concrete stack dictionary (for :func:`physics.stack.parse_stack`).

        Parameters
        ----------
        params
            Value of every variable by parameter name; a missing one takes its
            lower bound.
        """
        data = copy.deepcopy(self.base)
        for var in self.variables:
            value = params.get(var.name, var.low)
            value = int(round(value)) if var.integer else float(f"{float(value):.12g}")
            for i in var.layers:
                data["layers"][i][var.key] = value
        return data

    def stack(self, params: dict[str, float]) -> Stack:
        """The parsed stack at ``params``; critical-thickness warnings are silenced
        (the search reports them as a constraint)."""
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", CriticalThicknessWarning)
            return parse_stack(self.stack_dict(params), source=self.source)

    def parameters_of(self, stack: Stack, *, source: str | None = None) -> dict[str, float]:
        """The variables' values in a stack whose layers carry the study's layer names.

        Raises
        ------
        InputError
            When a layer is missing or a value is outside its range.
        """
        by_name = {layer.name: layer for layer in stack.layers}
        src = source or stack.source
        params: dict[str, float] = {}
        for var in self.variables:
            layer_name = var.name.rsplit(".", 1)[0]
            if layer_name not in by_name:
                raise InputError(
                    f"has no layer named '{layer_name}'; its layers must carry the study's "
                    f"layer names ({', '.join(self.layer_names)})",
                    source=src,
                    key="name",
                )
            value = getattr(by_name[layer_name], var.key)
            if value is None:
                raise InputError(
                    f"gives no {var.key} for layer '{layer_name}'", source=src, key=var.name
                )
            if var.integer:
                if abs(value - round(value)) > 1e-6:
                    raise InputError(
                        f"{value:g} is not a whole number of monolayers", source=src, key=var.name
                    )
                value = int(round(value))
            if not var.contains(value):
                raise InputError(
                    f"{value:g} outside the study's range {var.describe()}",
                    source=src,
                    key=var.name,
                )
            params[var.name] = value
        return params

    def fingerprint(self) -> str:
        """Hash of what defines the search (space, spec, constraints, sweep, model).

        A study in storage with another fingerprint was made from a different
        file; resuming it would mix incompatible trials.
        """
        parts = {
            "base": self.base,
            "variables": [v.__dict__ for v in self.variables],
            "targets": [w.__dict__ for w in self.targets],
            "objectives": [o.__dict__ for o in self.objectives],
            "constraints": repr(self.constraints),
            "sweep": self.sweep.__dict__,
        }
        text = json.dumps(parts, sort_keys=True, default=str)
        return hashlib.sha256(text.encode()).hexdigest()[:16]

    # ------------------------------------------------------------ scoring

    def window_distances(self, metrics: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
        """Normalised distance outside each target window (0 inside, NaN for NaN)."""
        return {w.metric: w.distance(metrics[w.metric]) for w in self.targets}

    def spec_violation(self, metrics: dict[str, np.ndarray]) -> np.ndarray:
        """How far each design is from meeting the spec; 0 when it meets it.

        Notes
        -----
        Sum over the target windows of ``log1p(d)``, ``d`` the distance
        outside the window divided by the window's scale (see
        :class:`Window`), so an off-spec design is ranked by how far off it
        is, and a figure missed by orders of magnitude does not swamp the
        others. Every figure of merit named by the targets or the objectives
        that is NaN (no NDR in the sweep) adds :data:`NAN_VIOLATION` instead.
        """
        n = max((np.size(v) for v in metrics.values()), default=1)
        total = np.zeros(n)
        for w in self.targets:
            d = w.distance(metrics[w.metric])
            total += np.where(np.isnan(d), NAN_VIOLATION, np.log1p(np.nan_to_num(d)))
        for name in {o.metric for o in self.objectives} - {w.metric for w in self.targets}:
            total += np.where(np.isnan(metrics[name]), NAN_VIOLATION, 0.0)
        return total

    def merit(self, metrics: dict[str, np.ndarray]) -> np.ndarray:
        """Merit of an on-spec design in [0, 1) for the single-objective score.

        Notes
        -----
        With one objective ``m`` (clipped at 0) and a reference ``r`` (the
        characteristic value of its window, else :data:`DEFAULT_REFERENCE`):
        ``m / (m + r)`` to maximise, ``r / (m + r)`` to minimise; strictly
        monotone, so the ranking is the objective's. With no objective: how
        central the design sits in its two-sided windows, the mean of
        ``1 - min(1, |m - centre| / half width)`` (0 if no window is
        two-sided).
        """
        n = max((np.size(v) for v in metrics.values()), default=1)
        if self.objectives:
            (obj,) = self.objectives
            m = np.clip(np.nan_to_num(np.asarray(metrics[obj.metric], float)), 0.0, None)
            ref = self._reference(obj.metric)
            return m / (m + ref) if obj.direction == "maximize" else ref / (m + ref)
        two = [w for w in self.targets if w.two_sided]
        if not two:
            return np.zeros(n)
        parts = [
            1.0 - np.minimum(1.0, np.abs(np.nan_to_num(metrics[w.metric]) - w.reference) / w.scale)
            for w in two
        ]
        return np.mean(parts, axis=0)

    def _reference(self, metric: str) -> float:
        for w in self.targets:
            if w.metric == metric and w.reference > 0:
                return abs(w.reference)
        return DEFAULT_REFERENCE.get(metric, 1.0)

    def single_score(self, metrics: dict[str, np.ndarray]) -> np.ndarray:
        """The scalar a single-objective search minimises.

        ``spec_violation`` (> 0) for an off-spec design, ``-merit`` (in
        (-1, 0]) for a design that meets the spec: every on-spec design scores
        below every off-spec one, off-spec designs are ordered by how far off
        they are, on-spec designs by the objective.
        """
        v = self.spec_violation(metrics)
        return np.where(v > 0, v, -self.merit(metrics))

    def objective_values(self, metrics: dict[str, np.ndarray]) -> np.ndarray:
        """``(n, n_objectives)`` raw objective values for a multi-objective search.

        NaN (no NDR) becomes the worst value (``-inf`` to maximise, ``inf`` to
        minimise); such designs are off-spec and ranked by the ``spec``
        constraint anyway.
        """
        cols = []
        for o in self.objectives:
            m = np.asarray(metrics[o.metric], float)
            worst = -np.inf if o.direction == "maximize" else np.inf
            cols.append(np.where(np.isnan(m), worst, m))
        return np.stack(cols, axis=1)

    def constraint_values(self, stack: Stack | None, metrics: dict[str, float]) -> dict[str, float]:
        """Named constraint values of one design; > 0 means violated.

        Parameters
        ----------
        stack
            The parsed design, or ``None`` when its stack was invalid.
        metrics
            Its figures of merit (NaN where there is no NDR).

        Notes
        -----
        - ``stack_valid``: -1, or 1 when the parameters gave an invalid stack
          (or, set by the search, when the physics could not evaluate it).
        - ``max_active_thickness_nm``: ``(t - t_max) / t_max`` of the thickness
          between the contacts.
        - ``critical_thickness``: the largest ``(t - h_c) / h_c`` over the
          strained layers between the contacts, ``h_c`` the Matthews-Blakeslee
          thickness from :func:`physics.materials.critical_thickness_nm`
          (Matthews and Blakeslee, J. Cryst. Growth 27, 118 (1974)); -1 if no
          layer is strained.
        - ``metric:<name>``: :meth:`Window.margin` of the bound (1 if NaN).
        - multi-objective studies add ``spec``: :meth:`spec_violation`.
        """
        c = self.constraints
        out: dict[str, float] = {"stack_valid": -1.0 if stack is not None else 1.0}
        if c.max_active_thickness_nm is not None:
            if stack is None:
                out["max_active_thickness_nm"] = 1.0
            else:
                t = stack.active_thickness_nm
                out["max_active_thickness_nm"] = (
                    t - c.max_active_thickness_nm
                ) / c.max_active_thickness_nm
        if c.critical_thickness:
            out["critical_thickness"] = 1.0 if stack is None else critical_thickness_excess(stack)
        for w in c.metric_bounds:
            m = float(w.margin(np.array([metrics.get(w.metric, np.nan)]))[0])
            out[f"metric:{w.metric}"] = 1.0 if not math.isfinite(m) else m
        if self.multi_objective:
            arr = {k: np.array([metrics.get(k, np.nan)]) for k in METRIC_NAMES}
            out["spec"] = float(self.spec_violation(arr)[0])
        return out


def critical_thickness_excess(stack: Stack) -> float:
    """Largest relative excess ``(t - h_c) / h_c`` over the strained layers of a stack.

    Returns -1 when no layer between the contacts is strained or the substrate
    is unknown; a layer whose ``h_c`` is 0 (no coherent thickness) counts as
    its thickness in nm (> 0).

    References
    ----------
    .. [1] J. W. Matthews and A. E. Blakeslee, J. Cryst. Growth 27, 118 (1974).
    """
    if stack.substrate is None or not stack.model.strain:
        return -1.0
    sub_name, sub_x = materials.parse_material(stack.substrate)
    a_s = float(materials.lattice_constant_nm(sub_name, sub_x, temperature_k=stack.temperature_k))
    worst = -1.0
    for layer in stack.layers[1:-1]:
        if layer.material == "custom" or abs(layer.strain_xx) <= 1e-5:
            continue
        h_c = float(
            materials.critical_thickness_nm(
                layer.material, layer.x, substrate_lattice_nm=a_s, temperature_k=stack.temperature_k
            )
        )
        if h_c == math.inf:
            continue
        excess = layer.thickness_nm if h_c <= 0 else (layer.thickness_nm - h_c) / h_c
        worst = max(worst, excess)
    return worst


# --------------------------------------------------------------------------- parsing


def load_study(path: str | Path) -> Study:
    """Read and validate a study file.

    Raises
    ------
    InputError
        For a missing file, bad TOML or any invalid entry, naming the key and
        the allowed form.
    """
    path = Path(path)
    source = str(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError("file not found", source=source) from None
    except OSError as exc:
        raise InputError(f"cannot read file ({exc.strerror})", source=source) from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"not valid TOML ({exc})", source=source) from None
    return parse_study(data, source=source, name=path.stem, base_dir=path.parent)


def parse_study(
    data: dict[str, Any],
    *,
    source: str = "<dict>",
    name: str = "study",
    base_dir: str | Path = ".",
) -> Study:
    """Validate a study given as the dictionary of a parsed study file.

    Parameters
    ----------
    data
        The TOML document as a dictionary.
    source
        File name for messages.
    name
        Default study name (``load_study`` passes the file stem).
    base_dir
        Folder that relative paths in the file (``[search] baseline``) are
        relative to.
    """
    if not isinstance(data, dict):
        raise InputError("study must be a table", source=source)
    for key in data:
        if key not in ALLOWED_TOP_KEYS:
            raise InputError(
                f"unknown key; allowed: {', '.join(ALLOWED_TOP_KEYS)}", source=source, key=key
            )
    for key in (*STUDY_TABLES, *RESERVED_TABLES):
        if key in data and not isinstance(data[key], dict):
            raise InputError(f"must be a table, e.g. [{key}]", source=source, key=key)

    base, variables, layer_growth = _parse_space(data, source=source)
    targets, objectives = _parse_targets(data.get("targets", {}), source=source)
    if not targets and not objectives:
        raise InputError(
            "needs a window for at least one figure of merit (e.g. pvcr = {min = 3}) "
            'or a maximize/minimize list (e.g. maximize = ["pvcr"])',
            source=source,
            key="targets",
        )
    constraints = _parse_constraints(data.get("constraints", {}), source=source)
    sweep = _parse_sweep(data.get("sweep", {}), source=source)
    search = _parse_search(data.get("search", {}), source=source)
    reserved = {k: copy.deepcopy(data[k]) for k in RESERVED_TABLES if k in data}
    study = Study(
        name=name,
        source=source,
        base=base,
        variables=variables,
        targets=targets,
        objectives=objectives,
        constraints=constraints,
        search=search,
        sweep=sweep,
        reserved=reserved,
        layer_growth=layer_growth,
    )
    _check_corners(study)
    baseline = _parse_baseline(
        data.get("search", {}).get("baseline"), study, source=source, base_dir=base_dir
    )
    return _replace_search(study, baseline=baseline)


def _replace_search(study: Study, **changes: Any) -> Study:
    from dataclasses import replace

    return replace(study, search=replace(study.search, **changes))


def _is_number(value: Any) -> bool:
    return isinstance(value, int | float) and not isinstance(value, bool) and math.isfinite(value)


def _parse_space(
    data: dict[str, Any], *, source: str
) -> tuple[dict[str, Any], tuple[Variable, ...], dict[str, Any]]:
    """Split layers into fixed values and ranges; resolve ``same_as``."""
    raw_layers = data.get("layers")
    if not isinstance(raw_layers, list) or not all(isinstance(x, dict) for x in raw_layers):
        raise InputError("needs a list of [[layers]] tables", source=source, key="layers")
    n = len(raw_layers)
    names = []
    for i, raw in enumerate(raw_layers):
        default = "emitter" if i == 0 else ("collector" if i == n - 1 else f"layer{i}")
        nm = raw.get("name", default)
        if not isinstance(nm, str) or not nm or "." in nm:
            raise InputError(
                f"must be a non-empty string without '.', got {nm!r}",
                source=source,
                layer=i,
                key="name",
            )
        if nm in names:
            raise InputError(f"name '{nm}' used twice", source=source, layer=i, key="name")
        names.append(nm)

    layer_growth: dict[str, Any] = {}
    layers: list[dict[str, Any]] = []
    ranges: dict[tuple[int, str], dict[str, Any]] = {}
    for i, raw in enumerate(raw_layers):
        fixed: dict[str, Any] = {"name": names[i]}
        for key, value in raw.items():
            if key == "name":
                continue
            if key == "growth":
                if not isinstance(value, dict):
                    raise InputError(
                        "must be a table, e.g. growth = {...}", source=source, layer=i, key=key
                    )
                layer_growth[names[i]] = copy.deepcopy(value)
                continue
            if key == "same_as":
                fixed["same_as"] = value
                continue
            if isinstance(value, dict):
                if key not in RANGE_KEYS:
                    raise InputError(
                        f"cannot be a range; keys that may be ranges: {', '.join(RANGE_KEYS)}",
                        source=source,
                        layer=i,
                        key=key,
                    )
                ranges[(i, key)] = value
                continue
            fixed[key] = value
        layers.append(fixed)

    # same_as: a tied layer takes every key of its reference (resolved through chains)
    resolved: dict[int, int] = {}
    for i, layer in enumerate(layers):
        if "same_as" not in layer:
            continue
        target = layer["same_as"]
        if not isinstance(target, str):
            raise InputError(
                f"must be the name of another layer, got {target!r}",
                source=source,
                layer=i,
                key="same_as",
            )
        extra = sorted(k for k in raw_layers[i] if k not in ("name", "same_as", "growth"))
        if extra:
            raise InputError(
                f"a layer with same_as takes only name (and growth); remove {', '.join(extra)}",
                source=source,
                layer=i,
                key="same_as",
            )
        seen = {i}
        j = i
        while "same_as" in layers[j]:
            ref = layers[j]["same_as"]
            if ref not in names:
                raise InputError(
                    f"'{ref}' is not a layer name; layers: {', '.join(names)}",
                    source=source,
                    layer=j,
                    key="same_as",
                )
            j = names.index(ref)
            if j in seen:
                raise InputError(
                    "same_as chain loops back to this layer", source=source, layer=i, key="same_as"
                )
            seen.add(j)
        resolved[i] = j
    for i, j in resolved.items():
        tied = {k: copy.deepcopy(v) for k, v in layers[j].items() if k not in ("name", "same_as")}
        tied["name"] = names[i]
        layers[i] = tied

    # ranges -> variables (a tied layer shares the reference's variable)
    variables = []
    for (i, key), spec in ranges.items():
        tied_layers = (i,) + tuple(t for t, ref in resolved.items() if ref == i)
        var = _parse_range(
            spec, name=f"{names[i]}.{key}", key=key, layers=tied_layers, source=source, index=i
        )
        variables.append(var)
        for t in var.layers:
            layers[t][key] = int(var.low) if var.integer else var.low
    variables.sort(key=lambda v: (v.layers[0], v.key))

    base = {k: copy.deepcopy(v) for k, v in data.items() if k in TOP_KEYS and k != "layers"}
    base["layers"] = layers
    return base, tuple(variables), layer_growth


def _parse_range(
    spec: dict[str, Any], *, name: str, key: str, layers: tuple[int, ...], source: str, index: int
) -> Variable:
    integer = key == "thickness_ml"
    form = (
        "{min = 4, max = 12} in whole monolayers (optional step, log)"
        if integer
        else "{min = .., max = ..} with optional step = .. or log = true"
    )

    def err(message: str, sub: str | None = None) -> InputError:
        return InputError(
            message, source=source, layer=index, key=key if sub is None else f"{key}.{sub}"
        )

    unknown = sorted(set(spec) - {"min", "max", "step", "log"})
    if unknown:
        raise err(f"unknown range key {unknown[0]!r}; a range is {form}", unknown[0])
    for bound in ("min", "max"):
        if bound not in spec:
            raise err(f"range needs min and max; a range is {form}", bound)
        if not _is_number(spec[bound]):
            raise err(f"must be a finite number, got {spec[bound]!r}", bound)
        if integer and float(spec[bound]) != int(spec[bound]):
            raise err(f"{spec[bound]!r} is not a whole number of monolayers", bound)
    low, high = float(spec["min"]), float(spec["max"])
    if not low < high:
        raise err(f"min ({low:g}) must be below max ({high:g})", "max")
    log = spec.get("log", False)
    if not isinstance(log, bool):
        raise err(f"must be true or false, got {log!r}", "log")
    step = spec.get("step")
    if step is not None:
        if not _is_number(step) or step <= 0:
            raise err(f"must be a positive number, got {step!r}", "step")
        if integer and float(step) != int(step):
            raise err(f"{step!r} is not a whole number of monolayers", "step")
        if log:
            raise err("give either step or log = true, not both", "step")
        k = (high - low) / step
        if abs(k - round(k)) > 1e-6:
            raise err(
                f"max - min ({high - low:g}) must be a whole number of steps of {step:g}", "step"
            )
        step = float(step)
    if log and low <= 0:
        raise err(f"log = true needs min > 0, got {low:g}", "min")
    if integer and step is None and not log:
        step = 1.0
    if integer and log:
        step = 1.0
    return Variable(
        name=name, key=key, layers=layers, low=low, high=high, step=step, log=log, integer=integer
    )


def _check_corners(study: Study) -> None:
    """Parse the stack with every range at its min, and at its max, so that
    stack errors surface now, naming the layer and key."""
    for corner in ("min", "max"):
        params = {v.name: (v.low if corner == "min" else v.high) for v in study.variables}
        try:
            study.stack(params)
        except InputError as exc:
            prefix = f"with every range at its {corner}: " if study.variables else ""
            raise InputError(
                prefix + exc.message, source=study.source, layer=exc.layer, key=exc.key
            ) from None


def _parse_window(value: Any, *, source: str, key: str, metric: str) -> Window:
    form = "{min = .., max = ..} (either may be left out) or {target = .., tolerance = ..}"
    if not isinstance(value, dict):
        raise InputError(f"must be a window {form}", source=source, key=key)
    keys = set(value)
    unknown = sorted(keys - {"min", "max", "target", "tolerance"})
    if unknown:
        raise InputError(
            f"unknown window key {unknown[0]!r}; a window is {form}", source=source, key=key
        )
    for k, v in value.items():
        if not _is_number(v):
            raise InputError(f"must be a finite number, got {v!r}", source=source, key=f"{key}.{k}")
    if keys & {"target", "tolerance"}:
        if keys != {"target", "tolerance"}:
            raise InputError(
                f"give target and tolerance together, without min/max; a window is {form}",
                source=source,
                key=key,
            )
        tol = float(value["tolerance"])
        if tol <= 0:
            raise InputError(f"must be > 0, got {tol:g}", source=source, key=f"{key}.tolerance")
        t = float(value["target"])
        return Window(metric, t - tol, t + tol, tol)
    if not keys:
        raise InputError(f"empty window; a window is {form}", source=source, key=key)
    low = float(value.get("min", -math.inf))
    high = float(value.get("max", math.inf))
    if not low < high:
        raise InputError(
            f"min ({low:g}) must be below max ({high:g})", source=source, key=f"{key}.max"
        )
    if math.isfinite(low) and math.isfinite(high):
        scale = 0.5 * (high - low)
    else:
        bound = low if math.isfinite(low) else high
        scale = abs(bound) if bound != 0 else 1.0
    return Window(metric, low, high, scale)


def _metric_key_error(
    key: str, *, source: str, table: str, extra: tuple[str, ...] = ()
) -> InputError:
    allowed = ", ".join((*METRIC_NAMES, *extra))
    return InputError(
        f"unknown figure of merit; allowed: {allowed}", source=source, key=f"{table}.{key}"
    )


def _parse_targets(
    table: dict[str, Any], *, source: str
) -> tuple[tuple[Window, ...], tuple[Objective, ...]]:
    targets = []
    objectives: list[Objective] = []
    for key, value in table.items():
        if key in ("maximize", "minimize"):
            if not isinstance(value, list) or not all(isinstance(v, str) for v in value):
                raise InputError(
                    f'must be a list of figure-of-merit names, e.g. {key} = ["pvcr"]',
                    source=source,
                    key=f"targets.{key}",
                )
            for metric in value:
                if metric not in METRIC_NAMES:
                    raise InputError(
                        f"unknown figure of merit {metric!r}; allowed: {', '.join(METRIC_NAMES)}",
                        source=source,
                        key=f"targets.{key}",
                    )
                if any(o.metric == metric for o in objectives):
                    raise InputError(
                        f"{metric!r} is listed twice in maximize/minimize",
                        source=source,
                        key=f"targets.{key}",
                    )
                objectives.append(Objective(metric, key))
            continue
        if key not in METRIC_NAMES:
            raise _metric_key_error(
                key, source=source, table="targets", extra=("maximize", "minimize")
            )
        targets.append(_parse_window(value, source=source, key=f"targets.{key}", metric=key))
    return tuple(targets), tuple(objectives)


def _parse_constraints(table: dict[str, Any], *, source: str) -> Constraints:
    max_t = None
    critical = False
    bounds = []
    for key, value in table.items():
        if key == "max_active_thickness_nm":
            if not _is_number(value) or value <= 0:
                raise InputError(
                    f"must be a thickness in nm > 0, got {value!r}",
                    source=source,
                    key=f"constraints.{key}",
                )
            max_t = float(value)
        elif key == "critical_thickness":
            if not isinstance(value, bool):
                raise InputError(
                    f"must be true or false, got {value!r}", source=source, key=f"constraints.{key}"
                )
            critical = value
        elif key in METRIC_NAMES:
            bounds.append(_parse_window(value, source=source, key=f"constraints.{key}", metric=key))
        else:
            raise _metric_key_error(
                key,
                source=source,
                table="constraints",
                extra=("max_active_thickness_nm", "critical_thickness"),
            )
    return Constraints(
        max_active_thickness_nm=max_t, critical_thickness=critical, metric_bounds=tuple(bounds)
    )


def _int_setting(
    table: dict[str, Any], key: str, default: int, lo: int, hi: int, *, source: str, name: str
) -> int:
    value = table.get(key, default)
    if isinstance(value, bool) or not isinstance(value, int) or not lo <= value <= hi:
        raise InputError(
            f"must be a whole number in [{lo}, {hi}], got {value!r}",
            source=source,
            key=f"{name}.{key}",
        )
    return value


def _parse_search(table: dict[str, Any], *, source: str) -> SearchSettings:
    allowed = (
        "trials",
        "sampler",
        "seed",
        "workers",
        "study_name",
        "baseline",
        "batch",
        "startup_trials",
        "multivariate",
        "top",
    )
    for key in table:
        if key not in allowed:
            raise InputError(
                f"unknown key; allowed: {', '.join(allowed)}", source=source, key=f"search.{key}"
            )
    sampler = table.get("sampler", "tpe")
    if sampler not in SAMPLERS:
        raise InputError(
            f"{sampler!r} is not one of {', '.join(SAMPLERS)}", source=source, key="search.sampler"
        )
    study_name = table.get("study_name")
    if study_name is not None and (not isinstance(study_name, str) or not study_name.strip()):
        raise InputError(
            f"must be a non-empty string, got {study_name!r}",
            source=source,
            key="search.study_name",
        )
    multivariate = table.get("multivariate", True)
    if not isinstance(multivariate, bool):
        raise InputError(
            f"must be true or false, got {multivariate!r}", source=source, key="search.multivariate"
        )
    return SearchSettings(
        trials=_int_setting(table, "trials", 100, 0, MAX_TRIALS, source=source, name="search"),
        sampler=sampler,
        seed=_int_setting(table, "seed", 0, 0, 2**32 - 1, source=source, name="search"),
        workers=_int_setting(table, "workers", 1, 1, MAX_WORKERS, source=source, name="search"),
        study_name=study_name,
        batch=_int_setting(table, "batch", 4, 1, 1024, source=source, name="search"),
        startup_trials=_int_setting(
            table, "startup_trials", 10, 0, MAX_TRIALS, source=source, name="search"
        ),
        multivariate=multivariate,
        top=_int_setting(table, "top", 10, 1, 10_000, source=source, name="search"),
    )


def _parse_sweep(table: dict[str, Any], *, source: str) -> SweepSettings:
    allowed = ("bias_min_v", "bias_max_v", "points")
    for key in table:
        if key not in allowed:
            raise InputError(
                f"unknown key; allowed: {', '.join(allowed)}", source=source, key=f"sweep.{key}"
            )
    values = {}
    for key in ("bias_min_v", "bias_max_v"):
        v = table.get(key, getattr(SweepSettings, key))
        if not _is_number(v) or abs(v) > MAX_ABS_BIAS_V:
            raise InputError(
                f"must be a bias in [-{MAX_ABS_BIAS_V:g}, {MAX_ABS_BIAS_V:g}] V, got {v!r}",
                source=source,
                key=f"sweep.{key}",
            )
        values[key] = float(v)
    if values["bias_max_v"] <= values["bias_min_v"]:
        raise InputError(
            f"must be above bias_min_v ({values['bias_min_v']:g} V)",
            source=source,
            key="sweep.bias_max_v",
        )
    points = _int_setting(table, "points", 61, 5, MAX_POINTS, source=source, name="sweep")
    return SweepSettings(points=points, **values)


def _flatten(value: dict[str, Any], prefix: str = "") -> dict[str, Any]:
    out: dict[str, Any] = {}
    for k, v in value.items():
        name = f"{prefix}{k}"
        if isinstance(v, dict):
            out.update(_flatten(v, f"{name}."))
        else:
            out[name] = v
    return out


def _parse_baseline(
    value: Any, study: Study, *, source: str, base_dir: str | Path
) -> tuple[dict[str, float], ...]:
    """``[search] baseline``: a stack file, a table of parameter values, or a list of these."""
    if value is None:
        return ()
    items = value if isinstance(value, list) else [value]
    form = 'a stack file path, a table {"barrier1.thickness_ml" = 5, ...}, or a list of these'
    out = []
    for item in items:
        if isinstance(item, str):
            path = Path(base_dir) / item
            from physics.stack import load_stack

            with warnings.catch_warnings():
                warnings.simplefilter("ignore", CriticalThicknessWarning)
                if not path.is_file():
                    raise InputError(
                        f"baseline stack file {str(path)!r} not found; give {form}",
                        source=source,
                        key="search.baseline",
                    )
                stack = load_stack(path)
            out.append(study.parameters_of(stack, source=str(path)))
        elif isinstance(item, dict):
            flat = _flatten(item)
            params = {}
            for name, v in flat.items():
                var = next((x for x in study.variables if x.name == name), None)
                if var is None:
                    raise InputError(
                        f"{name!r} is not a search parameter; "
                        f"parameters: {', '.join(study.parameter_names)}",
                        source=source,
                        key="search.baseline",
                    )
                if not _is_number(v) or not var.contains(float(v)):
                    raise InputError(
                        f"{name} = {v!r} outside its range {var.describe()}",
                        source=source,
                        key="search.baseline",
                    )
                params[name] = int(v) if var.integer else float(v)
            out.append(params)
        else:
            raise InputError(f"must be {form}", source=source, key="search.baseline")
    return tuple(out)
