"""I-V sweeps and their figures of merit.

The peak is the first local maximum of ``J(V)`` along increasing ``|V|``
that is followed by negative differential resistance (the current falls by
more than ``NDR_DROP`` of the peak before rising above it again); the
valley is the lowest current after it, before the current first exceeds
the peak again or the sweep ends. Both are then located more finely than
the sweep grid, so that they do not depend on it: nine extra biases across
the neighbouring grid points (one batched call for peaks and valleys of
every stack), then the current at the vertex of a parabola through the
three best points (one more call), repeated on a bracket four times
narrower until the vertex's current agrees with the parabola (a smooth top:
one round; a peak at the edge of a current cliff: a few); the better of the
vertex and the best sampled point is reported, so the figures of merit are
always computed currents, never extrapolations.

A valley that falls on the last point of the sweep is reported there; the
true valley can only be lower, so the PVCR is then a lower bound.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .bands import linear_profile, profile_from_potential
from .current import EnergyGrid, current_density_a_cm2
from .device import DEVICE_METRIC_NAMES, device_figures
from .electrostatics import self_consistent_profile, solve_stack_poisson
from .resonances import parabola_through
from .scattering import ScatteringParameters
from .stack import LayerTable, ModelOptions, Stack

__all__ = [
    "METRIC_NAMES",
    "IVCurves",
    "sweep",
    "stack_iv",
    "band_profile",
    "current_at_bias",
    "locate_peak_valley",
    "external_bias_v",
    "HysteresisCurves",
    "sweep_hysteresis",
    "scattering_parameters",
]

METRIC_NAMES = (
    "peak_current_density_a_cm2",
    "peak_voltage_v",
    "valley_current_density_a_cm2",
    "valley_voltage_v",
    "pvcr",
    "delta_current_density_a_cm2",
    "delta_voltage_v",
    *DEVICE_METRIC_NAMES,
)
#: Smallest relative current drop after a maximum that counts as NDR.
NDR_DROP = 0.02


@dataclass(frozen=True)
class IVCurves:
    """I-V curves of a batch of stacks on a common bias grid.

    Attributes
    ----------
    bias_v
        ``(n_biases,)`` applied bias across the device between the contacts.
    current_density_a_cm2
        ``(n_stacks, n_biases)``.
    metrics
        Each of :data:`METRIC_NAMES` -> ``(n_stacks,)``; NaN where there is no NDR in the sweep.
    """

    bias_v: np.ndarray
    current_density_a_cm2: np.ndarray
    metrics: dict[str, np.ndarray] = field(default_factory=dict)

    def metrics_of(self, i: int = 0) -> dict[str, float | None]:
        """Metrics of stack ``i`` as plain floats, ``None`` for NaN (JSON-ready)."""
        return {
            k: (None if not np.isfinite(v[i]) else float(v[i])) for k, v in self.metrics.items()
        }


def band_profile(table: LayerTable, bias_v, *, model: ModelOptions = ModelOptions()):
    """Band profile at each bias from the electrostatics model ``model.electrostatics`` selects.

    :func:`physics.bands.linear_profile` for ``"linear"``,
    :func:`physics.electrostatics.self_consistent_profile` for ``"self-consistent"``;
    biases ``(n_biases,)`` or ``(n_stacks, n_biases)``.
    """
    if model.electrostatics == "self-consistent":
        return self_consistent_profile(table, bias_v, slice_nm=model.slice_nm)
    return linear_profile(table, bias_v, slice_nm=model.slice_nm)


def scattering_parameters(model: ModelOptions) -> ScatteringParameters | None:
    """Settings of the scattering-assisted channel ``model`` asks for; ``None`` for coherent transport."""
    if model.transport == "coherent":
        return None
    return ScatteringParameters(
        roughness_height_nm=model.roughness_height_nm,
        roughness_length_nm=model.roughness_length_nm,
    )


def current_at_bias(
    table: LayerTable,
    bias_v: np.ndarray,
    *,
    model: ModelOptions = ModelOptions(),
    grid: EnergyGrid = EnergyGrid(),
) -> np.ndarray:
    """Current density, A/cm^2, ``(n_stacks, n_biases)`` for biases ``(n_biases,)`` or ``(n_stacks, n_biases)``.

    The band profile comes from the model ``model.electrostatics`` selects
    (:func:`physics.bands.linear_profile` or
    :func:`physics.electrostatics.self_consistent_profile`); the scattering
    broadening ``model.broadening_mev`` and, with ``model.transport =
    "scattering-assisted"``, the scattering-assisted channel
    (:mod:`physics.scattering`) are applied in the kernel.
    """
    profile = band_profile(table, bias_v, model=model)
    return current_density_a_cm2(
        profile,
        table=table,
        bias_v=_bias_2d(bias_v, table.n_stacks),
        grid=grid,
        broadening_ev=1e-3 * model.broadening_mev,
        scattering=scattering_parameters(model),
    )


def _bias_2d(bias_v, n_stacks: int) -> np.ndarray:
    bias = np.asarray(bias_v, float)
    return np.broadcast_to(
        bias if bias.ndim == 2 else np.atleast_1d(bias)[None, :],
        (n_stacks, np.shape(np.atleast_1d(bias))[-1]),
    )


def locate_peak_valley(bias_v: np.ndarray, current: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Grid indices of the first NDR peak and its valley along increasing ``|V|``.

    Parameters
    ----------
    bias_v
        ``(n,)`` increasing biases on one side of zero (all >= 0 or all <= 0).
    current
        ``(n_stacks, n)`` current magnitudes.

    Returns
    -------
    peak, valley
        ``(n_stacks,)`` indices, -1 where there is no NDR.
    """
    n_stacks, n = current.shape
    peak = np.full(n_stacks, -1)
    valley = np.full(n_stacks, -1)
    for s in range(n_stacks):  # per stack: short loop over a sweep, not over the physics
        j = current[s]
        for i in range(1, n - 1):
            if not (j[i] >= j[i - 1] and j[i] > j[i + 1]):
                continue
            after = j[i + 1 :]
            above = np.nonzero(after > j[i])[0]
            stop = above[0] if above.size else after.size
            if stop == 0:
                continue
            k = int(np.argmin(after[:stop]))
            if after[k] < (1.0 - NDR_DROP) * j[i]:
                peak[s], valley[s] = i, i + 1 + k
                break
    return peak, valley


