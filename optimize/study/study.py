"""Study files: a stack file whose layer keys may be ranges, plus a spec and search settings.

A study file is a stack file (see :mod:`wellwright.physics.stack`) with

- ranges in place of layer values: ``thickness_ml = {min = 4, max = 12}``
  (whole monolayers), ``x = {min = 0.45, max = 0.80, step = 0.01}``,
  ``doping_cm3 = {min = 1e17, max = 5e18, log = true}``; a layer may be tied
  to another with ``same_as = "barrier1"`` (it then takes every key of that
  layer, ranges included, and shares its parameters);
- ``[targets]``: a window per figure of merit (``{min, max}`` or
  ``{target, tolerance}``) and ``maximize`` / ``minimize`` lists;
- ``[constraints]``: ``max_active_thickness_nm``, ``critical_thickness``
  and figure-of-merit bounds;
- ``[search]``: ``trials`` (complete trials the study should hold, default
  100), ``sampler`` (``"tpe"``, ``"nsga2"``, ``"random"``), ``seed`` (0),
  ``workers`` (1), ``study_name`` (the file stem), ``baseline`` (a stack
  file, a table of parameter values, or a list of these, evaluated first),
  ``batch`` (4), ``startup_trials`` (10), ``multivariate`` (true), ``top``
  (designs written, 10), ``robust`` (false: the objective is the Monte Carlo
  yield under ``[growth]``, see :mod:`wellwright.optimize.search.robust`), ``robust_samples``
  (as-grown samples per design, 32);
- ``[sweep]``: ``bias_min_v`` (0), ``bias_max_v`` (1.0), ``points`` (61);
- ``[calibration] from = "DIR/calibration.json"``: the calibrated model of
  ``wellwright calibrate`` written into the stack
  (:mod:`wellwright.optimize.study.calibration`);
- ``[growth]``, ``[tolerance]``, ``[report]`` (and a layer's ``growth``
  table), which belong to later stages: they are kept raw in
  :attr:`Study.reserved` and :attr:`Study.layer_growth`; ``[growth]`` is
  validated here too (:func:`wellwright.optimize.study.growth.parse_growth`), so that a bad
  spread stops ``wellwright run`` before its search, not after it.

The search parameter of a range is named ``<layer name>.<key>``, e.g.
``barrier1.thickness_ml``.

This module loads and validates the file and holds the settings and the
:class:`Study` dataclass. The design space (ranges, ``same_as``) lives in
:mod:`wellwright.optimize.study.space`, the spec and how designs are scored in
:mod:`wellwright.optimize.study.targets` (:func:`wellwright.optimize.study.targets.spec_violation`,
:func:`wellwright.optimize.study.targets.single_score`,
:func:`wellwright.optimize.study.targets.constraint_values`); their public names are
re-exported here. A robust search (``[search] robust = true``) is described
in :mod:`wellwright.optimize.search.robust`.
"""

from __future__ import annotations

import copy
import hashlib
import json
import warnings
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np
from wellwright.optimize.study import space as _space
from wellwright.optimize.study import targets as _targets
from wellwright.optimize.study.calibration import apply_calibration
from wellwright.optimize.study.growth import GrowthSettings, check_cells, parse_growth
from wellwright.optimize.study.run_settings import MAX_TRIALS, settings_from_tables
from wellwright.optimize.study.space import RANGE_KEYS, Variable, is_finite_number, parse_space
from wellwright.optimize.study.targets import (
    DEFAULT_REFERENCE,
    NAN_VIOLATION,
    Constraints,
    Objective,
    Spec,
    Window,
    critical_thickness_excess,
    parse_constraints,
    parse_targets,
)
from wellwright.physics import checks
from wellwright.physics.errors import InputError
from wellwright.physics.stack import (
    TOP_KEYS,
    CriticalThicknessWarning,
    Stack,
    load_stack,
    parse_stack,
    read_toml,
)

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
    "critical_thickness_excess",
    "NAN_VIOLATION",
    "DEFAULT_REFERENCE",
    "RANGE_KEYS",
    "SAMPLERS",
    "RESERVED_TABLES",
]

