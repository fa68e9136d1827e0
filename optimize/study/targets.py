"""The spec of a study: target windows, objectives to push, constraints, and how designs are scored.

- ``[targets]``: a window per figure of merit (``{min, max}`` or
  ``{target, tolerance}``) and ``maximize`` / ``minimize`` lists (two or
  more entries: a Pareto search); currents at a stated bias
  (:data:`AT_BIAS_TARGETS`: ``current_density_at_bias = {bias_v = 0.3, min = ..,
  max = ..}`` in A/cm^2, ``current_at_bias_ma`` the same for a mesa of the stack's
  ``[device] area_um2``, in mA; a list of such tables for several biases), each a
  window on the metric :func:`wellwright.physics.iv.at_bias_key` (or
  :func:`~wellwright.physics.iv.at_bias_current_key`) of that bias;
- ``[constraints]``: ``max_active_thickness_nm``, ``critical_thickness`` and
  figure-of-merit bounds, each a named constraint value (> 0 violated).

How a design is scored (what the search minimises or pushes) is documented
in :func:`spec_violation`, :func:`merit`, :func:`single_score` and
:func:`constraint_values`; :class:`Spec` is the plain pass/fail form of the
windows used by the growth-tolerance analyses.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from wellwright.optimize.shared import names
from wellwright.optimize.study.space import is_finite_number
from wellwright.physics import checks, materials
from wellwright.physics.errors import InputError
from wellwright.physics.iv import METRIC_NAMES, at_bias_current_key, at_bias_key
from wellwright.physics.stack import Stack

__all__ = [
    "Window",
    "Objective",
    "Constraints",
    "Spec",
    "NAN_VIOLATION",
    "DEFAULT_REFERENCE",
    "window_distances",
    "window_report",
    "spec_violation",
    "merit",
    "single_score",
    "objective_values",
    "constraint_values",
    "critical_thickness_excess",
    "parse_targets",
    "parse_constraints",
    "AT_BIAS_TARGETS",
    "at_bias_v",
]

#: Spec violation counted for each figure of merit that is NaN (no NDR in the
#: sweep): larger than log1p of any plausible miss (e^10 ~ 2e4 window widths).
NAN_VIOLATION = 10.0
#: Scale of each figure of merit used only to spread a pushed objective over
#: (0, 1) when the spec gives no window for it (ordering is unaffected): the
#: typical magnitudes of the names table (common practice).
DEFAULT_REFERENCE = {k: abs(q.typical) for k, q in names.QUANTITIES.items()}


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
class Spec:
    """Windows ``metric -> (low, high)`` a sample must meet (``-inf``/``inf`` when open).

    The plain pass/fail form of a study's ``[targets]``: a sample passes when
    every figure of merit named there lies in its window (bounds included);
    NaN (no NDR in the sweep) misses.
    """

    windows: tuple[tuple[str, float, float], ...]

    @classmethod
    def from_study(cls, study: Any) -> Spec:
        """The study's ``[targets]`` windows (objectives to push are not part of the spec)."""
        return cls.from_windows(study.targets)

    @classmethod
    def from_windows(cls, windows: Sequence[Window]) -> Spec:
        return cls(tuple((w.metric, float(w.low), float(w.high)) for w in windows))

    @property
    def at_bias_v(self) -> tuple[float, ...]:
        """Biases, V, at which the spec asks for a current (every sweep must compute them:
        ``sweep(..., at_bias_v=...)``)."""
        return at_bias_v([name for name, _, _ in self.windows])

    def misses(self, metrics: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
        """Per window, ``(n,)`` True where the sample misses it (NaN misses)."""
        return {name: ~inside(metrics[name], lo, hi) for name, lo, hi in self.windows}

    def passes(self, metrics: dict[str, np.ndarray]) -> np.ndarray:
        n = len(next(iter(metrics.values())))
        ok = np.ones(n, bool)
        for miss in self.misses(metrics).values():
            ok &= ~miss
        return ok


def inside(values: Any, low: float, high: float) -> np.ndarray:
    """``low <= values <= high`` elementwise; NaN is outside.

    Parameters
    ----------
    values
        Values to test (array-like).
    low, high
        Bounds, included; ``-inf``/``inf`` when open.
    """
    v = np.asarray(values, float)
    with np.errstate(invalid="ignore"):
        return (v >= low) & (v <= high)


# --------------------------------------------------------------------------- scoring


def window_distances(
    targets: Sequence[Window], metrics: dict[str, np.ndarray]
) -> dict[str, np.ndarray]:
    """Normalised distance outside each target window (0 inside, NaN for NaN).

    Parameters
    ----------
    targets
        The target windows.
    metrics
        Figures of merit, name -> array.
    """
    return {w.metric: w.distance(metrics[w.metric]) for w in targets}


def window_report(
    windows: Sequence[Window] | Sequence[tuple[str, float, float]],
    metrics: Mapping[str, Any],
) -> list[dict[str, Any]]:
    """How one design stands against each window of a spec, in the metric's trade unit.

    The one place that phrases "misses X by Y" (the
    ``run`` command's closest-design line and the tolerance analysis use it).

    Parameters
    ----------
    windows
        :class:`Window` or ``(metric, low, high)`` tuples (the :class:`Spec` form).
    metrics
        Each metric's value (None or NaN: no NDR in the sweep).

    Returns
    -------
    list of dict
        Per window: ``metric``, ``value``, ``low``/``high`` (None when open),
        ``inside`` (bool), ``bound`` (the nearest bound), ``side`` (``below``,
        ``above``, ``inside`` or ``none`` for a missing value), ``distance``
        (outside: how far beyond the bound, in the metric's own unit; 0 inside),
        ``margin`` (inside: how far from the nearest bound; 0 outside) and
        ``text`` (words and trade units from
        :mod:`wellwright.optimize.shared.names`, e.g. "peak current density
        174.3 kA/cm², above the maximum 120.0 kA/cm² by 54.3 kA/cm²").
    """
    out = []
    for w in windows:
        metric, low, high = (w.metric, w.low, w.high) if isinstance(w, Window) else w
        raw = metrics.get(metric)
        value = None if raw is None or not math.isfinite(float(raw)) else float(raw)
        rec: dict[str, Any] = {
            "metric": metric,
            "value": value,
            "low": low if math.isfinite(low) else None,
            "high": high if math.isfinite(high) else None,
        }
        fmt = functools.partial(names.format_value, metric, with_unit=True)
        what = names.words(metric)
        if value is None:
            rec.update(inside=False, bound=None, side="none", distance=None, margin=0.0)
            rec["text"] = f"{what}: none (no NDR in the sweep)"
        elif low <= value <= high:
            bound = low if value - low <= high - value else high
            kind = "minimum" if bound == low else "maximum"
            margin = abs(value - bound)
            rec.update(inside=True, bound=bound, side="inside", distance=0.0, margin=margin)
            rec["text"] = f"{what} {fmt(value)}, {fmt(margin)} inside the {kind} {fmt(bound)}"
        else:
            bound = low if value < low else high
            side = "below" if value < low else "above"
            kind = "minimum" if value < low else "maximum"
            distance = abs(value - bound)
            rec.update(inside=False, bound=bound, side=side, distance=distance, margin=0.0)
            rec["text"] = f"{what} {fmt(value)}, {side} the {kind} {fmt(bound)} by {fmt(distance)}"
        out.append(rec)
    return out


def spec_violation(
    targets: Sequence[Window], objectives: Sequence[Objective], metrics: dict[str, np.ndarray]
) -> np.ndarray:
    """How far each design is from meeting the spec; 0 when it meets it.

    Parameters
    ----------
    targets
        The target windows.
    objectives
        The objectives (their figures add the NaN penalty too).
    metrics
        Figures of merit, name -> array over the designs.

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
    for w in targets:
        d = w.distance(metrics[w.metric])
        total += np.where(np.isnan(d), NAN_VIOLATION, np.log1p(np.nan_to_num(d)))
    for name in {o.metric for o in objectives} - {w.metric for w in targets}:
        total += np.where(np.isnan(metrics[name]), NAN_VIOLATION, 0.0)
    return total


def merit(
    targets: Sequence[Window], objectives: Sequence[Objective], metrics: dict[str, np.ndarray]
) -> np.ndarray:
    """Merit of an on-spec design in [0, 1) for the single-objective score.

    Parameters
    ----------
    targets
        The target windows.
    objectives
        At most one objective.
    metrics
        Figures of merit, name -> array over the designs.

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
    if objectives:
        (obj,) = objectives
        m = np.clip(np.nan_to_num(np.asarray(metrics[obj.metric], float)), 0.0, None)
        ref = _reference(targets, obj.metric)
        return m / (m + ref) if obj.direction == "maximize" else ref / (m + ref)
    two = [w for w in targets if w.two_sided]
    if not two:
        return np.zeros(n)
    parts = [
        1.0 - np.minimum(1.0, np.abs(np.nan_to_num(metrics[w.metric]) - w.reference) / w.scale)
        for w in two
    ]
    return np.mean(parts, axis=0)


def _reference(targets: Sequence[Window], metric: str) -> float:
    for w in targets:
        if w.metric == metric and w.reference > 0:
            return abs(w.reference)
    return DEFAULT_REFERENCE.get(metric, 1.0)


def single_score(
    targets: Sequence[Window], objectives: Sequence[Objective], metrics: dict[str, np.ndarray]
) -> np.ndarray:
    """The scalar a single-objective search minimises.

    ``spec_violation`` (> 0) for an off-spec design, ``-merit`` (in
    (-1, 0]) for a design that meets the spec: every on-spec design scores
    below every off-spec one, off-spec designs are ordered by how far off
    they are, on-spec designs by the objective.

    Parameters
    ----------
    targets
        The target windows.
    objectives
        At most one objective.
    metrics
        Figures of merit, name -> array over the designs.
    """
    v = spec_violation(targets, objectives, metrics)
    return np.where(v > 0, v, -merit(targets, objectives, metrics))


def objective_values(objectives: Sequence[Objective], metrics: dict[str, np.ndarray]) -> np.ndarray:
    """``(n, n_objectives)`` raw objective values for a multi-objective search.

    NaN (no NDR) becomes the worst value (``-inf`` to maximise, ``inf`` to
    minimise); such designs are off-spec and ranked by the ``spec``
    constraint anyway.

    Parameters
    ----------
    objectives
        The objectives, one column each.
    metrics
        Figures of merit, name -> array over the designs.
    """
    cols = []
    for o in objectives:
        m = np.asarray(metrics[o.metric], float)
        worst = -np.inf if o.direction == "maximize" else np.inf
        cols.append(np.where(np.isnan(m), worst, m))
    return np.stack(cols, axis=1)


def constraint_values(
    constraints: Constraints, stack: Stack | None, metrics: dict[str, float]
) -> dict[str, float]:
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
      thickness from :func:`wellwright.physics.materials.critical_thickness_nm`
      (Matthews and Blakeslee, J. Cryst. Growth 27, 118 (1974)); -1 if no
      layer is strained.
    - ``metric:<name>``: :meth:`Window.margin` of the bound (1 if NaN).
    - multi-objective studies add ``spec``: :func:`spec_violation`.
    """
    c = constraints
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


def parse_window(value: Any, *, source: str, key: str, metric: str) -> Window:
    """The window of ``metric`` given as ``{min, max}`` (either may be left out)
    or ``{target, tolerance}``.

    Parameters
    ----------
    value
        The window's table from the study file.
    source
        File name for messages.
    key
        The key in the file, for messages.
    metric
        The figure of merit the window bounds.
    """
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
        if not is_finite_number(v):
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


#: ``[targets]`` keys of a current at a stated bias -> the metric key of that bias: the
#: current density in A/cm^2, or the current in mA of a mesa of ``[device] area_um2``.
AT_BIAS_TARGETS = {
    "current_density_at_bias": at_bias_key,
    "current_at_bias_ma": at_bias_current_key,
}
AT_BIAS_FORM = (
    "{bias_v = .., min = .., max = ..} (either bound may be left out, or target and "
    "tolerance instead), or a list of such tables for several biases"
)


def parse_at_bias(
    value: Any,
    *,
    source: str,
    key: str,
    sweep_v: tuple[float, float] = (-math.inf, math.inf),
    area_um2: float | None = None,
) -> list[Window]:
    """Windows of a current at stated biases: one table or a list of tables (see module).

    Each ``bias_v`` is kept to 6 significant digits (it names the metric, e.g.
    ``current_density_at_0.3_v_a_cm2``); the same bias twice is refused.

    Parameters
    ----------
    value
        One table or a list of tables, each with ``bias_v`` and a window.
    source
        File name for messages.
    key
        ``current_density_at_bias`` (A/cm^2) or ``current_at_bias_ma`` (mA).
    sweep_v
        First and last bias of the sweep, V; each ``bias_v`` must lie within.
    area_um2
        Mesa area, um^2; the mA form needs it.
    """
    unit = "A/cm^2" if key == "current_density_at_bias" else "mA"
    if unit == "mA" and area_um2 is None:
        raise InputError(
            "a current in mA needs the mesa area: add [device] area_um2 to the stack, "
            "or give current_density_at_bias in A/cm^2",
            source=source,
            key=f"targets.{key}",
        )
    tables = value if isinstance(value, list) else [value]
    if not tables:
        raise InputError(f"empty list; give {AT_BIAS_FORM}", source=source, key=f"targets.{key}")
    out: list[Window] = []
    for i, table in enumerate(tables):
        where = f"targets.{key}[{i + 1}]" if isinstance(value, list) else f"targets.{key}"
        checks.table(
            table,
            ("bias_v", "min", "max", "target", "tolerance"),
            hint=f"; a target here is {AT_BIAS_FORM}",
            source=source,
            key=where,
        )
        if "bias_v" not in table:
            raise InputError(
                f"needs bias_v, the bias in V at which the current is computed; {AT_BIAS_FORM}",
                source=source,
                key=where,
            )
        bias = checks.number(table["bias_v"], unit="V", source=source, key=f"{where}.bias_v")
        if not sweep_v[0] <= bias <= sweep_v[1]:
            raise InputError(
                f"bias_v {bias:g} V outside the sweep [{sweep_v[0]:g}, {sweep_v[1]:g}] V "
                "([sweep] bias_min_v, bias_max_v)",
                source=source,
                key=f"{where}.bias_v",
            )
        if not set(table) & {"min", "max", "target", "tolerance"}:
            raise InputError(
                f"needs min and/or max in {unit} (or target and tolerance); {AT_BIAS_FORM}",
                source=source,
                key=where,
            )
        metric = AT_BIAS_TARGETS[key](bias)
        if any(w.metric == metric for w in out):
            raise InputError(
                f"bias {bias:g} V is given twice", source=source, key=f"{where}.bias_v"
            )
        rest = {k: v for k, v in table.items() if k != "bias_v"}
        out.append(parse_window(rest, source=source, key=where, metric=metric))
    return out


def at_bias_v(metrics: Sequence[str]) -> tuple[float, ...]:
    """The stated biases, V, of the currents at a stated bias among the metric keys
    ``metrics`` (sorted, unique)."""
    found = set()
    for metric in metrics:
        at = names.AT_BIAS_KEY.match(metric)
        if at is not None:
            found.add(float(at["bias"]))
    return tuple(sorted(found))


def _metric_key_error(
    key: str, *, source: str, table: str, extra: tuple[str, ...] = ()
) -> InputError:
    allowed = ", ".join((*METRIC_NAMES, *extra))
    return InputError(
        f"unknown figure of merit; allowed: {allowed}", source=source, key=f"{table}.{key}"
    )


def parse_targets(
    table: dict[str, Any],
    *,
    source: str,
    sweep_v: tuple[float, float] = (-math.inf, math.inf),
    area_um2: float | None = None,
) -> tuple[tuple[Window, ...], tuple[Objective, ...]]:
    """The ``[targets]`` windows and objectives.

    Parameters
    ----------
    table
        The ``[targets]`` table of the study file.
    source
        File name for messages.
    sweep_v
        First and last bias of the sweep, V: checks the currents at a stated bias.
    area_um2
        The stack's mesa area, um^2: checks the currents at a stated bias in mA.
    """
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
        if key in AT_BIAS_TARGETS:
            targets.extend(
                parse_at_bias(value, source=source, key=key, sweep_v=sweep_v, area_um2=area_um2)
            )
            continue
        if key not in METRIC_NAMES:
            raise _metric_key_error(
                key,
                source=source,
                table="targets",
                extra=("maximize", "minimize", *AT_BIAS_TARGETS),
            )
        targets.append(parse_window(value, source=source, key=f"targets.{key}", metric=key))
    return tuple(targets), tuple(objectives)


def parse_constraints(table: dict[str, Any], *, source: str) -> Constraints:
    """The ``[constraints]`` table: the active thickness limit, the critical-thickness
    check and windows on figures of merit.

    Parameters
    ----------
    table
        The ``[constraints]`` table of the study file.
    source
        File name for messages.
    """
    max_t = None
    critical = False
    bounds = []
    for key, value in table.items():
        if key == "max_active_thickness_nm":
            if not is_finite_number(value) or value <= 0:
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
            bounds.append(parse_window(value, source=source, key=f"constraints.{key}", metric=key))
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