#: Peak and valley refinement: biases per round, most rounds, and when a round ends it: the
#: current at the parabola's vertex within this fraction of the parabola's own value (the
#: extremum is resolved), or the bias bracket narrower than this, V.
REFINE_POINTS = 9
REFINE_MAX_ROUNDS = 8
REFINE_RELATIVE_TOLERANCE = 1e-3
REFINE_BIAS_TOLERANCE_V = 2e-5


def _refine(table, model, grid, center_v, half_span_v, sign):
    """Refine extrema of ``sign * J``: maxima where ``sign > 0``, minima where ``sign < 0``.

    Each round samples :data:`REFINE_POINTS` biases across ``center +- half``
    (one batched call for every extremum still open), fits a parabola through
    the best sample and its neighbours and computes the current at its vertex
    (one more call). An extremum is resolved when that current agrees with
    the parabola's value to :data:`REFINE_RELATIVE_TOLERANCE` (the top is
    smooth on the sampled scale) or the bracket is below
    :data:`REFINE_BIAS_TOLERANCE_V`; otherwise the next round zooms onto the
    best point with the sample spacing as its half span. A peak on the edge
    of a current cliff (self-consistent charge, narrow lines) therefore takes
    a few rounds, a smooth one only one. The better of the vertex and the
    best sample is kept, so the result is always a computed current, never
    an extrapolation (a parabola overshoots at a kink). A best sample on the
    bracket's edge moves the bracket without narrowing it.
    """
    center = np.array(center_v, float)
    half = np.array(half_span_v, float)
    best = np.full(center.size, -np.inf)
    open_ = np.ones(center.size, bool)
    offsets = np.linspace(-1.0, 1.0, REFINE_POINTS)
    for _ in range(REFINE_MAX_ROUNDS):
        idx = np.nonzero(open_)[0]
        if idx.size == 0:
            break
        sub, sgn, rows = table.take(idx), sign[idx], np.arange(idx.size)
        v = center[idx, None] + half[idx, None] * offsets
        j = sgn[:, None] * current_at_bias(sub, v, model=model, grid=grid)
        top = np.argmax(j, axis=1)
        pick = np.clip(top, 1, REFINE_POINTS - 2)[:, None] + np.array([-1, 0, 1])
        x3 = v[rows[:, None], pick]
        offset, curvature, lowest = parabola_through(x3, -j[rows[:, None], pick])
        vertex = x3[:, 1] + offset
        j_vertex = sgn * current_at_bias(sub, vertex[:, None], model=model, grid=grid)[:, 0]
        better = j_vertex >= j[rows, top]
        center[idx] = np.where(better, vertex, v[rows, top])
        best[idx] = np.maximum(j_vertex, j[rows, top])
        edge = (top == 0) | (top == REFINE_POINTS - 1)
        half[idx] = np.where(edge, half[idx], half[idx] * 2.0 / (REFINE_POINTS - 1))
        smooth = (curvature > 0) & (
            np.abs(j_vertex + lowest) <= REFINE_RELATIVE_TOLERANCE * np.abs(best[idx])
        )
        open_[idx] = ~((smooth & ~edge) | (half[idx] < REFINE_BIAS_TOLERANCE_V))
    return center, sign * best