#: Tables of later stages (growth tolerance, report) passed through unchecked.
RESERVED_TABLES = ("growth", "tolerance", "report", "calibration")
STUDY_TABLES = ("targets", "constraints", "search", "sweep")
ALLOWED_TOP_KEYS = tuple(sorted(TOP_KEYS | set(STUDY_TABLES) | set(RESERVED_TABLES)))
SAMPLERS = ("tpe", "nsga2", "random")
MAX_WORKERS = 256
#: Most local processes of the tolerance stage (--jobs)
MAX_JOBS = 256


def check_process_count(value: int | None, *, high: int, key: str) -> None:
    """One line where a count of processes (``--workers``, ``--jobs``; None: the default) lies
    outside ``[1, high]``; shared by the commands that take it.

    Parameters
    ----------
    value
        The command-line value, or None.
    high
        The largest allowed.
    key
        The option, for the message.
    """
    if value is not None and not 1 <= value <= high:
        raise InputError(f"{value} outside [1, {high}]", key=key)


MAX_POINTS = 2001
MAX_ABS_BIAS_V = 10.0
#: Bounds of ``[search] robust_samples`` (and ``--robust-samples``).
MIN_ROBUST_SAMPLES = 4
MAX_ROBUST_SAMPLES = 4096


# --------------------------------------------------------------------------- settings


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
    #: objective: Monte Carlo yield under [growth] with common random numbers
    #: (see wellwright.optimize.search.robust), instead of the nominal score
    robust: bool = False
    robust_samples: int = 32  #: as-grown samples per design in a robust search


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
    def island_layers(self) -> tuple[int, ...]:
        """Layers (from 0) the file gives a fixed fractional ``thickness_ml``: grown as
        monolayer islands and simulated so by every command (:mod:`wellwright.physics.islands`;
        a range of ``thickness_ml`` is whole monolayers, a ``thickness_nm`` a uniform layer)."""
        layers = self.base["layers"]
        return tuple(
            i
            for i, layer in enumerate(layers[1:-1], start=1)
            if is_finite_number(layer.get("thickness_ml"))
            and not float(layer["thickness_ml"]).is_integer()
        )

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
    def at_bias_v(self) -> tuple[float, ...]:
        """Biases, V, of the spec's currents at a stated bias (computed by every sweep)."""
        return _targets.at_bias_v([w.metric for w in self.targets])

    @property
    def area_um2(self) -> float | None:
        """The mesa area of the stack's ``[device]`` table, um^2 (None when not given)."""
        device = self.base.get("device")
        area = device.get("area_um2") if isinstance(device, dict) else None
        return None if area is None else float(area)

    @property
    def metric_names(self) -> tuple[str, ...]:
        """Every figure of merit a design carries: :data:`wellwright.physics.iv.METRIC_NAMES`,
        then the current density at each stated bias of the spec and, with a mesa area,
        the mesa's current there in mA."""
        from wellwright.physics.iv import METRIC_NAMES, at_bias_current_key, at_bias_key

        extra: list[str] = []
        for bias in self.at_bias_v:
            extra.append(at_bias_key(bias))
            if self.area_um2 is not None:
                extra.append(at_bias_current_key(bias))
        return (*METRIC_NAMES, *extra)

    @property
    def optuna_name(self) -> str:
        return self.search.study_name or self.name

    def stack_dict(self, params: dict[str, float]) -> dict[str, Any]:
        """A concrete stack dictionary (for :func:`wellwright.physics.stack.parse_stack`);
        see :func:`wellwright.optimize.study.space.stack_dict` (a missing parameter takes its lower bound)."""
        return _space.stack_dict(self.base, self.variables, params)

    def stack(self, params: dict[str, float]) -> Stack:
        """The parsed stack at ``params``; critical-thickness warnings are silenced
        (the search reports them as a constraint)."""
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", CriticalThicknessWarning)
            return parse_stack(self.stack_dict(params), source=self.source)

    def parameters_of(self, stack: Stack, *, source: str | None = None) -> dict[str, float]:
        """The variables' values in a stack whose layers carry the study's layer names
        (see :func:`wellwright.optimize.study.space.parameters_of`).

        Parameters
        ----------
        stack
            A stack with the study's layers.
        source
            Where the stack came from, for messages; None: the stack's own source.

        Raises
        ------
        InputError
            When a layer is missing or a value is outside its range.
        """
        return _space.parameters_of(
            self.variables, stack, layer_names=self.layer_names, source=source
        )

    def parameter_key(self, params: dict[str, Any]) -> tuple:
        """Hashable key of a parameter set (see :func:`wellwright.optimize.study.space.parameter_key`)."""
        return _space.parameter_key(self.variables, params)

    def fingerprint(self) -> str:
        """Hash of what defines the search (space, spec, constraints, sweep, model).

        A study in storage with another fingerprint was made from a different
        file; resuming it would mix incompatible trials. A robust search adds
        its objective's definition: sample count, the seed of its common
        random numbers and the growth spreads.
        """
        parts: dict[str, Any] = {
            "base": self.base,
            "variables": [v.__dict__ for v in self.variables],
            "targets": [w.__dict__ for w in self.targets],
            "objectives": [o.__dict__ for o in self.objectives],
            "constraints": repr(self.constraints),
            "sweep": self.sweep.__dict__,
        }
        if self.search.robust:
            parts["robust"] = {
                "samples": self.search.robust_samples,
                "seed": self.search.seed,
                "growth": self.reserved.get("growth", {}),
                "layer_growth": self.layer_growth,
            }
        text = json.dumps(parts, sort_keys=True, default=str)
        return hashlib.sha256(text.encode()).hexdigest()[:16]

    # ------------------------------------------------------------ scoring (wellwright.optimize.study.targets)

    def window_distances(self, metrics: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
        """Normalised distance outside each target window (0 inside, NaN for NaN)."""
        return _targets.window_distances(self.targets, metrics)

    def spec_violation(self, metrics: dict[str, np.ndarray]) -> np.ndarray:
        """How far each design is from meeting the spec; 0 when it meets it
        (see :func:`wellwright.optimize.study.targets.spec_violation`)."""
        return _targets.spec_violation(self.targets, self.objectives, metrics)

    def merit(self, metrics: dict[str, np.ndarray]) -> np.ndarray:
        """Merit of an on-spec design in [0, 1) (see :func:`wellwright.optimize.study.targets.merit`)."""
        return _targets.merit(self.targets, self.objectives, metrics)

    def single_score(self, metrics: dict[str, np.ndarray]) -> np.ndarray:
        """The scalar a single-objective search minimises
        (see :func:`wellwright.optimize.study.targets.single_score`)."""
        return _targets.single_score(self.targets, self.objectives, metrics)

    def objective_values(self, metrics: dict[str, np.ndarray]) -> np.ndarray:
        """``(n, n_objectives)`` raw objective values (see :func:`wellwright.optimize.study.targets.objective_values`)."""
        return _targets.objective_values(self.objectives, metrics)

    def constraint_values(self, stack: Stack | None, metrics: dict[str, float]) -> dict[str, float]:
        """Named constraint values of one design; > 0 means violated.

        Those of :func:`wellwright.optimize.study.targets.constraint_values`; a multi-objective
        study adds ``spec``: :meth:`spec_violation`.

        Parameters
        ----------
        stack
            The parsed design, or ``None`` when its stack was invalid.
        metrics
            Its figures of merit (NaN where there is no NDR).
        """
        out = _targets.constraint_values(self.constraints, stack, metrics)
        if self.multi_objective:
            arr = {k: np.array([metrics.get(k, np.nan)]) for k in self.metric_names}
            out["spec"] = float(self.spec_violation(arr)[0])
        return out


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
    data = read_toml(path)
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
    checks.table(data, ALLOWED_TOP_KEYS, source=source)
    for key in (*STUDY_TABLES, *RESERVED_TABLES):
        if key in data and not isinstance(data[key], dict):
            raise InputError(f"must be a table, e.g. [{key}]", source=source, key=key)

    # [calibration] from = ".../calibration.json": the calibrated model written into the stack
    data = apply_calibration(data, source=source, base_dir=base_dir)
    base, variables, layer_growth = parse_space(data, source=source)
    sweep = _parse_sweep(data.get("sweep", {}), source=source)
    device = base.get("device")
    targets, objectives = parse_targets(
        data.get("targets", {}),
        source=source,
        sweep_v=(sweep.bias_min_v, sweep.bias_max_v),
        area_um2=device.get("area_um2") if isinstance(device, dict) else None,
    )
    if not targets and not objectives:
        raise InputError(
            "needs a window for at least one figure of merit (e.g. pvcr = {min = 3}) "
            'or a maximize/minimize list (e.g. maximize = ["pvcr"])',
            source=source,
            key="targets",
        )
    constraints = parse_constraints(data.get("constraints", {}), source=source)
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
    # [growth] is a later stage's, but a bad entry must stop the run before a search is written
    growth, _ = parse_growth(
        study.reserved.get("growth"),
        study.layer_growth,
        layer_names=study.layer_names,
        source=source,
    )
    # the materials, and so the cells they grow from, are the same at every corner
    check_cells(study.stack({v.name: v.low for v in study.variables}), growth)
    # [report] and [tolerance] belong to `run`, but every command that reads the file checks them
    settings_from_tables(reserved.get("report"), reserved.get("tolerance"), source=source)
    baseline = _parse_baseline(
        data.get("search", {}).get("baseline"), study, source=source, base_dir=base_dir
    )
    study = _replace_search(study, baseline=baseline)
    if study.search.robust:
        check_robust(study)
    return study


def _replace_search(study: Study, **changes: Any) -> Study:
    return replace(study, search=replace(study.search, **changes))


def _check_corners(study: Study) -> None:
    """Parse the stack with every range at its min, and at its max, so that
    stack errors surface now, naming the layer and key."""
    for corner in ("min", "max"):
        params = {v.name: (v.low if corner == "min" else v.high) for v in study.variables}
        try:
            study.stack(params)
        except InputError as exc:
            ranged = any(exc.key == v.key and exc.layer in v.layers for v in study.variables)
            prefix = f"with every range at its {corner}: " if ranged else ""
            raise InputError(
                prefix + exc.message,
                source=study.source,
                layer=exc.layer,
                layer_name=exc.layer_name,
                key=exc.key,
            ) from None


def _int_setting(
    table: dict[str, Any], key: str, default: int, lo: int, hi: int, *, source: str, name: str
) -> int:
    return checks.whole(
        table.get(key, default), low=lo, high=hi, source=source, key=f"{name}.{key}"
    )


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
        "robust",
        "robust_samples",
    )
    checks.table(table, allowed, source=source, key="search")
    sampler = checks.choice(
        table.get("sampler", "tpe"), SAMPLERS, source=source, key="search.sampler"
    )
    study_name = table.get("study_name")
    if study_name is not None:
        checks.text(study_name, source=source, key="search.study_name")
    multivariate = checks.flag(
        table.get("multivariate", True), source=source, key="search.multivariate"
    )
    robust = checks.flag(table.get("robust", False), source=source, key="search.robust")
    return SearchSettings(
        trials=_int_setting(table, "trials", 100, 0, MAX_TRIALS, source=source, name="search"),
        sampler=sampler,
        seed=checks.seed(table.get("seed", 0), source=source, key="search.seed"),
        workers=_int_setting(table, "workers", 1, 1, MAX_WORKERS, source=source, name="search"),
        study_name=study_name,
        batch=_int_setting(table, "batch", 4, 1, 1024, source=source, name="search"),
        startup_trials=_int_setting(
            table, "startup_trials", 10, 0, MAX_TRIALS, source=source, name="search"
        ),
        multivariate=multivariate,
        top=_int_setting(table, "top", 10, 1, 10_000, source=source, name="search"),
        robust=robust,
        robust_samples=_int_setting(
            table,
            "robust_samples",
            32,
            MIN_ROBUST_SAMPLES,
            MAX_ROBUST_SAMPLES,
            source=source,
            name="search",
        ),
    )