def sweep(
    table: LayerTable,
    bias_v: np.ndarray,
    *,
    model: ModelOptions = ModelOptions(),
    grid: EnergyGrid = EnergyGrid(),
    refine: bool = True,
    series_resistance_ohm_um2: float | np.ndarray = 0.0,
) -> IVCurves:
    """I-V sweep of every stack in ``table`` with figures of merit.

    Parameters
    ----------
    table
        Layers of ``n_stacks`` stacks (same layer count).
    bias_v
        ``(n_biases,)`` biases, sorted increasing. Metrics are taken on the
        forward branch (``V > 0``) when it has at least three points, else on
        the reverse branch with magnitudes.
    model
        Model options (slice width; electrostatics and broadening as selected).
    grid
        Adaptive energy grid settings.
    refine
        Locate peak and valley more finely than the sweep grid.
    series_resistance_ohm_um2
        Series resistance times area, scalar or ``(n_stacks,)``; enters only
        the cutoff frequency (:mod:`wellwright.physics.device`).
    """
    bias = np.asarray(bias_v, float)
    if bias.ndim != 1 or bias.size < 1 or np.any(np.diff(bias) <= 0):
        raise ValueError("bias_v must be a 1-D strictly increasing array")
    j = current_at_bias(table, bias, model=model, grid=grid)
    metrics = {name: np.full(table.n_stacks, np.nan) for name in METRIC_NAMES}

    forward = bias >= 0
    if np.count_nonzero(bias > 0) >= 3:
        sel, sign = np.nonzero(forward)[0], 1.0
    elif np.count_nonzero(bias < 0) >= 3:
        sel, sign = np.nonzero(~forward)[0][::-1], -1.0
    else:
        return IVCurves(bias, j, metrics)
    v_side = bias[sel]
    j_side = sign * j[:, sel]
    ip, iv = locate_peak_valley(np.abs(v_side), j_side)
    has = ip >= 0
    if not np.any(has):
        return IVCurves(bias, j, metrics)

    rows = np.nonzero(has)[0]
    vp, jp = v_side[ip[rows]], j_side[rows, ip[rows]]
    vv, jv = v_side[iv[rows]], j_side[rows, iv[rows]]
    if refine:
        step = np.abs(np.diff(v_side)).max() if v_side.size > 1 else 0.0
        sub = table.take(rows)
        n = rows.size
        extremum = np.concatenate([np.ones(n), -np.ones(n)])  # maximise J at peaks, -J at valleys
        c, y = _refine(
            LayerTable.concatenate([sub, sub]),
            model,
            grid,
            np.concatenate([vp, vv]),
            np.full(2 * n, step),
            extremum * sign,
        )
        y = sign * y  # back to magnitudes on this branch
        vp, jp = c[:n], np.maximum(y[:n], jp)
        interior = iv[rows] < v_side.size - 1  # a valley on the sweep's last point stays there
        vv = np.where(interior, c[n:], vv)
        jv = np.where(interior, np.minimum(y[n:], jv), jv)
    metrics["peak_current_density_a_cm2"][rows] = jp
    metrics["peak_voltage_v"][rows] = vp
    metrics["valley_current_density_a_cm2"][rows] = jv
    metrics["valley_voltage_v"][rows] = vv
    metrics["pvcr"][rows] = jp / np.where(jv > 0, jv, np.nan)
    metrics["delta_current_density_a_cm2"][rows] = jp - jv
    metrics["delta_voltage_v"][rows] = np.abs(vv - vp)
    metrics.update(
        device_figures(
            table,
            np.abs(v_side),
            j_side,
            metrics,
            peak_profile=band_profile(table.take(rows), vp[:, None], model=model),
            rows=rows,
            series_resistance_ohm_um2=series_resistance_ohm_um2,
        )
    )
    return IVCurves(bias, j, metrics)