def _parse_sweep(table: dict[str, Any], *, source: str) -> SweepSettings:
    allowed = ("bias_min_v", "bias_max_v", "points")
    checks.table(table, allowed, source=source, key="sweep")
    values = {
        key: checks.number(
            table.get(key, getattr(SweepSettings, key)),
            low=-MAX_ABS_BIAS_V,
            high=MAX_ABS_BIAS_V,
            unit="V",
            source=source,
            key=f"sweep.{key}",
        )
        for key in ("bias_min_v", "bias_max_v")
    }
    if values["bias_max_v"] <= values["bias_min_v"]:
        raise InputError(
            f"must be above bias_min_v ({values['bias_min_v']:g} V)",
            source=source,
            key="sweep.bias_max_v",
        )
    if values["bias_min_v"] < 0 < values["bias_max_v"]:  # figures of merit are of one branch
        raise InputError(
            f"{values['bias_min_v']:g} to {values['bias_max_v']:g} V spans both polarities; a "
            "study's figures of merit are those of one: give bias_min_v >= 0 (forward) or "
            "bias_max_v <= 0 (reverse), and a second study for the other",
            source=source,
            key="sweep",
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
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", CriticalThicknessWarning)
                if not path.is_file():
                    raise InputError(
                        f"baseline stack file {str(path)!r} not found; give {form}",
                        source=source,
                        key="search.baseline",
                    )
                try:
                    stack = load_stack(path)
                    out.append(study.parameters_of(stack, source=str(path)))
                except InputError as exc:  # the study file's key, then what is wrong in the stack
                    raise InputError(
                        f"baseline stack file: {exc.one_line()}",
                        source=source,
                        key="search.baseline",
                    ) from None
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
                if not is_finite_number(v) or not var.contains(float(v)):
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


# --------------------------------------------------------------------------- robust search


@dataclass(frozen=True)
class RobustPlan:
    """What a robust search needs besides the study: spreads, spec, samples, seed (plain data)."""

    settings: GrowthSettings
    per_layer: dict[str, GrowthSettings] = field(default_factory=dict)
    spec: Spec = Spec(())
    samples: int = 32
    seed: int = 0


def check_robust(study: Study) -> RobustPlan:
    """Validate what a robust search of ``study`` needs and return its plan.

    Raises
    ------
    InputError
        When the study has no target window (a yield needs one), pushes two
        or more objectives (a robust search has one objective, the yield), or
        has a bad ``[growth]`` entry (naming the key and the allowed form).
    """
    if not study.targets:
        raise InputError(
            "a robust search needs at least one window (e.g. pvcr = {min = 3}) for the yield",
            source=study.source,
            key="targets",
        )
    if study.multi_objective:
        raise InputError(
            "a robust search has one objective, the yield; list at most one figure of merit "
            "in maximize/minimize (it breaks ties between equal yields)",
            source=study.source,
            key="search.robust",
        )
    settings, per_layer = parse_growth(
        study.reserved.get("growth"),
        study.layer_growth,
        layer_names=study.layer_names,
        source=study.source,
    )
    return RobustPlan(
        settings=settings,
        per_layer=per_layer,
        spec=Spec.from_windows(study.targets),
        samples=study.search.robust_samples,
        seed=study.search.seed,
    )