def stack_iv(
    stack: Stack, bias_v: np.ndarray, *, grid: EnergyGrid = EnergyGrid(), refine: bool = True
) -> IVCurves:
    """I-V sweep of one stack (``n_stacks = 1``) with the stack's own model options."""
    return sweep(
        stack.table(),
        bias_v,
        model=stack.model,
        grid=grid,
        refine=refine,
        series_resistance_ohm_um2=stack.device.series_resistance_ohm_um2,
    )


def external_bias_v(
    bias_v: np.ndarray, current_density_a_cm2: np.ndarray, series_resistance_ohm_um2: float
) -> np.ndarray:
    """Terminal bias with a series resistance: ``V_ext = V + J R`` (R in ohm um^2, J in A/cm^2)."""
    return np.asarray(bias_v) + np.asarray(current_density_a_cm2) * series_resistance_ohm_um2 * 1e-8


@dataclass(frozen=True)
class HysteresisCurves:
    """Currents of an up sweep and a down sweep on the same biases (``(n_stacks, n_biases)`` each)."""

    bias_v: np.ndarray
    up_a_cm2: np.ndarray
    down_a_cm2: np.ndarray


def sweep_hysteresis(
    table: LayerTable, bias_v: np.ndarray, *, model=None, grid=None
) -> HysteresisCurves:
    """Up and down bias sweeps, each bias started from the previous bias's potential.

    With ``model.electrostatics == "linear"`` both branches are the same
    curve. With the self-consistent model, the potential and the well charge
    of the previous bias start each solve, so where the solution is not unique
    (charge-induced bistability) the two branches can differ.
    """
    model = ModelOptions() if model is None else model
    grid = EnergyGrid() if grid is None else grid
    bias = np.asarray(bias_v, float)
    if bias.ndim != 1 or np.any(np.diff(bias) <= 0):
        raise ValueError("bias_v must be a 1-D strictly increasing array")
    if model.electrostatics != "self-consistent":
        j = current_at_bias(table, bias, model=model, grid=grid)
        return HysteresisCurves(bias, j, j.copy())
    branches = []
    for order in (np.arange(bias.size), np.arange(bias.size)[::-1]):
        previous, previous_well = None, None
        potentials = [None] * bias.size
        for i in order:
            g, sol = solve_stack_poisson(
                table,
                bias[i : i + 1],
                slice_nm=model.slice_nm,
                initial_ev=previous,
                initial_well_cm2=previous_well,
            )
            previous, previous_well = sol.potential_ev, sol.well_sheet_cm2
            potentials[i] = sol.potential_ev
        profile = profile_from_potential(table, g, np.concatenate(potentials, axis=1))
        branches.append(
            current_density_a_cm2(
                profile,
                table=table,
                bias_v=np.broadcast_to(bias, (table.n_stacks, bias.size)),
                grid=grid,
                broadening_ev=1e-3 * model.broadening_mev,
                scattering=scattering_parameters(model),
            )
        )
    return HysteresisCurves(bias, branches[0], branches[1])
