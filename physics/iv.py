"""I-V sweeps and their figures of merit.

The peak is the first local maximum of ``J(V)`` along increasing ``|V|``
that is followed by clear negative differential resistance (the current falls
by more than ``CLEAR_NDR_DROP``, 10 %, of the peak before rising above it
again); where no maximum is, the first one followed by a fall of more than
``NDR_DROP`` (2 %), a weak NDR. The valley is the lowest current after the
peak, before the current first exceeds the peak again or the sweep ends.
Both are then located more finely than
the sweep grid, so that they do not depend on it: nine extra biases across
the neighbouring grid points (one batched call for peaks and valleys of
every stack), then the current at the vertex of a parabola through the
three best points (one more call), repeated on a bracket four times
narrower until the vertex's current agrees with the parabola (a smooth top:
one round; a peak at the edge of a current cliff: a few); the better of the
vertex and the best sampled point is reported, so the figures of merit are
always computed currents, never extrapolations.

A valley that falls on the last point of the sweep is not a valley, nor one
after which the current rises by no more than ``CLEAR_NDR_DROP`` (10 %) of the
valley's current before the sweep ends (a bump of the floor, a flat floor): the
sweep of that stack (only of the stacks that need it) goes on beyond its end
in steps of the sweep's own spacing, :data:`VALLEY_EXTENSION_CHUNK` biases
per batched call, until the current rises by more than that, at most to
:data:`VALLEY_EXTENSION_FACTOR` times the end bias. Where the current still
falls there (or falls up to the last point a self-consistent solve beyond the end
reached), the valley is reported at that point and ``valley_bounded_by_sweep`` is 1: the
true valley lies beyond it, so ``Jv`` is an upper bound, ``Vv``, ``Delta V``
and the PVCR lower bounds, and every figure of :data:`BOUNDED_BY_SWEEP` is
derived from a bound. The extra points are kept in
:attr:`IVCurves.extension_bias_v` / :attr:`IVCurves.extension_a_cm2`.

With the self-consistent model a resonance's NDR can be narrower than the sweep's
spacing where a state leaves the emitter's supply window: the well's charge then falls.
Where it falls below :data:`HIDDEN_CHARGE_DROP` of its largest value since the sweep's
start or the last such fall, before the peak found (or anywhere, where none was), the
current is computed at :data:`REFINE_POINTS` biases between the last point before the fall
and the charge's low point after it, and as many between that and the next point; where
those show a clear NDR peak there, that stack is swept again with them, and its figures of
merit and the new points (kept as extension points) replace its own.

Currents at stated biases (``sweep(..., at_bias_v=...)``, the circuit
designer's ``current_density_at_bias`` targets) are computed at those biases
exactly, one more batched call of the same physics; they are never
interpolated on the sweep grid.
"""

from __future__ import annotations

import functools
import warnings
from collections.abc import Sequence
from dataclasses import dataclass, field, replace

import numpy as np

from .bands import linear_profile, profile_from_potential
from .current import (
    LINE_WIDTH_FLOOR_EV,
    EnergyGrid,
    GridAccuracyWarning,
    current_density_a_cm2,
    resolved_current_floor_a_cm2,
)
from .device import DEVICE_METRIC_NAMES, device_figures
from .electrostatics import self_consistent_profile, solve_stack_poisson
from .islands import area_weight_matrix, island_mixture, mixed_current
from .resonances import parabola_through
from .scattering import ScatteringParameters
from .stack import LayerTable, ModelOptions, Stack

__all__ = [
    "metrics_branch",
    "METRIC_NAMES",
    "IVCurves",
    "sweep",
    "stack_iv",
    "island_table",
    "band_profile",
    "current_at_bias",
    "current_of_profile",
    "locate_peak_valley",
    "higher_peak_beyond_valley",
    "external_bias_v",
    "HysteresisCurves",
    "sweep_hysteresis",
    "scattering_parameters",
    "BOUNDED_BY_SWEEP",
    "VALLEY_BOUNDED",
    "at_bias_key",
    "at_bias_current_key",
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
    "valley_bounded_by_sweep",
)
#: The flag of a valley the sweep (with its extension) did not reach: 1.0 bounded, 0.0 found,
#: NaN where there is no NDR.
VALLEY_BOUNDED = "valley_bounded_by_sweep"
#: Figures of merit computed from the valley (its bias or current) -> what the reported value
#: is where :data:`VALLEY_BOUNDED` is 1: ``"lower"`` (the true value is at least this),
#: ``"upper"`` (at most this) or ``""`` (derived from a bound, either way). The mesa's
#: quantities follow their per-area figures.
BOUNDED_BY_SWEEP = {
    "valley_current_density_a_cm2": "upper",
    "valley_voltage_v": "lower",
    "pvcr": "lower",
    "delta_current_density_a_cm2": "lower",
    "delta_voltage_v": "lower",
    "rf_power_density_w_cm2": "lower",
    "ndr_conductance_s_cm2": "upper",  # the steepest slope seen; the true one may be steeper
    "ndr_bias_v": "",
    "cutoff_frequency_hz": "",
    "bistable_window_v": "",
    "valley_current_ma": "upper",
    "ndr_conductance_ms": "upper",
    "rf_power_uw": "lower",
}
#: Valley beyond the sweep end: the sweep goes on in steps of its last spacing, this many
#: biases per batched call, up to this factor times the end bias (magnitude).
VALLEY_EXTENSION_CHUNK = 8
VALLEY_EXTENSION_FACTOR = 1.5
#: Smallest relative current drop after a maximum that counts as NDR.
NDR_DROP = 0.02
#: A drop after a maximum that makes it the peak even where a weaker NDR comes first, and a
#: rise after the lowest current that makes it the valley (module docstring; this project's
#: choice: the wiggles of 2-6 % before the main peak and the bumps of a valley's floor that
#: scans of random stacks found, which only fine bias grids resolve, are neither).
CLEAR_NDR_DROP = 0.1
#: Extra metrics of the up sweep (self-consistent model; along |V| on either branch): its
#: peak, the width of the bias window past the peak where the I-V is bistable (0 where
#: it is not), and 1.0 where the charged branch still holds at the last bias computed, where
#: the check stops (the window is then a lower bound; 0.0 where it ends before).
BISTABILITY_NAMES = (
    "peak_current_density_up_a_cm2",
    "peak_voltage_up_v",
    "bistable_window_v",
    "bistable_window_to_sweep_end",
)
#: The current continued from the peak counts as another branch when it exceeds the
#: single-solve current by this fraction; the fold closing the window is found to this bias.
BISTABLE_EXCESS = 0.01
FOLD_FIRST_STEP_V = 2e-3
FOLD_TOLERANCE_V = 2e-4
#: A cap only: the fold search ends at its tolerance within 13-15 steps on windows of 30-40 mV.
FOLD_STEPS = 20
#: A step of the up-branch check whose well charge is shown to fall below this fraction of
#: the charge it started from has left the charged branch (its current, 70 % and more
#: below, is not computed; measured on the example stacks: the charged branch loses at most
#: 31 % of its charge in one step up to its fold, a fall off it 99 % and more).
FOLD_CHARGE_COLLAPSE = 0.25
#: A well charge below this (cm^-2) on both sides of a pair of refinement samples is no jump
#: of the self-consistent solution worth resolving (see :func:`_jump_side`).
JUMP_FLOOR_CM2 = 1e10
#: A step of the well charge between neighbouring refinement samples of at least this share
#: of the larger charge and this many times the round's median step is a jump too
#: (:func:`_charge_jump`).
JUMP_STEP_SHARE = 0.1
JUMP_STEP_OVER_TYPICAL = 10.0
#: A well charge that falls below this share of its largest value so far, before the peak:
#: a state may have left the supply window there with an NDR narrower than the sweep's
#: spacing (:func:`_hidden_collapse`; an InP/InAlAs stack's charge fell 3.3 times between
#: points 30 mV apart while its current fell 36 % within 2 mV; a wide InAs well with other
#: states still filled kept 0.63 of its charge where its current fell 17 % within 4 mV).
HIDDEN_CHARGE_DROP = 0.7
#: ... from a largest value of at least this, cm^-2 (a lightly doped stack at 376 K held
#: 7e9 and its current fell 39 % within 3 mV where the charge fell to a third).
HIDDEN_CHARGE_FLOOR_CM2 = 1e9


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
        Each of :data:`METRIC_NAMES` -> ``(n_stacks,)``; NaN where there is no NDR in the
        sweep; and the currents at stated biases (:func:`at_bias_key`).
    extension_bias_v
        ``(m,)`` biases beyond the sweep's end where valleys were looked for (empty when no
        valley fell on the sweep's last point).
    extension_a_cm2
        ``(n_stacks, m)`` currents there; NaN for stacks that did not need them.
    """

    bias_v: np.ndarray
    current_density_a_cm2: np.ndarray
    metrics: dict[str, np.ndarray] = field(default_factory=dict)
    extension_bias_v: np.ndarray = field(default_factory=lambda: np.zeros(0))
    extension_a_cm2: np.ndarray | None = None

    def curve_of(self, i: int = 0) -> tuple[np.ndarray, np.ndarray]:
        """Bias and current of stack ``i``, the sweep followed by its computed extension."""
        v, j = self.bias_v, self.current_density_a_cm2[i]
        if self.extension_a_cm2 is None or self.extension_bias_v.size == 0:
            return v, j
        ok = np.isfinite(self.extension_a_cm2[i])
        v = np.concatenate([v, self.extension_bias_v[ok]])
        j = np.concatenate([j, self.extension_a_cm2[i, ok]])
        order = np.argsort(v, kind="stable")  # a reverse-branch extension lies below the sweep
        return v[order], j[order]

    def metrics_of(self, i: int = 0) -> dict[str, float | None]:
        """Metrics of stack ``i`` as plain floats, ``None`` for NaN (JSON-ready)."""
        return {
            k: (None if not np.isfinite(v[i]) else float(v[i])) for k, v in self.metrics.items()
        }


def at_bias_key(bias_v: float) -> str:
    """Metric key of the current density at a stated bias: ``current_density_at_0.3_v_a_cm2``."""
    return f"current_density_at_{float(bias_v):g}_v_a_cm2"


def at_bias_current_key(bias_v: float) -> str:
    """Key of a mesa's current at a stated bias (``[device] area_um2``): ``current_at_0.3_v_ma``."""
    return f"current_at_{float(bias_v):g}_v_ma"


def band_profile(table: LayerTable, bias_v, *, model: ModelOptions = ModelOptions()):
    """Band profile at each bias from the electrostatics model ``model.electrostatics`` selects.

    :func:`physics.bands.linear_profile` for ``"linear"``,
    :func:`physics.electrostatics.self_consistent_profile` for ``"self-consistent"``;
    biases ``(n_biases,)`` or ``(n_stacks, n_biases)``.

    Parameters
    ----------
    table
        Layers of ``n_stacks`` stacks.
    bias_v
        Bias, V, ``(n_biases,)`` or ``(n_stacks, n_biases)``.
    model
        Model options: ``electrostatics`` and ``slice_nm`` are used.
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

    Parameters
    ----------
    table
        Layers of ``n_stacks`` stacks.
    bias_v
        Bias, V, ``(n_biases,)`` or ``(n_stacks, n_biases)``.
    model
        Model options (electrostatics, slice width, broadening, transport).
    grid
        Adaptive energy grid settings.
    """
    return _current_of_profile(band_profile(table, bias_v, model=model), table, bias_v, model, grid)


def current_of_profile(
    profile,
    table: LayerTable,
    *,
    bias_v: np.ndarray,
    model: ModelOptions = ModelOptions(),
    grid: EnergyGrid = EnergyGrid(),
) -> np.ndarray:
    """Current density, A/cm^2, ``(n_stacks, n_biases)``, of band profiles already computed.

    The transport step of :func:`current_at_bias` alone: the profile depends
    only on the electrostatics (:func:`band_profile`), so a caller that
    changes only the transport settings (broadening, the scattering-assisted
    channel) can reuse it.

    Parameters
    ----------
    profile
        Band profiles of ``table`` at ``bias_v`` (:func:`band_profile`), batch shape
        ``(n_stacks, n_biases)``.
    table
        Layers of ``n_stacks`` stacks.
    bias_v
        Bias, V, ``(n_biases,)`` or ``(n_stacks, n_biases)``.
    model
        Model options (broadening, transport).
    grid
        Adaptive energy grid settings.
    """
    return _current_of_profile(profile, table, bias_v, model, grid)


def _current_of_profile(profile, table, bias_v, model, grid) -> np.ndarray:
    """The transport step shared by every caller: current of given profiles, A/cm^2."""
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


def locate_peak_valley(
    bias_v: np.ndarray, current: np.ndarray, *, floor_a_cm2=None
) -> tuple[np.ndarray, np.ndarray]:
    """Grid indices of the peak (the first clear NDR peak, module docstring) and its valley
    along increasing ``|V|``.

    Parameters
    ----------
    bias_v
        ``(n,)`` increasing biases on one side of zero (all >= 0 or all <= 0).
    current
        ``(n_stacks, n)`` current magnitudes.
    floor_a_cm2
        Optional ``(n_stacks,)``: a maximum below it is no peak
        (:func:`physics.current.resolved_current_floor_a_cm2`).

    Returns
    -------
    peak, valley
        ``(n_stacks,)`` indices, -1 where there is no NDR.
    """
    n_stacks, n = current.shape
    peak = np.full(n_stacks, -1)
    valley = np.full(n_stacks, -1)
    floor = np.zeros(n_stacks) if floor_a_cm2 is None else np.asarray(floor_a_cm2, float)
    for s in range(n_stacks):  # per stack: short loop over a sweep, not over the physics
        j = current[s]
        for i in range(1, n - 1):
            if not (j[i] >= j[i - 1] and j[i] > j[i + 1]) or j[i] < floor[s]:
                continue
            k = _lowest_after(j, i)
            if k is None:
                continue
            if j[k] < (1.0 - CLEAR_NDR_DROP) * j[i]:
                peak[s], valley[s] = i, k
                break
            if peak[s] < 0 and j[k] < (1.0 - NDR_DROP) * j[i]:
                peak[s], valley[s] = i, k  # a weak NDR, kept unless a clear one follows
    return peak, valley


def _resolved_peak_valley(v_abs, j_side, table) -> tuple[np.ndarray, np.ndarray]:
    """:func:`locate_peak_valley` above each stack's resolved-current floor
    (:func:`physics.current.resolved_current_floor_a_cm2`), with a
    :class:`GridAccuracyWarning` where a stack has no peak and its sweep's largest current
    lies below the floor (every maximum was set aside there)."""
    floor_a_cm2 = resolved_current_floor_a_cm2(table)
    peak, valley = locate_peak_valley(v_abs, j_side, floor_a_cm2=floor_a_cm2)
    largest = np.max(np.abs(j_side), axis=1, initial=0.0)
    low = (peak < 0) & (largest < floor_a_cm2)
    if np.any(low):
        warnings.warn(
            GridAccuracyWarning(
                f"a sweep whose currents stay below {floor_a_cm2[low].min():.0e} A/cm^2, what a "
                f"line narrower than {LINE_WIDTH_FLOOR_EV:.0e} eV carries (the energy grid does "
                "not resolve such lines), reports no peak or valley"
            ),
            stacklevel=3,
        )
    return peak, valley


def higher_peak_beyond_valley(
    bias_v: np.ndarray, current_a_cm2: np.ndarray, *, peak_current_a_cm2, valley_voltage_v
) -> tuple[float, float] | None:
    """A clear NDR peak of a swept curve past the first peak's valley that is higher than
    the first peak (a second resonance's, say): the highest such sample, ``(bias_v,
    current_a_cm2)`` on the sweep's grid (not refined), or None.

    The figures of merit are the first clear NDR peak's (:func:`locate_peak_valley`); a
    designer should know when a larger one follows in the sweep. A maximum counts when
    the current after it falls by :data:`CLEAR_NDR_DROP` before rising above it again.

    Parameters
    ----------
    bias_v, current_a_cm2
        The curve, ``(n,)`` each (biases increasing; currents of the bias's sign).
    peak_current_a_cm2, valley_voltage_v
        The first peak's current and its valley's bias (None or NaN: no NDR).
    """
    if peak_current_a_cm2 is None or valley_voltage_v is None or not np.isfinite(valley_voltage_v):
        return None
    v, j = np.asarray(bias_v, float), np.abs(np.asarray(current_a_cm2, float))
    side = np.sign(valley_voltage_v) * v > abs(valley_voltage_v)
    v, j = v[side], j[side]
    if np.sign(valley_voltage_v) < 0:  # along increasing |V|
        v, j = v[::-1], j[::-1]
    best = None
    for i in range(1, j.size - 1):
        if j[i] >= j[i - 1] and j[i] > j[i + 1] and j[i] > abs(peak_current_a_cm2):
            k = _lowest_after(j, i)
            if k is not None and j[k] < (1.0 - CLEAR_NDR_DROP) * j[i]:
                if best is None or j[i] > best[1]:
                    best = (float(v[i]), float(j[i]))
    return best


def _lowest_after(j: np.ndarray, i: int) -> int | None:
    """Index of the lowest current of the magnitudes ``j`` after index ``i`` and before the
    current first exceeds ``j[i]`` again (a maximum's valley, module docstring); None where
    the next current already exceeds it."""
    after = j[i + 1 :]
    above = np.nonzero(after > j[i])[0]
    stop = above[0] if above.size else after.size
    return None if stop == 0 else i + 1 + int(np.argmin(after[:stop]))


#: Peak and valley refinement: biases per round, most rounds, and when a round ends it: the
#: current at the parabola's vertex within this fraction of the parabola's own value (the
#: extremum is resolved), or the bias bracket narrower than this, V.
REFINE_POINTS = 9
REFINE_MAX_ROUNDS = 8
REFINE_RELATIVE_TOLERANCE = 1e-3
REFINE_BIAS_TOLERANCE_V = 2e-5
#: The bracket a peak's zoom ends on where its best sample lies just past a collapse of the
#: well's charge (the current jumps up there and falls steeply on: about 60 A/cm^2 per uV,
#: 0.12 % per uV, on an InP/InAlAs stack; DEVELOPERS.md), V.
REFINE_JUMP_TOLERANCE_V = 2e-7
#: A top just past a jump of the well's charge (the current jumps up there) is the peak only
#: where the branch it lies on stays above the current before the jump for at least this far
#: past it, V: twice :data:`REFINE_BIAS_TOLERANCE_V`, the widest gap a cliff's zoom leaves
#: between the jump's two sides, so that a narrower spike is found on some grids and not on
#: others (4 uV wide on an InGaAs/AlAs stack at 137 K, 80 uV on an InP/InAlAs one at 347 K;
#: DEVELOPERS.md)
SPIKE_MIN_WIDTH_V = 2.0 * REFINE_BIAS_TOLERANCE_V
#: A valley whose best sample's neighbours both rise above it by more than this share of it
#: (a sharp valley on the samples' scale) is resolved only where the parabola through the
#: three also predicts the rise to the samples two spacings out within this factor (either
#: way); otherwise the zoom goes on.
VALLEY_SHARP_RISE = 0.01
VALLEY_WIDER_FIT = 2.0


@dataclass(frozen=True)
class _Devices:
    """Stacks grouped into devices: ``weights`` ``(n_devices, n_stacks)`` area shares (the
    laterally parallel islands of one device, :mod:`physics.islands`), None for one stack
    per device."""

    table: LayerTable
    weights: np.ndarray | None = None

    @property
    def n(self) -> int:
        return self.table.n_stacks if self.weights is None else self.weights.shape[0]

    def current(self, bias_v, model: ModelOptions, grid: EnergyGrid, *, keep=None) -> np.ndarray:
        """``(n_devices, n_biases)``; biases ``(n_biases,)`` or per device ``(n_devices, n)``.

        ``keep``: a list to which the self-consistent solve (grid, solution) is appended
        (one stack per device only; the same solve :func:`current_at_bias` makes)."""
        if self.weights is None:
            if keep is not None and model.electrostatics == "self-consistent":
                g, sol = _solve_at(self.table, bias_v, model)
                keep.append((g, sol))
                profile = profile_from_potential(self.table, g, sol.potential_ev)
                return _current_of_profile(profile, self.table, bias_v, model, grid)
            return current_at_bias(self.table, bias_v, model=model, grid=grid)
        bias = np.asarray(bias_v, float)
        if bias.ndim == 2:
            bias = bias[np.argmax(self.weights != 0, axis=0)]
        j = current_at_bias(self.table, bias, model=model, grid=grid)
        return mixed_current(j, area_weights=self.weights)

    def take(self, rows: np.ndarray) -> _Devices:
        if self.weights is None:
            return _Devices(self.table.take(rows))
        w = self.weights[rows]
        cols = np.nonzero(np.any(w != 0, axis=0))[0]
        return _Devices(self.table.take(cols), w[:, cols])

    def twice(self) -> _Devices:
        """The devices twice over (peaks, then valleys)."""
        table = LayerTable.concatenate([self.table, self.table])
        if self.weights is None:
            return _Devices(table)
        w = self.weights
        both = np.zeros((2 * w.shape[0], 2 * w.shape[1]))
        both[: w.shape[0], : w.shape[1]] = w
        both[w.shape[0] :, w.shape[1] :] = w
        return _Devices(table, both)

    def largest(self) -> LayerTable:
        """One stack per device: its largest island (for the stack-level figures)."""
        if self.weights is None:
            return self.table
        return self.table.take(np.argmax(self.weights, axis=1))


def _sweep_biases(bias_v) -> np.ndarray:
    """``bias_v`` as a float array, or a ValueError unless 1-D, finite and strictly increasing."""
    bias = np.asarray(bias_v, float)
    if bias.ndim != 1 or bias.size < 1:
        raise ValueError(f"bias_v must be a 1-D array of biases, got shape {bias.shape}")
    if not np.all(np.isfinite(bias)):
        at = int(np.flatnonzero(~np.isfinite(bias))[0])
        raise ValueError(f"bias_v must be finite, got {bias[at]} at index {at}")
    if np.any(np.diff(bias) <= 0):
        raise ValueError("bias_v must be strictly increasing")
    return bias


def _check_area_weights(area_weights, n_stacks: int) -> np.ndarray:
    w = np.asarray(area_weights, float)
    if w.ndim != 2 or w.shape[1] != n_stacks:
        raise ValueError(f"area_weights must be (n_devices, {n_stacks}), got {w.shape}")
    if np.any(w < 0) or np.any(np.count_nonzero(w, axis=0) != 1):
        raise ValueError("area_weights: each stack must belong to exactly one device, weight >= 0")
    if not np.allclose(w.sum(axis=1), 1.0, rtol=0, atol=1e-9):
        raise ValueError("area_weights: each device's area shares must sum to 1")
    return w


@dataclass
class _Brackets:
    """:func:`_refine`'s state, per extremum: bracket centre and half span (V), best current
    (``sign * J``), nearest fallen sample (bias, current and well charge, NaN where not
    known), still open, and, for a cliff
    round's bracket, its two known ends (biases, ``sign * J`` and well charges, by bias) and
    whether its best sample lay just past a jump of the well's charge (:func:`_past_jump`);
    ``kept``: the self-consistent solve at the best point (see :func:`_refine`); ``low_v``,
    ``high_v``: the biases its samples stay within."""

    center: np.ndarray
    half: np.ndarray
    low_v: np.ndarray
    high_v: np.ndarray
    best: np.ndarray
    drop_v: np.ndarray
    drop_j: np.ndarray
    drop_w: np.ndarray
    open_: np.ndarray
    known: np.ndarray
    ends_v: np.ndarray
    ends_j: np.ndarray
    ends_w: np.ndarray
    past: np.ndarray
    kept: list

    @classmethod
    def start(cls, center_v, half_span_v, bounds_v) -> _Brackets:
        center = np.array(center_v, float)
        n = center.size
        return cls(
            center=center,
            half=np.array(half_span_v, float),
            low_v=np.array(bounds_v[0], float),
            high_v=np.array(bounds_v[1], float),
            best=np.full(n, -np.inf),
            drop_v=np.full(n, np.nan),
            drop_j=np.full(n, np.nan),
            drop_w=np.full(n, np.nan),
            open_=np.ones(n, bool),
            known=np.zeros(n, bool),
            ends_v=np.zeros((n, 2)),
            ends_j=np.zeros((n, 2)),
            ends_w=np.full((n, 2), np.nan),
            past=np.zeros(n, bool),
            kept=[None] * n,
        )


def _refine(devices, model, grid, center_v, half_span_v, sign, peaks, bounds_v):
    """Refine extrema of ``sign * J``: maxima where ``sign > 0``, minima where ``sign < 0``,
    each within its ``bounds_v`` (lowest and highest bias, V).

    Each round samples :data:`REFINE_POINTS` biases across ``center +- half``
    (one batched call for every extremum still open), fits a parabola through
    the best sample and its neighbours and computes the current at its vertex
    (one more call). An extremum is resolved when that current agrees with
    the parabola's value to :data:`REFINE_RELATIVE_TOLERANCE` (the top is
    smooth on the sampled scale) or the bracket is below
    :data:`REFINE_BIAS_TOLERANCE_V`; otherwise the next round zooms onto the
    best point with the sample spacing as its half span, or, where a neighbour
    of a peak's (``peaks``) best sample has fallen by :data:`NDR_DROP` (a cliff:
    the well's charge collapses between them, or a narrow line passes the
    emitter edge; with the self-consistent model, where the well charge jumps between
    the best sample and one neighbour, towards that one, :func:`_jump_side`), onto the
    interval between the two alone (not at a valley,
    whose neighbour on the NDR side is steep but no cliff): their currents are
    known, so that round samples its :data:`REFINE_POINTS` new biases strictly
    inside it (10 times narrower a round instead of 4; extrema with and without
    known ends are computed in separate calls, so a stack's path does not depend
    on its batch partners). A cliff round computes no vertex (a parabola through a
    fallen sample says nothing of the top) and ends the zoom only by its bracket
    (a test on the currents there made a stack's Jp depend on its batch partners:
    DEVELOPERS.md). A peak on the edge of a current cliff therefore takes a few
    rounds, a smooth one only one. The better of the vertex and the
    best sample is kept, so the result is always a computed current, never
    an extrapolation (a parabola overshoots at a kink). A best sample on the
    bracket's edge moves the bracket there and doubles it (keeps it, where its ends
    were known), and a peak's round decides no top while both of the best sample's
    neighbours have fallen by :data:`NDR_DROP` or the top lies on the flank away from a
    fallen one (:func:`_top_on_other_flank`). With the
    self-consistent model the solve at each extremum's best point is kept
    (node positions, potential, electrons and well charge of its
    stack; None otherwise), and a peak's top just past a jump of the well's charge that is
    narrower than :data:`SPIKE_MIN_WIDTH_V` gives way to the current before the jump
    (:func:`_drop_narrow_spikes`; returned last, which peaks did).
    """
    st = _Brackets.start(center_v, half_span_v, bounds_v)
    keep: list | None = (
        [] if devices.weights is None and model.electrostatics == "self-consistent" else None
    )
    for _ in range(REFINE_MAX_ROUNDS):
        idx = np.nonzero(st.open_)[0]
        if idx.size == 0:
            break
        # each group in its own calls, so that a row's path is its own
        groups = ((idx[st.known[idx]], True), (idx[~st.known[idx]], False))
        for group, ends in groups:
            if group.size:
                _refine_round(devices, model, grid, sign, peaks, st, keep, group, ends)
    narrow = np.zeros(st.center.size, bool)
    if keep is not None:
        narrow = _drop_narrow_spikes(devices, model, grid, sign, peaks, st)
    kept = st.kept if keep is not None else None
    return st.center, sign * st.best, (st.drop_v, st.drop_j, st.drop_w), kept, narrow


def _drop_narrow_spikes(devices, model, grid, sign, peaks, st) -> np.ndarray:
    """Where a peak's zoom ended just past a jump of the well's charge (``st.past``), take the
    current before the jump as the peak unless the branch past it stays above that current
    for :data:`SPIKE_MIN_WIDTH_V` (``st`` updated in place: centre, best, kept solve and, where
    nearer, the first fallen point). One call at the bias before the jump and at a probe
    that far past it; the probe decides where its charge lies on the branch past the jump
    (at least half the jump away from the charge before it). Returns the peaks taken down.

    Such a spike is no figure of the device: on an InGaAs/AlAs stack at 137 K (seed 151, stack
    26 of the grid scan) the current jumps from 4665 to about 5000 A/cm^2 where a low-charge
    root of the well-charge equation is born, and falls below 4665 within 4 uV; where the
    birth lies and how high the current is there moved by 4 uV and 5 % with the iteration's
    tolerance, and 61 biases found it (5043 A/cm^2) while 121 to 481 did not (DEVELOPERS.md)."""
    narrow = np.zeros(st.center.size, bool)
    rows = np.nonzero(st.past & peaks)[0]
    if rows.size == 0:
        return narrow
    before = np.argmin(np.abs(st.ends_v[rows]), axis=1)  # the end at the smaller |V|
    v_before, v_past = st.ends_v[rows, before], st.ends_v[rows, 1 - before]
    w_before, w_past = st.ends_w[rows, before], st.ends_w[rows, 1 - before]
    sgn = sign[rows]  # +1 along increasing |V| on a forward branch's peak, -1 on a reverse one's
    v = np.stack([v_before, v_past + sgn * SPIKE_MIN_WIDTH_V], axis=1)
    solves: list = []
    j = sgn[:, None] * devices.take(rows).current(v, model, grid, keep=solves)
    g, sol = solves[0]
    w = sol.well_sheet_cm2
    beyond = np.abs(w[:, 1] - w_before) >= 0.5 * np.abs(w_past - w_before)
    take = beyond & (j[:, 1] <= j[:, 0])
    for e in np.nonzero(take)[0]:
        i = rows[e]
        st.center[i], st.best[i] = v_before[e], j[e, 0]
        st.kept[i] = _kept_entry(g, sol, e, 0)
        if not sgn[e] * st.drop_v[i] <= sgn[e] * v[e, 1]:  # NaN: no fall noted yet
            st.drop_v[i], st.drop_j[i], st.drop_w[i] = v[e, 1], sgn[e] * j[e, 1], w[e, 1]
    narrow[rows[take]] = True
    return narrow


def _refine_round(devices, model, grid, sign, peaks, st, keep, idx, ends):
    """One round of :func:`_refine` for the extrema ``idx`` (state ``st``, updated in place),
    all with known ends (``ends``) or none."""
    n_points = REFINE_POINTS + 2 if ends else REFINE_POINTS
    sub, sgn, rows = devices.take(idx), sign[idx], np.arange(idx.size)
    if not ends:  # a bracket reaching past its bounds: cut to them (known ends lie within)
        _keep_within_bounds(st, idx)
    v = st.center[idx, None] + st.half[idx, None] * np.linspace(-1.0, 1.0, n_points)
    if ends:
        v[:, 0], v[:, -1] = st.ends_v[idx, 0], st.ends_v[idx, 1]
        j = np.empty(v.shape)
        j[:, 1:-1] = sgn[:, None] * sub.current(v[:, 1:-1], model, grid, keep=keep)
        j[:, 0], j[:, -1] = st.ends_j[idx, 0], st.ends_j[idx, 1]
    else:
        j = sgn[:, None] * sub.current(v, model, grid, keep=keep)
    top = np.argmax(j, axis=1)
    # a cliff beside the best sample: the extremum lies between the best point and the
    # fallen neighbour; a parabola through a fallen sample says nothing of the top, so
    # its vertex is not computed there
    well = _round_charges(keep, st, idx, ends, n_points)
    side, narrow, flank = _round_side(j, top, well, peaks[idx])
    cliff = side != 0
    pick = np.clip(top, 1, n_points - 2)[:, None] + np.array([-1, 0, 1])
    x3, j3 = v[rows[:, None], pick], j[rows[:, None], pick]
    offset, curvature, lowest = parabola_through(x3, -j3)
    vertex = x3[:, 1] + offset
    j_vertex = np.full(idx.size, -np.inf)
    fit = np.nonzero(~cliff)[0]
    if fit.size:
        at = sub if fit.size == idx.size else sub.take(fit)
        j_vertex[fit] = sgn[fit] * at.current(vertex[fit, None], model, grid, keep=keep)[:, 0]
    better = j_vertex >= j[rows, top]
    if keep:
        # a known end as the best sample: the last round's solve there stays kept
        _keep_best(st.kept, keep, idx, better, top, fit, shift=1 if ends else 0)
        keep.clear()
    st.center[idx] = np.where(better, vertex, v[rows, top])
    st.best[idx] = np.maximum(j_vertex, j[rows, top])
    _note_fall(st, idx, v, j, well, sgn, peaks[idx])
    edge = (top == 0) | (top == n_points - 1)
    # a best sample on the bracket's edge: the bracket moves there and, where its ends were
    # not known, doubles, so that an extremum some spans away is reached in a few rounds
    # (moving one span a round, the zoom ran out of rounds 3 mV short of a peak; DEVELOPERS.md)
    moved = st.half[idx] * (1.0 if ends else 2.0)
    st.half[idx] = np.where(edge, moved, st.half[idx] * 2.0 / (n_points - 1))
    # at a cliff the next round spans only the interval to the fallen neighbour
    st.known[idx] = cliff
    across = np.clip(top + side, 0, n_points - 1)
    past_jump = _past_jump(cliff, well, top, across, v)
    st.past[idx] = past_jump
    if np.any(cliff):
        best_v, across_v = st.center[idx], v[rows, across]
        st.center[idx] = np.where(cliff, 0.5 * (best_v + across_v), best_v)
        st.half[idx] = np.where(cliff, 0.5 * np.abs(across_v - best_v), st.half[idx])
        lo, hi = np.minimum(top, across), np.maximum(top, across)
        st.ends_v[idx] = np.stack([v[rows, lo], v[rows, hi]], axis=1)
        st.ends_j[idx] = np.stack([j[rows, lo], j[rows, hi]], axis=1)
        if well is not None:
            st.ends_w[idx] = np.stack([well[rows, lo], well[rows, hi]], axis=1)
    # a peak whose best sample's neighbours have both fallen by NDR_DROP is narrower than the
    # samples: a parabola through them can agree with its vertex's current and still miss
    # the top (a slow rise and a 3 % cliff: 1.05 % low, 3.5 mV off; DEVELOPERS.md), so the
    # zoom goes on until the neighbours hold; so it does where the top is on the flank away
    # from a step (the parabola about the best sample runs through the step)
    smooth = (
        ~cliff
        & ~((narrow | flank) & peaks[idx])
        & (peaks[idx] | _parabola_holds_wider(v, j, top, x3, j3, lowest))
        & (curvature > 0)
        & (np.abs(j_vertex + lowest) <= REFINE_RELATIVE_TOLERANCE * np.abs(st.best[idx]))
    )
    tolerance = np.where(past_jump, REFINE_JUMP_TOLERANCE_V, REFINE_BIAS_TOLERANCE_V)
    st.open_[idx] = ~((smooth & ~edge) | (st.half[idx] < tolerance))


def _note_fall(st, idx, v, j, well, sgn, peaks) -> None:
    """Keep in ``st`` (in place) the nearest sample of a round past each extremum ``idx``
    along increasing ``|V|`` that lies :data:`NDR_DROP` below its best (biases ``v``,
    ``sgn * J`` ``j`` and well charges ``well`` or None of the round's samples, ``peaks``
    its peaks; NaN in ``st``: none yet)."""
    rows, n_points = np.arange(idx.size), v.shape[1]
    d = np.where(peaks, sgn, -sgn)  # +1 on a forward branch, -1 on a reverse one
    fallen = (d[:, None] * v > d[:, None] * st.center[idx, None]) & (
        j < st.best[idx, None] - NDR_DROP * np.abs(st.best[idx, None])
    )
    first = np.where(
        d > 0, np.argmax(fallen, axis=1), n_points - 1 - np.argmax(fallen[:, ::-1], axis=1)
    )
    v_fall = v[rows, first]
    nearer = fallen.any(axis=1) & ~(d * st.drop_v[idx] <= d * v_fall)
    st.drop_v[idx] = np.where(nearer, v_fall, st.drop_v[idx])
    st.drop_j[idx] = np.where(nearer, sgn * j[rows, first], st.drop_j[idx])
    if well is not None:
        st.drop_w[idx] = np.where(nearer, well[rows, first], st.drop_w[idx])


def _keep_within_bounds(st, idx) -> None:
    """Cut the brackets ``idx`` of ``st`` that reach past their bounds to them (in place).
    A valley's bracket that reached below its peak found the current's fall towards zero
    bias there, moved with it round by round (a best sample on the bracket's edge moves
    it) and ended at -0.64 V with a negative current on a forward sweep (a GaSb/AlSb stack,
    `random_stack` seed 144, draw 30; DEVELOPERS.md)."""
    lo, hi = st.center[idx] - st.half[idx], st.center[idx] + st.half[idx]
    out = (lo < st.low_v[idx]) | (hi > st.high_v[idx])
    if np.any(out):
        lo, hi = np.maximum(lo, st.low_v[idx]), np.minimum(hi, st.high_v[idx])
        st.center[idx] = np.where(out, 0.5 * (lo + hi), st.center[idx])
        st.half[idx] = np.where(out, 0.5 * (hi - lo), st.half[idx])


def _past_jump(cliff, well, top, across, v):
    """Whether each extremum's best sample (``top``) lies just past a jump of the well's
    charge (:func:`_charge_jump`) from its cliff's other sample (``across``), past it in
    bias magnitude (biases ``v``). There the current has jumped up onto the other branch and
    falls steeply on (0.13 % 1 uV past a collapse, 1.3 % 10 uV past it, on an InP/InAlAs
    stack; DEVELOPERS.md), so the zoom goes on to :data:`REFINE_JUMP_TOLERANCE_V`; at a
    usual NDR cliff the best sample lies before the collapse."""
    if well is None:
        return np.zeros(cliff.shape, bool)
    rows = np.arange(cliff.size)
    beyond = np.abs(v[rows, top]) > np.abs(v[rows, across])
    return cliff & beyond & _charge_jump(well, top, across)


def _parabola_holds_wider(v, j, top, x3, j3, lowest):
    """Whether a valley's round may end on its parabola: its best sample's neighbours rise
    by no more than :data:`VALLEY_SHARP_RISE` of it (a floor flat on the samples' scale is
    known well enough whatever its shape: on the GaAs example two more rounds moved the
    valley current by 3e-5 and cost its I-V 18 %), or the parabola through the three
    (``x3``, ``j3``; its extremum ``lowest`` of ``-j``) predicts the rise of ``-j`` to the
    samples two spacings out, where the round has them, within :data:`VALLEY_WIDER_FIT`.
    A sharp valley beside the NDR cliff is no parabola on the samples' scale: three samples
    about it can be nearly symmetric, the vertex's current agree with the parabola's, and
    the minimum still lie between the best sample and the cliff's side (1 % high and 2.6 mV
    off on a GaAs/AlGaAs stack, DEVELOPERS.md)."""
    rows, last = np.arange(j.shape[0]), j.shape[1] - 1
    rise = np.min(j3[:, [1]] - j3[:, [0, 2]], axis=1)
    flat = rise <= VALLEY_SHARP_RISE * np.abs(j3[:, 1])
    fits_both = np.ones(j.shape[0], bool)
    for step in (-2, 2):
        k = np.clip(top + step, 0, last)
        there = (top + step >= 0) & (top + step <= last)
        x = v[rows, k]
        # the parabola at x (Lagrange form through the three points)
        y = np.zeros(x.shape)
        for i in range(3):
            basis = np.ones(x.shape)
            for m in range(3):
                if m != i:
                    basis *= (x - x3[:, m]) / (x3[:, i] - x3[:, m])
            y += -j3[:, i] * basis
        predicted, seen = y - lowest, -j[rows, k] - lowest
        fits = (seen <= VALLEY_WIDER_FIT * predicted) & (VALLEY_WIDER_FIT * seen >= predicted)
        fits_both &= ~there | fits
    return flat | fits_both


def _round_side(j, top, well, peaks):
    """The cliff side of each extremum of a refinement round (+1, -1 or 0; 0 for valleys:
    ``peaks`` False), whether its top is narrower than the samples and whether it lies on
    the flank away from a fallen neighbour (:func:`_cliff_side`,
    :func:`_top_on_other_flank`). With the self-consistent model (``well``, the samples' well
    charges, not None) a jump of the well charge on one side of the best sample decides the
    side: the single solves' branch changes between them, the current can peak just past the
    change whether or not a sample has fallen there, and a fall on the other side is then
    the branch's own decline (:func:`_jump_side`)."""
    side, narrow = _cliff_side(j, top)
    flank = _top_on_other_flank(j, top, side)
    side = np.where(flank, 0, side)
    if well is not None:
        jump = _jump_side(well, top)
        side = np.where(jump != 0, jump, side)
    return np.where(peaks, side, 0), narrow, flank


def _cliff_side(j, top):
    """Per extremum of a refinement round (samples ``j``, ``(n, n_points)``, of
    ``sign * J``; best sample ``top``): +1 where the next sample has fallen by
    :data:`NDR_DROP` below the best and the previous one has not (a cliff above it), -1
    for the mirror case, 0 otherwise (no cliff, or a top narrower than the samples); and
    whether both have fallen (the top is narrower than the samples' spacing)."""
    rows, last = np.arange(j.shape[0]), j.shape[1] - 1
    at = j[rows, top]
    gap = NDR_DROP * np.abs(at)
    up = (top < last) & (j[rows, np.minimum(top + 1, last)] < at - gap)
    down = (top > 0) & (j[rows, np.maximum(top - 1, 0)] < at - gap)
    return _one_side(up, down), up & down


def _one_side(up, down):
    """+1 where only ``up`` holds, -1 where only ``down`` does, 0 otherwise."""
    return np.where(up & ~down, 1, np.where(down & ~up, -1, 0))


def _top_on_other_flank(j, top, side):
    """Per extremum of a refinement round (samples ``j`` of ``sign * J``, best sample ``top``,
    cliff side ``side`` from :func:`_cliff_side`): where the parabola through the best sample
    and the two beyond it on the side away from the fallen one has its vertex between the
    best sample and its neighbour there, above the best by more than
    :data:`REFINE_RELATIVE_TOLERANCE`: the top lies on that flank and the fall on the other
    side is a step of the current beyond it, no cliff to zoom onto. (A current that rises up
    to a cliff has no such vertex.) Measured on an In0.53Ga0.47As/AlAsSb stack in reverse
    bias (DEVELOPERS.md): neighbours 2.3 % lower (a step) and 0.2 % lower, the parabola's top
    21905 A/cm^2 against the best sample's 21535 and the true top's 21909."""
    rows, last = np.arange(j.shape[0]), j.shape[1] - 1
    near = top - side  # the neighbour on that flank, the middle of the three samples
    ok = (side != 0) & (near - 1 >= 0) & (near + 1 <= last)
    x3 = np.clip(near[:, None] + np.array([-1, 0, 1]), 0, last)  # in samples
    with np.errstate(divide="ignore", invalid="ignore"):  # clipped rows (not ``ok``) repeat x
        offset, curvature, lowest = parabola_through(x3.astype(float), -j[rows[:, None], x3])
    towards_best = offset * side  # 0 at the neighbour, 1 at the best sample
    y0 = j[rows, top]
    above = -lowest > y0 + REFINE_RELATIVE_TOLERANCE * np.abs(y0)
    return ok & (curvature > 0) & (towards_best > 0) & (towards_best < 1) & above


def _round_charges(keep, st, idx, ends, n_points):
    """Well charges (cm^-2, ``(len(idx), n_points)``) of a refinement round's samples: its
    solve (the first one ``keep`` holds) and, with known ``ends``, the ends' from the round
    before; None without the self-consistent solves."""
    if not keep or keep[0][1].well_sheet_cm2 is None:
        return None
    solved = keep[0][1].well_sheet_cm2
    if not ends:
        return solved
    well = np.empty((idx.size, n_points))
    well[:, 1:-1], well[:, 0], well[:, -1] = solved, st.ends_w[idx, 0], st.ends_w[idx, 1]
    return well


def _jump_side(well, top):
    """Per extremum of a refinement round (well charges ``well`` of its samples, best sample
    ``top``): +1 where the well charge jumps (:func:`_charge_jump`) between the best sample
    and the next one and not between it and the previous one, -1 for the mirror case, 0
    otherwise. Measured on a GaAs/AlGaAs stack in reverse bias (DEVELOPERS.md): its well
    charge collapses from 3.3e11 to 1.5e10 cm^-2 within 0.1 mV and the current jumps up by
    23 % there, then falls back within 3 mV; samples 3.6 mV apart on either side had the same
    current."""
    last = well.shape[1] - 1
    return _one_side(
        _charge_jump(well, top, np.minimum(top + 1, last)),
        _charge_jump(well, top, np.maximum(top - 1, 0)),
    )


def _charge_jump(well, top, other):
    """Whether the well charge jumps between samples ``top`` and ``other`` of each extremum's
    round (``well``, ``(n, n_points)``; the larger at least :data:`JUMP_FLOOR_CM2`): a
    collapse (the smaller below :data:`FOLD_CHARGE_COLLAPSE` of the larger), or a step of at
    least :data:`JUMP_STEP_SHARE` of the larger and :data:`JUMP_STEP_OVER_TYPICAL` times the
    round's median step between neighbouring samples (the single solves change branch: on an
    InGaAs/AlAs stack at 301 K the charge stepped from 1.26e12 to 1.63e12 cm^-2 within 0.1
    mV, steps of 4e9 on either side, and the current spiked 4 % above its plateau within
    0.3 mV past it; DEVELOPERS.md)."""
    rows = np.arange(well.shape[0])
    a, b = np.abs(well[rows, top]), np.abs(well[rows, other])
    big, small = np.fmax(a, b), np.fmin(a, b)
    typical = np.median(np.abs(np.diff(well, axis=1)), axis=1)
    step = (big - small >= JUMP_STEP_SHARE * big) & (
        big - small >= JUMP_STEP_OVER_TYPICAL * typical
    )
    return (other != top) & (big >= JUMP_FLOOR_CM2) & ((small < FOLD_CHARGE_COLLAPSE * big) | step)


def _keep_best(kept, solves, idx, better, top, fit, shift=0):
    """Record in ``kept`` (per extremum) the solve at this round's best point of each
    extremum ``idx``: the vertex's (``solves[1]``, made for the extrema ``fit`` only) where
    ``better``, else the best sample's (``solves[0]``, column ``top - shift``; with ``shift``
    1 the round's first and last samples were known ends, not solved: an end as the best
    sample keeps what ``kept`` holds, the last round's solve there)."""
    (g_s, s_s), *vertex = solves
    n_solved = s_s.potential_ev.shape[1]
    for e, i in enumerate(idx):
        if better[e]:
            (g, sol), row, col = vertex[0], int(np.searchsorted(fit, e)), 0
        elif not 0 <= top[e] - shift < n_solved:
            continue
        else:
            g, sol, row, col = g_s, s_s, e, int(top[e]) - shift
        kept[i] = _kept_entry(g, sol, row, col)


def _kept_entry(g, sol, row, col) -> tuple:
    """What the refinement keeps of a solve (grid ``g``, solution ``sol``) at one sample (its
    stack ``row``, bias ``col``): node positions, potential, electrons and well charge."""
    return (
        g.center_nm[row],
        sol.potential_ev[row, col],
        sol.electron_cm3[row, col],
        sol.well_sheet_cm2[row, col],
    )


def _kept_solution(table, kept, model):
    """The peak's solve (grid, solution) of ``table``'s stacks from the refinement's kept
    solves (one per stack, each carried to this table's slice grid by position)."""
    from .electrostatics import PoissonSolution, extended_slice_grid, potential_on_grid

    g = extended_slice_grid(table, slice_nm=model.slice_nm)
    n, nodes = g.center_nm.shape
    pot, el = np.empty((n, 1, nodes)), np.empty((n, 1, nodes))
    well = np.empty((n, 1))
    for s, (center_nm, u, e, w) in enumerate(kept):
        grids = {"source_center_nm": center_nm[None], "target_center_nm": g.center_nm[s : s + 1]}
        pot[s] = potential_on_grid(u[None, None], **grids)[0]
        el[s] = potential_on_grid(e[None, None], **grids)[0]
        well[s, 0] = w
    return g, PoissonSolution(potential_ev=pot, electron_cm3=el, iterations=0, well_sheet_cm2=well)


def _solve_at(table, bias_v, model):
    """Self-consistent solve (grid, solution) as :func:`band_profile` makes it."""
    from .electrostatics import solve_self_consistent

    return solve_self_consistent(table, bias_v, slice_nm=model.slice_nm)


def _take_solution(solution, rows):
    """The stacks ``rows`` of a solution ``(n_stacks, n_biases, ...)``."""
    return replace(
        solution,
        potential_ev=solution.potential_ev[rows],
        electron_cm3=solution.electron_cm3[rows],
        well_sheet_cm2=None if solution.well_sheet_cm2 is None else solution.well_sheet_cm2[rows],
    )


def _up_branch(table, model, grid, v_start, v_after, j_after, v_ends, *, peak, sign=1.0):
    """Where the self-consistent I-V is bistable above its peak: the up sweep's branch.

    Every bias of a sweep is solved from the linear drop with no well charge,
    which lands on the low-charge branch where two solutions exist. The up
    sweep (a curve tracer going up) instead carries the well charge past the
    peak. This takes the last single solve on the charged branch, at ``v_start``
    (``peak``: grid and solution; the peak's own where the branch falls off just above
    it), continues it to
    ``v_after`` (the first bias above it whose single solve has fallen off the branch,
    :func:`_collapse_bracket`; its current ``j_after``) and, where it is still charged
    there, follows the charged branch upwards to its fold (:class:`_FoldSearch`: a solve
    whose charge falls below :data:`FOLD_CHARGE_COLLAPSE` of the start's has left it; from
    :data:`FOLD_FIRST_STEP_V` to :data:`FOLD_TOLERANCE_V`, at most :data:`FOLD_STEPS`
    solves; ``v_ends``: the valley and the last bias computed, beyond which it does not go;
    past the valley a step holds only apart from the single solve there,
    :func:`_continued_solve`), as
    :func:`sweep_hysteresis` does on a grid. Every stack of the batch takes
    each step; stacks already settled repeat their last bias. The steps are judged by the
    charge alone; the currents at ``v_after`` and of the steps that held are computed in one
    call at the end (one current call per step cost the InP example's default I-V about 6 %,
    the call at ``v_after`` alone 2 %), and the I-V is bistable where the current at
    ``v_after`` exceeds ``j_after`` by :data:`BISTABLE_EXCESS`.

    Returns the up sweep's peak bias and current, the window (last bias
    on the charged branch minus ``v_start``; 0 where the I-V is single-valued) and whether the
    branch still holds at the last bias computed (the window a lower bound there). ``peak`` is
    the node positions (``(n_stacks, n_nodes)``, nm) and solution of the start's solve.
    Biases and currents go along the branch ``sign`` (+1 forward, -1 reverse): ``|V|``
    and magnitudes. The down branch is taken to be the single-solve one (checked against
    :func:`sweep_hysteresis` on the InP example stack: the down sweep follows
    the single solves there).
    """
    from .electrostatics import (
        ElectrostaticsConvergenceError,
        extended_slice_grid,
        potential_on_grid,
    )

    # the solve at v_start (the peak's, made for its band profile, or the sweep's, both of a
    # batch that may hold more stacks, so on a grid with more padding slices per layer):
    # carried to this batch's grid
    source_center_nm, sol = peak
    target_center_nm = extended_slice_grid(table, slice_nm=model.slice_nm).center_nm
    sol = replace(
        sol,
        potential_ev=potential_on_grid(
            sol.potential_ev, source_center_nm=source_center_nm, target_center_nm=target_center_nm
        ),
    )

    v_valley, v_end = v_ends
    continued = functools.partial(
        _continued_solve, table, sol.well_sheet_cm2, v_valley, sign=sign, model=model
    )

    each = functools.partial(  # each stack alone, where a solve of the batch fails
        _up_branch_each, table, model, grid, v_start, v_after, j_after, v_ends, peak=peak, sign=sign
    )
    try:
        g_after, state, left = continued(v_after, sol, need=np.ones(v_after.size, bool))
    except ElectrostaticsConvergenceError:
        if v_start.size == 1:
            raise
        return each()

    def current_of(potential_ev, v):
        """Current magnitudes at ``|V|`` ``v`` ``(n, m)`` of potentials ``(n, m, n_slices)``."""
        profile = profile_from_potential(table, g_after, potential_ev)
        return sign * _current_of_profile(profile, table, sign * v, model, grid)

    fold = _FoldSearch.start(v_after, np.maximum(v_after - v_start, FOLD_FIRST_STEP_V), v_end)
    active = ~left  # still charged at v_after: followed, the current judged at the end
    # (bias, potential, hold) of v_after and of each step where a stack held
    held: list = [(v_after, state.potential_ev[:, 0], active.copy())]
    for _ in range(FOLD_STEPS):
        if not np.any(active):
            break
        v_try = np.where(active, fold.trial(), fold.v_hi)
        try:
            _, trial, left = continued(v_try, state, need=active)
        except ElectrostaticsConvergenceError:
            if v_start.size > 1:  # one stack's failure must not end its partners' branches
                return each()
            break  # keep the branch found so far
        hold = active & ~left  # the charge held: still on the charged branch
        state = replace(
            state,
            potential_ev=np.where(hold[:, None, None], trial.potential_ev, state.potential_ev),
            well_sheet_cm2=np.where(hold[:, None], trial.well_sheet_cm2, state.well_sheet_cm2),
        )
        if np.any(hold):
            held.append((v_try, state.potential_ev[:, 0], hold))
        active &= ~fold.update(v_try, hold, active)
    v_hi = fold.v_hi
    best_v, best_j, bistable = _highest_on_branch(current_of, v_start, j_after, held)
    return best_v, best_j, np.where(bistable, v_hi - v_start, 0.0), bistable & (v_hi >= v_end)


def _continued_solve(table, start_cm2, v_valley, v, state, need, *, sign, model):
    """Solve at ``|V|`` ``v`` from ``state`` (:func:`_up_branch`'s step): the grid, the solution
    and the stacks that left the charged branch. Of the stacks whose step counts (``need``),
    a stack has left it where its well charge falls below :data:`FOLD_CHARGE_COLLAPSE` of its
    start's (``start_cm2``), whether its solve stops there or converges below, and past its
    valley ``v_valley`` also where the charge lies within that share of the single solve's
    there (:func:`_solve_at`, as the sweep's; a stack whose single solve fails counts as off): past the valley the single solves' charge can rise again (the next
    resonance) and meet the branch, which then holds a charge without a second root (on 6 of
    58 bistable random stacks the branch went on 2-50 mV past the valley; DEVELOPERS.md)."""
    abandon = FOLD_CHARGE_COLLAPSE * start_cm2
    g, s = solve_stack_poisson(
        table,
        sign * v[:, None],
        initial_ev=state.potential_ev,
        initial_well_cm2=state.well_sheet_cm2,
        abandon_below_cm2=abandon,
        slice_nm=model.slice_nm,
    )
    charge = np.asarray(s.well_sheet_cm2)[:, 0]
    left = charge <= abandon[:, 0]
    past = np.nonzero(need & ~left & (v > v_valley))[0]
    if past.size:
        from .electrostatics import ElectrostaticsConvergenceError

        try:
            single = np.asarray(
                _solve_at(table.take(past), sign * v[past, None], model)[1].well_sheet_cm2
            )
        except ElectrostaticsConvergenceError:
            single = np.full((past.size, 1), np.inf)
        left[past] = charge[past] - single[:, 0] <= abandon[past, 0]
    return g, s, left


@dataclass
class _FoldSearch:
    """Where :func:`_up_branch`'s charged branch ends, per stack (biases along ``|V|``): steps
    out from the last bias that held (``v_hi``), doubled while they hold, up to ``v_end``;
    once one leaves the branch, halving ``[v_hi, v_off]`` (``v_off`` the nearest bias seen
    off it) to :data:`FOLD_TOLERANCE_V`. A fall ends the search only where it was seen from
    the last bias that held: near a fold the root search from a state further back can skip
    the charged root (an as-grown InP stack fell 0.5 mV past its state and held from nearer,
    its branch going on 1 mV; DEVELOPERS.md), so such a fall is tried again from there; where
    it holds, the falls at or below it are dropped and the next one out bounds the search.
    Stepping past a known fall again (the steps doubled after every hold) had tried the same
    biases two and three times and ran out of steps 1 mV from the InP example's fold."""

    v_hi: np.ndarray
    step: np.ndarray
    v_end: np.ndarray
    falls: np.ndarray  # (n_stacks, FOLD_STEPS): the biases seen off the branch (inf: none)
    seen_from: np.ndarray  # the bias that held from which each fall was seen
    taken: int = 0

    @classmethod
    def start(cls, v_hi, step, v_end) -> _FoldSearch:
        none = np.full(v_hi.shape + (FOLD_STEPS,), np.inf)
        return cls(v_hi.copy(), step.copy(), v_end, none, none.copy())

    def _nearest_fall(self) -> tuple[np.ndarray, np.ndarray]:
        """The nearest fall past ``v_hi`` of each stack (inf: none) and the nearest bias it was
        seen from (a fall tried again is seen twice)."""
        above = np.where(self.falls > self.v_hi[:, None], self.falls, np.inf)
        v_off = np.min(above, axis=1)
        there = np.isfinite(v_off)[:, None] & (self.falls == v_off[:, None])
        return v_off, np.max(np.where(there, self.seen_from, -np.inf), axis=1)

    def trial(self) -> np.ndarray:
        """The next bias of each stack."""
        v_off, seen = self._nearest_fall()
        narrow = (v_off - self.v_hi < FOLD_TOLERANCE_V) & (seen < self.v_hi)
        halved = np.where(narrow, v_off, 0.5 * (self.v_hi + v_off))
        return np.where(np.isfinite(v_off), halved, np.minimum(self.v_hi + self.step, self.v_end))

    def update(self, v_try, hold, active) -> np.ndarray:
        """Take each active stack's step (``hold``: still on the branch); returns the stacks
        whose search has ended."""
        fell = active & ~hold
        stuck = v_try <= self.v_hi  # the valley at or before the last bias that held
        outward = ~np.isfinite(self._nearest_fall()[0])
        self.falls[:, self.taken] = np.where(fell, v_try, np.inf)
        self.seen_from[:, self.taken] = self.v_hi
        self.taken += 1
        self.step = np.where(outward & hold, 2.0 * self.step, self.step)
        self.v_hi = np.where(hold, v_try, self.v_hi)
        v_off, seen = self._nearest_fall()
        ended = (v_off - self.v_hi < FOLD_TOLERANCE_V) & (seen >= self.v_hi)
        return ended | stuck | (hold & (v_try >= self.v_end))


def _highest_on_branch(current_of, v_start, j_after, held):
    """The up sweep's peak of :func:`_up_branch`: the currents of ``held`` (bias, potential and
    hold of each stack at ``v_after``, then per step; a stack that did not hold at a step takes
    its last held state there, and that current is no candidate) in one call
    (``current_of(potential, bias)``); bistable where the current at ``v_after`` exceeds the
    single solve's ``j_after`` by :data:`BISTABLE_EXCESS`. Returns bias and current of the
    highest current on the branch (the first of equals; ``v_start`` and ``-inf`` where not
    bistable) and the bistable stacks."""
    v_steps = np.stack([v for v, _, _ in held], axis=1)
    j_steps = current_of(np.stack([p for _, p, _ in held], axis=1), v_steps)
    ok = np.stack([h for _, _, h in held], axis=1) & np.isfinite(j_steps)
    bistable = ok[:, 0] & (j_steps[:, 0] > (1.0 + BISTABLE_EXCESS) * j_after)
    candidates = np.where(ok & bistable[:, None], j_steps, -np.inf)
    top = np.argmax(candidates, axis=1)
    rows = np.arange(top.size)
    return np.where(bistable, v_steps[rows, top], v_start), candidates[rows, top], bistable


def _up_branch_each(table, model, grid, v_start, v_after, j_after, v_ends, *, peak, sign):
    """:func:`_up_branch` of each stack alone, once a solve of the batch failed to converge:
    each stack's branch is then the one it has alone, whatever its partners do."""
    center_nm, solution = peak
    alone = [
        _up_branch(
            table.take([i]),
            model,
            grid,
            v_start[[i]],
            v_after[[i]],
            j_after[[i]],
            tuple(v[[i]] for v in v_ends),
            peak=(center_nm[[i]], _take_solution(solution, [i])),
            sign=sign,
        )
        for i in range(v_start.size)
    ]
    return tuple(np.concatenate(parts) for parts in zip(*alone, strict=True))


def _extend_valleys(devices, model, grid, v_side, j_side, ip, iv, need, sign):
    """Go on beyond the sweep's end for the stacks whose valley (``iv``) is not established:
    on the sweep's last point, or with the current rising after it by no more than
    :data:`CLEAR_NDR_DROP` of its own (``need``).

    Steps of the sweep's last spacing, :data:`VALLEY_EXTENSION_CHUNK` biases per
    batched call (only the stacks still open), until the current rises after its
    lowest point by more than :data:`CLEAR_NDR_DROP` of that point's current
    (:func:`_valley_rise`), or :data:`VALLEY_EXTENSION_FACTOR` times the end bias
    (magnitudes; ``sign`` -1 for the reverse branch). A self-consistent solve that
    fails beyond the end stops the extension of the stacks that fail alone too.

    Returns the extension's bias magnitudes ``(m,)``, their currents ``(n, m)``
    (magnitudes on the branch, NaN where not computed), the valley index on the
    extended curve (``iv`` where not needed) and whether the valley is still bounded by the
    last computed point (the current lowest there).
    """
    from .electrostatics import ElectrostaticsConvergenceError

    n = j_side.shape[0]
    end = abs(float(v_side[-1]))
    step = abs(float(v_side[-1] - v_side[-2]))
    count = int(np.floor((VALLEY_EXTENSION_FACTOR - 1.0) * end / step + 1e-9)) if step > 0 else 0
    v_ext = end + step * np.arange(1, count + 1)
    j_ext = np.full((n, count), np.nan)
    valley = iv.copy()
    open_ = need.copy()
    done = 0
    while done < count and np.any(open_):
        rows = np.nonzero(open_)[0]
        chunk = slice(done, min(done + VALLEY_EXTENSION_CHUNK, count))
        try:
            j = devices.take(rows).current(sign * v_ext[chunk], model, grid)
        except ElectrostaticsConvergenceError:
            # one stack's failure must not end its partners' extension: each alone; those
            # that fail alone too stay bounded by the last point computed
            j = _currents_each(devices.take(rows), sign * v_ext[chunk], model, grid)
            failed = np.isnan(j).any(axis=1)
            open_[rows[failed]] = False
            rows, j = rows[~failed], j[~failed]
        j_ext[rows, chunk] = sign * j
        done = chunk.stop
        for s in rows:  # per stack: where the extended curve's valley is, not physics
            jj = np.concatenate([j_side[s], j_ext[s, :done]])
            valley[s] = _lowest_after(jj, ip[s])  # (the peak's next current is below it)
            if _valley_rise(jj, valley[s]) > CLEAR_NDR_DROP:  # the current rises clearly after it
                open_[s] = False
    # bounded: the lowest current is the last one computed (still falling there)
    last = v_side.size - 1 + np.count_nonzero(np.isfinite(j_ext), axis=1)
    return v_ext, j_ext, valley, need & (valley == last)


def _valley_rise(j, valley) -> float:
    """How far the current rises after the valley (index ``valley`` of the magnitudes ``j``),
    as a share of the valley's current (as the peak's fall is of the peak's): above
    :data:`CLEAR_NDR_DROP` the valley is established, below it (a wiggle or a bump of the
    valley's floor, a flat floor) a lower one may follow."""
    return float((np.max(j[valley:]) - j[valley]) / max(j[valley], 1e-300))


def _currents_each(devices, bias_v, model, grid) -> np.ndarray:
    """:meth:`_Devices.current` of each device alone, ``(n_devices, n_biases)``; a row of NaN
    where the self-consistent solve fails for that device alone too."""
    from .electrostatics import ElectrostaticsConvergenceError

    out = np.full((devices.n, np.size(bias_v)), np.nan)
    for i in range(devices.n):
        try:
            out[i] = devices.take([i]).current(bias_v, model, grid)[0]
        except ElectrostaticsConvergenceError:
            pass
    return out


def _at_bias_metrics(devices, at_bias_v, area_um2, model, grid) -> dict[str, np.ndarray]:
    """The current density at each stated bias (:func:`at_bias_key`, A/cm^2), computed there
    in one batched call, and with a mesa area the mesa's current (:func:`at_bias_current_key`,
    mA)."""
    at = np.asarray(at_bias_v, float).reshape(-1)
    out: dict[str, np.ndarray] = {}
    if not at.size:
        return out
    j_at = devices.current(at, model, grid)
    for col, b in enumerate(at):
        out[at_bias_key(b)] = j_at[:, col]
        if area_um2 is not None:  # A/cm^2 times um^2 (1e-8 cm^2), in mA (1e3)
            out[at_bias_current_key(b)] = j_at[:, col] * area_um2 * 1e-5
    return out


def _up_sweep_peaks(table, model, grid, vp, jp, vv, after, peak_solution, swept, *, sign, v_stop):
    """The up sweep's peak (bias, current), bistable window and whether it reaches the last bias
    computed, ``v_stop`` (1.0, else 0.0), of each stack with NDR (``table``: those stacks):
    :func:`_up_branch` from the last single solve on the charged branch above the peak, for
    the stacks whose single solves fall off it before the valley ``vv``
    (:func:`_collapse_bracket`), the single-solve peak elsewhere. ``sign``: the branch's (+1
    forward, -1 reverse); both take their steps along ``|V|``."""
    vp, vv = sign * vp, sign * vv  # along |V| (the currents are magnitudes already)
    after = (sign * after[0], sign * after[1], after[2])
    vp_up, jp_up, window = vp.copy(), jp.copy(), np.zeros(vp.size)
    to_end = np.zeros(vp.size)
    v_start, start, v_after, j_after = _collapse_bracket(
        table, model, grid, vp, vv, after, peak_solution, swept, sign=sign
    )
    found = np.isfinite(v_after)
    if not np.any(found):
        return sign * vp_up, jp_up, window, to_end
    k = np.nonzero(found)[0]
    up_v, up_j, fold, reached = _up_branch(
        table.take(k),
        model,
        grid,
        v_start[k],
        v_after[k],
        j_after[k],
        (vv[k], v_stop[k]),
        peak=(start[0][k], _take_solution(start[1], k)),
        sign=sign,
    )
    better = up_j > jp[k]
    vp_up[k] = np.where(better, up_v, vp[k])
    jp_up[k] = np.where(better, up_j, jp[k])
    window[k] = fold
    to_end[k] = reached
    return sign * vp_up, jp_up, window, to_end


def _collapse_bracket(table, model, grid, vp, vv, after, peak_solution, swept, *, sign):
    """Where the single solves fall off the charged branch above each peak ``vp`` (before
    the valley ``vv``): the first bias whose well charge lies below
    :data:`FOLD_CHARGE_COLLAPSE` of the peak's (a peak's charge of at least
    :data:`JUMP_FLOOR_CM2`), to :data:`FOLD_TOLERANCE_V`, and the last single solve on the
    branch below it (the up branch's start).

    The bracket comes from the sweep's own points (``swept``: biases ``|V|``, currents,
    node positions, potentials and well charges of the stacks, or None) and the
    refinement's first fallen sample (``after``: bias, current, charge), and is halved by
    single solves until it is narrower than :data:`FOLD_TOLERANCE_V`: so it does not
    depend on which samples the grid happened to hold (on the GaAs example the single
    solves fall off 5.5 mV after a smooth top, which the refinement's samples reached on
    61 biases and not on 121; DEVELOPERS.md). Without charges (mixed devices) the
    refinement's first fallen sample is taken, from the peak's solve.

    Biases and currents are taken along the branch ``sign`` (``|V|`` and magnitudes).

    Returns the start's bias and solve (node positions ``(n, n_nodes)`` and solution, on
    ``table``'s grid) and the first bias off the branch with its single-solve current (NaN
    where the single solves stay on the branch).
    """
    from .electrostatics import PoissonSolution, extended_slice_grid, potential_on_grid

    after_v, after_j, after_w = after
    source_nm, peak = peak_solution[0].center_nm, peak_solution[1]
    target_nm = extended_slice_grid(table, slice_nm=model.slice_nm).center_nm
    pot = potential_on_grid(
        peak.potential_ev, source_center_nm=source_nm, target_center_nm=target_nm
    )[:, 0]
    well = peak.well_sheet_cm2[:, 0].copy()
    v_lo, v_hi, j_hi = vp.copy(), np.full(vp.size, np.nan), np.full(vp.size, np.nan)
    limit = FOLD_CHARGE_COLLAPSE * well
    known = np.isfinite(after_w) | (swept is not None)  # the charges (else the old rule)
    charged = ~known | (well >= JUMP_FLOOR_CM2)  # a charge worth a branch at the peak
    fallen = (after_v < vv) & ((after_w < limit) | ~known)
    v_hi, j_hi = np.where(fallen, after_v, v_hi), np.where(fallen, after_j, j_hi)
    if swept is not None:
        v_sw, j_sw, center_sw, u_sw, w_sw = swept
        last_held = np.full(vp.size, -1)  # the sweep point each start moves to (-1: the peak)
        for s in range(vp.size):
            inside = (v_sw > vp[s]) & (v_sw < min(vv[s], np.nan_to_num(v_hi[s], nan=np.inf)))
            gone = np.nonzero(inside & (w_sw[s] < limit[s]))[0]
            if gone.size:
                v_hi[s], j_hi[s] = v_sw[gone[0]], j_sw[s, gone[0]]
            held = np.nonzero(inside & (v_sw < v_hi[s]) & (w_sw[s] >= limit[s]))[0]
            if held.size:
                last_held[s] = held[-1]
        moved = np.nonzero(last_held >= 0)[0]
        if moved.size:  # only those points' potentials are carried to this grid
            at = last_held[moved]
            v_lo[moved], well[moved] = v_sw[at], w_sw[moved, at]
            pot[moved] = potential_on_grid(
                u_sw[moved, at][:, None],
                source_center_nm=center_sw[moved],
                target_center_nm=target_nm[moved],
            )[:, 0]
    v_hi = np.where(charged, v_hi, np.nan)
    # halve the bracket by single solves of the stacks whose bracket is still wide (a stack
    # whose solve fails keeps the bracket it has)
    hi_pot, failed = np.full_like(pot, np.nan), np.zeros(vp.size, bool)
    while True:
        wide = known & ~failed & np.isfinite(v_hi) & (v_hi - v_lo >= FOLD_TOLERANCE_V)
        k = np.nonzero(wide)[0]
        if not k.size:
            break
        mid = 0.5 * (v_lo[k] + v_hi[k])
        u, charge = _single_solves(table.take(k), sign * mid, model, target_nm[k])
        failed[k] = np.isnan(charge)
        k, mid, u, charge = k[~failed[k]], mid[~failed[k]], u[~failed[k]], charge[~failed[k]]
        on = charge >= limit[k]
        up, down = k[on], k[~on]
        v_lo[up], pot[up], well[up] = mid[on], u[on], charge[on]
        v_hi[down], hi_pot[down], j_hi[down] = mid[~on], u[~on], np.nan
    redo = np.nonzero(np.isfinite(v_hi) & np.isnan(j_hi))[0]
    if redo.size:  # the single-solve current where the bracket's upper end moved
        sub = table.take(redo)
        sub_nm = extended_slice_grid(sub, slice_nm=model.slice_nm)
        u = potential_on_grid(
            hi_pot[redo][:, None], source_center_nm=target_nm[redo],
            target_center_nm=sub_nm.center_nm,
        )  # fmt: skip
        profile = profile_from_potential(sub, sub_nm, u)
        j_hi[redo] = (
            sign * _current_of_profile(profile, sub, sign * v_hi[redo][:, None], model, grid)[:, 0]
        )
    start = PoissonSolution(
        potential_ev=pot[:, None], electron_cm3=np.zeros_like(pot[:, None]), iterations=0,
        well_sheet_cm2=well[:, None],
    )  # fmt: skip
    return v_lo, (target_nm, start), v_hi, j_hi


def _single_solves(table, bias_v, model, target_nm):
    """The single solve of each stack at its bias ``bias_v`` (``(n,)``): its potential on the
    node positions ``target_nm`` and its well charge; where the batch does not converge each
    stack alone, NaN for one that does not converge alone either (as :func:`_currents_each`)."""
    from .electrostatics import ElectrostaticsConvergenceError, potential_on_grid

    def solved(sub, v, nm):
        g, sol = _solve_at(sub, v[:, None], model)
        u = potential_on_grid(sol.potential_ev, source_center_nm=g.center_nm, target_center_nm=nm)
        return u[:, 0], sol.well_sheet_cm2[:, 0]

    try:
        return solved(table, bias_v, target_nm)
    except ElectrostaticsConvergenceError:
        u, charge = np.full(target_nm.shape, np.nan), np.full(bias_v.size, np.nan)
        for i in range(table.n_stacks):
            try:
                one_u, one_charge = solved(table.take([i]), bias_v[[i]], target_nm[[i]])
            except ElectrostaticsConvergenceError:
                continue
            u[i], charge[i] = one_u[0], one_charge[0]
        return u, charge


def metrics_branch(bias: np.ndarray) -> tuple[np.ndarray, float] | None:
    """Indices of the branch the metrics are taken on (ordered by increasing ``|V|``) and its
    sign: forward with at least three positive biases, else reverse, else None. Either
    branch starts at zero bias where the sweep has it, so that a peak on the first sample
    past it counts on both polarities."""
    if np.count_nonzero(bias > 0) >= 3:
        return np.nonzero(bias >= 0)[0], 1.0
    if np.count_nonzero(bias < 0) >= 3:
        return np.nonzero(bias <= 0)[0][::-1], -1.0
    return None


def _peak_and_valley(devices, model, grid, v_side, j_side, rows, ip, iv, bounded, sign, *, refine):
    """Peak and valley (bias, current) of the devices ``rows`` from their sweep points
    ``ip``, ``iv`` on the branch ``v_side``, ``j_side`` (magnitudes), refined by
    :func:`_refine` with ``refine``; a valley ``bounded`` by the sweep stays on its point.
    Returns ``vp, jp, vv, jv``, the first point past each peak that fell ``(v, j, well
    charge)`` (None without refinement; the charge NaN where not known) and the
    self-consistent solve at each refined peak (the peak's entries of :func:`_refine`'s
    kept solves; None without them)."""
    vp, jp = v_side[ip[rows]], j_side[rows, ip[rows]]
    vv, jv = v_side[iv[rows]], j_side[rows, iv[rows]]
    if not refine:
        return vp, jp, vv, jv, None, None
    step = np.abs(np.diff(v_side)).max() if v_side.size > 1 else 0.0
    n = rows.size
    extremum = np.concatenate([np.ones(n), -np.ones(n)])  # maximise J at peaks, -J at valleys
    # a peak and valley nearer each other than half the sweep's largest spacing (the extra
    # points of a collapse between two sweep points, _hidden_collapse) span only to each
    # other: a peak's span beyond its valley found the next resonance's rise
    half = np.where(np.abs(vv - vp) < 0.5 * step, np.abs(vv - vp), step)
    # and a valley stays past its peak: its span reaching below the peak found the
    # current's fall towards zero bias and followed it (_keep_within_bounds). A peak is not
    # bound by its sampled valley: a higher top just past that sample is the peak (seed
    # 132, stack 51: 3255 A/cm^2 10 mV before the valley found on 241 biases)
    after = vv > vp  # the valley at the larger bias (else the branch runs to negative ones)

    def past(peak_v, rows_after):
        """The bounds (lowest, highest bias) of valleys past peaks at ``peak_v``."""
        return np.where(rows_after, peak_v, -np.inf), np.where(rows_after, np.inf, peak_v)

    valley_low, valley_high = past(vp, after)
    free = np.full(n, np.inf)
    low, high = np.concatenate([-free, valley_low]), np.concatenate([free, valley_high])
    c, y, (after_v, after_j, after_w), kept, narrow = _refine(
        devices.take(rows).twice(),
        model,
        grid,
        np.concatenate([vp, vv]),
        np.concatenate([half, half]),
        extremum * sign,
        extremum > 0,
        (low, high),
    )
    y = sign * y  # back to magnitudes on this branch
    # the refined peak, or the sampled one where higher; a spike taken down
    # (_drop_narrow_spikes) stays down, though a sample of the sweep lie on it
    vp, jp = c[:n], np.where(narrow[:n], y[:n], np.maximum(y[:n], jp))
    interior = ~bounded[rows]  # a valley on the last point computed stays there
    sampled_vv = vv  # (vv is rebound below, not written)
    vv = np.where(interior, c[n:], vv)
    jv = np.where(interior, np.minimum(y[n:], jv), jv)
    # a peak and a valley refined towards each other past one another (a valley 6 mV
    # before its peak on an InAs/AlSb stack at 19 K, PVCR 1.07: seed 146, stack 26): that
    # valley is refined again, past the refined peak
    crossed = np.nonzero(interior & np.where(after, vv <= vp, vv >= vp))[0]
    if crossed.size:
        bounds = past(vp[crossed], after[crossed])
        c2, y2, _, _, _ = _refine(
            devices.take(rows[crossed]),
            model,
            grid,
            np.clip(sampled_vv[crossed], *bounds),  # from the sampled valley, within them
            np.full(crossed.size, step),
            np.full(crossed.size, -sign),
            np.zeros(crossed.size, bool),
            bounds,
        )
        vv[crossed], jv[crossed] = c2, sign * y2
    # the refinement's solve at its best point, vp
    at_peak = None if kept is None or any(k is None for k in kept[:n]) else kept[:n]
    return vp, jp, vv, jv, (after_v[:n], after_j[:n], after_w[:n]), at_peak


def _peak_figures(
    metrics, peaked, model, grid, *, rows, up_sweep, curve, extrema, series_resistance_ohm_um2
) -> None:
    """Fill ``metrics`` (in place) with the figures read at the peak of the stacks ``rows``
    (``peaked``): the device figures (:func:`physics.device.device_figures`) from the
    peak's profile and, with the self-consistent model and ``up_sweep`` (the branch's sign,
    +1 forward, -1 reverse; 0: none), the up sweep's peak and bistable window
    (:func:`_up_sweep_peaks`; the peak's solve is shared).
    ``curve`` is ``(|V|, J, table)`` of the branch and every device; ``extrema`` is
    ``(vp, jp, vv, after, at_peak, swept)``: the first five from :func:`_peak_and_valley`
    (``at_peak``: the refinement's solves at ``vp``, which spare the peak's own solve, or
    None), ``swept`` the sweep's points of ``rows`` (see :func:`_collapse_bracket`) or None."""
    v_abs, j_side, table = curve
    vp, jp, vv, after, at_peak, swept = extrema
    peak_solution = None  # the self-consistent solve at the peak, shared with the up branch
    if model.electrostatics == "self-consistent":
        peak_solution = (
            _solve_at(peaked, vp[:, None], model)
            if at_peak is None
            else _kept_solution(peaked, at_peak, model)
        )
        peak_profile = profile_from_potential(
            peaked, peak_solution[0], peak_solution[1].potential_ev
        )
    else:
        peak_profile = band_profile(peaked, vp[:, None], model=model)
    metrics.update(
        device_figures(
            table,
            v_abs,
            current_density_a_cm2=j_side,
            metrics=metrics,
            peak_profile=peak_profile,
            rows=rows,
            series_resistance_ohm_um2=series_resistance_ohm_um2,
        )
    )
    for name in BISTABILITY_NAMES:
        metrics[name] = np.full(table.n_stacks, np.nan)
    up = (vp, jp, np.zeros(rows.size), np.zeros(rows.size))
    if up_sweep and peak_solution is not None and after is not None:
        # the last bias computed of each stack (the sweep's or its extension's)
        v_stop = np.max(np.where(np.isfinite(j_side[rows]), v_abs, -np.inf), axis=1)
        up = _up_sweep_peaks(
            peaked,
            model,
            grid,
            vp,
            jp,
            vv,
            after,
            peak_solution,
            swept,
            sign=up_sweep,
            v_stop=v_stop,
        )
    vp_up, jp_up, window, to_end = up
    metrics["peak_current_density_up_a_cm2"][rows] = jp_up
    metrics["peak_voltage_up_v"][rows] = vp_up
    metrics["bistable_window_v"][rows] = window
    metrics["bistable_window_to_sweep_end"][rows] = to_end


def sweep(
    table: LayerTable,
    bias_v: np.ndarray,
    *,
    model: ModelOptions = ModelOptions(),
    grid: EnergyGrid = EnergyGrid(),
    refine: bool = True,
    series_resistance_ohm_um2: float | np.ndarray = 0.0,
    area_weights: np.ndarray | None = None,
    at_bias_v: Sequence[float] = (),
    area_um2: float | None = None,
) -> IVCurves:
    """I-V sweep of every stack in ``table`` (or device, see ``area_weights``) with figures of merit.

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
        Series resistance times area, scalar or ``(n_stacks,)`` (per device
        with ``area_weights``); enters only the cutoff frequency
        (:mod:`wellwright.physics.device`).
    area_weights
        ``(n_devices, n_stacks)`` area shares: each device is the laterally
        parallel mixture of its stacks (monolayer islands,
        :mod:`physics.islands`), each stack in one device; the curves and the
        figures of merit are the devices' (the mixed curve's peak and valley,
        refined on the mixed curve; capacitance, lifetime and the up sweep's
        branch from each device's largest island). ``None``: each stack is a
        device.
    at_bias_v
        Biases, V, at which the current density is computed exactly (one more
        batched call, never interpolated on the sweep grid): metrics
        :func:`at_bias_key` in A/cm^2 and, with ``area_um2``,
        :func:`at_bias_current_key` in mA (the current of a mesa of that area).
    area_um2
        Mesa area, um^2, for the mA form of ``at_bias_v``.

    Notes
    -----
    A valley on the sweep's last point is looked for beyond it (see the module
    docstring); :data:`VALLEY_BOUNDED` says where it was not found.
    """
    curves, between = _sweep_on(
        table,
        bias_v,
        model=model,
        grid=grid,
        refine=refine,
        series_resistance_ohm_um2=series_resistance_ohm_um2,
        area_weights=area_weights,
        at_bias_v=at_bias_v,
        area_um2=area_um2,
    )
    if between:
        curves = _look_between(
            curves,
            table,
            between,
            model=model,
            grid=grid,
            refine=refine,
            series_resistance_ohm_um2=series_resistance_ohm_um2,
            at_bias_v=at_bias_v,
            area_um2=area_um2,
        )
    return curves


def _look_between(curves: IVCurves, table: LayerTable, between: dict, **options) -> IVCurves:
    """Devices whose well charge falls before their peak (``between``,
    :func:`_hidden_collapse`): the current at :data:`REFINE_POINTS` biases inside each of the
    two intervals, from the last point before the fall to the charge's low point and from
    there to the next point (one call for all of them); where those show
    a clear NDR peak (:data:`CLEAR_NDR_DROP`) there or before, that device is swept again
    alone with them (:func:`_sweep_on`) and its figures of merit and the new points replace
    its own (:func:`_with_device_of`). A weak NDR there is left alone: on a stack whose single
    solves land on either of two branches there the refinement wandered to the next
    resonance."""
    falls = [(s, t) for s in sorted(between) for t in between[s]]  # a row per fall
    rows, ends = np.array([s for s, _ in falls]), np.array([t for _, t in falls])
    u = np.linspace(0.0, 1.0, REFINE_POINTS + 2)[1:-1]
    extra = np.concatenate(
        [ends[:, i : i + 1] + (ends[:, i + 1 : i + 2] - ends[:, i : i + 1]) * u for i in (0, 1)],
        axis=1,
    )
    j_extra = _Devices(table.take(rows)).current(extra, options["model"], options["grid"])
    r_all = np.broadcast_to(options.pop("series_resistance_ohm_um2"), (table.n_stacks,))
    for s in sorted(between):
        mine = rows == s
        bias = np.concatenate([curves.bias_v, extra[mine].ravel()])
        order = np.argsort(bias)
        branch = metrics_branch(bias[order])
        if branch is None:
            continue
        sel, sign = branch
        v = bias[order][sel]
        j = np.concatenate([curves.current_density_a_cm2[s], j_extra[mine].ravel()])
        j = sign * j[order][sel]
        floor = resolved_current_floor_a_cm2(table.take(np.array([s])))
        ip, iv = (i[0] for i in locate_peak_valley(np.abs(v), j[None, :], floor_a_cm2=floor))
        if (
            ip < 0
            or abs(v[ip]) > np.max(np.abs(ends[mine]))
            or j[iv] >= (1 - CLEAR_NDR_DROP) * j[ip]
        ):
            continue  # no clear NDR peak before the last fall's intervals end
        one, _ = _sweep_on(
            table.take(np.array([s])),
            np.unique(bias),
            series_resistance_ohm_um2=r_all[[s]],
            area_weights=None,
            look_between=False,
            **options,
        )
        curves = _with_device_of(curves, s, one)
    return curves


def _hidden_collapse(solves, sel, v_side, ip) -> dict:
    """The devices whose well charge, along increasing ``|V|`` before their peak's sweep
    point (or anywhere, where the sweep shows no NDR), falls below :data:`HIDDEN_CHARGE_DROP`
    of its largest value since the sweep's start or the last fall's low point (at least
    :data:`HIDDEN_CHARGE_FLOOR_CM2`): device -> for each such fall, the biases of the last
    sweep point before it, of the charge's low point after it and of the point after that
    (one spacing beyond the sweep's end there). A
    state leaving the emitter's supply window empties the well, and the resonance's NDR lies where it has
    left, which can be narrower than the sweep's spacing (a 12.3 nm GaAs/AlGaAs well at
    211 K: a 19 % fall within 4 mV between points 11 mV apart; DEVELOPERS.md). Measured
    against the largest charge so far, not the point before, so that a fall spread over
    several points is seen on every grid (between neighbouring points it was a fall to 0.30
    on 61 biases, 0.50 on 121 and 0.65 on 241 on an InP/InAlAs stack), and from the last
    fall's low point on, so that a second state's fall after a first is seen where the charge
    has not come back to 0.7 of its first top (a 14.7 nm InP well at 112 K, `random_stack`
    seed 138 draw 17: 4.8e11, 3.3e11, then 3.0e11 to 1.5e11 cm^-2 over the second state's
    NDR, 61 biases reported Jp 2.4 times the 241-bias one). Empty without the
    self-consistent solves."""
    if not solves or solves[0][1].well_sheet_cm2 is None:
        return {}
    well = solves[0][1].well_sheet_cm2[:, sel]
    found: dict = {}
    for s in range(well.shape[0]):  # per stack: a short loop over the sweep's points
        end = ip[s] if ip[s] >= 0 else v_side.size
        w, top, k = well[s], np.nan_to_num(well[s, 0]), 1  # (a failed solve's NaN: no fall)
        while k < end:
            if not (top >= HIDDEN_CHARGE_FLOOR_CM2 and w[k] < HIDDEN_CHARGE_DROP * top):
                top, k = max(top, np.nan_to_num(w[k])), k + 1
                continue
            low = k  # on to the charge's low point (its next value not smaller)
            while low + 1 < end and w[low + 1] < w[low]:
                low += 1
            if low + 1 >= end and ip[s] >= 0:
                break  # the low point is the peak's own neighbourhood
            b = float(v_side[low])
            c = float(v_side[low + 1]) if low + 1 < v_side.size else 2 * b - float(v_side[low - 1])
            found.setdefault(s, []).append((float(v_side[k - 1]), b, c))
            top, k = np.nan_to_num(w[low]), low + 1  # the next fall: from this low point on
    return found


def _with_device_of(curves: IVCurves, s: int, one: IVCurves) -> IVCurves:
    """``curves`` with device ``s``'s figures of merit from ``one`` (its own sweep on more
    biases) and the biases ``one`` computed beyond ``curves``' own (its extra points and
    its extension) as device ``s``'s extension points, its earlier extension dropped."""
    n = curves.current_density_a_cm2.shape[0]
    metrics = {name: values.copy() for name, values in curves.metrics.items()}
    for name, values in one.metrics.items():  # (the up sweep's names only where a peak was)
        metrics.setdefault(name, np.full(n, np.nan))[s] = values[0]
    extra = ~np.isin(one.bias_v, curves.bias_v)
    add_v = np.concatenate([one.bias_v[extra], one.extension_bias_v])
    add_j = np.concatenate(
        [
            one.current_density_a_cm2[0, extra],
            np.zeros(0) if one.extension_a_cm2 is None else one.extension_a_cm2[0],
        ]
    )
    old = (
        np.full((n, 0), np.nan) if curves.extension_a_cm2 is None else curves.extension_a_cm2.copy()
    )
    old[s] = np.nan
    new = np.full((n, add_v.size), np.nan)
    new[s] = add_j
    return replace(
        curves,
        metrics=metrics,
        extension_bias_v=np.concatenate([curves.extension_bias_v, add_v]),
        extension_a_cm2=np.concatenate([old, new], axis=1),
    )


def _sweep_on(
    table: LayerTable,
    bias_v: np.ndarray,
    *,
    model: ModelOptions,
    grid: EnergyGrid,
    refine: bool,
    series_resistance_ohm_um2: float | np.ndarray,
    area_weights: np.ndarray | None,
    at_bias_v: Sequence[float],
    area_um2: float | None,
    look_between: bool = True,
) -> tuple[IVCurves, dict]:
    """:func:`sweep`'s work; also returns, with ``look_between``, the devices whose well
    charge falls before their peak (:func:`_hidden_collapse`): device -> three biases."""
    bias = _sweep_biases(bias_v)
    if area_weights is not None:
        area_weights = _check_area_weights(area_weights, table.n_stacks)
    devices = _Devices(table, area_weights)
    # the sweep's self-consistent solves (one stack per device): their well charges bracket
    # where the single solves fall off a charged branch above a peak (_collapse_bracket)
    solves: list | None = (
        []
        if refine and devices.weights is None and model.electrostatics == "self-consistent"
        else None
    )
    j = devices.current(bias, model, grid, keep=solves)
    table = devices.largest()  # the stack-level figures below: one stack per device
    metrics = {name: np.full(devices.n, np.nan) for name in METRIC_NAMES}
    metrics.update(_at_bias_metrics(devices, at_bias_v, area_um2, model, grid))

    branch = metrics_branch(bias)
    if branch is None:
        return IVCurves(bias, j, metrics), {}
    sel, sign = branch
    v_side = bias[sel]
    j_side = sign * j[:, sel]
    ip, iv = _resolved_peak_valley(np.abs(v_side), j_side, table)
    between = _hidden_collapse(solves, sel, v_side, ip) if look_between else {}
    has = ip >= 0
    if not np.any(has):
        return IVCurves(bias, j, metrics), between

    # a valley the current does not clearly rise from before the end: go on beyond it
    bounded = np.zeros(devices.n, bool)
    ext_v, ext_j = np.zeros(0), None
    need = np.array(
        [has[s] and _valley_rise(j_side[s], iv[s]) <= CLEAR_NDR_DROP for s in range(devices.n)]
    )
    if np.any(need):
        mag, ext_j, iv, bounded = _extend_valleys(
            devices, model, grid, np.abs(v_side), j_side, ip, iv, need, sign
        )
        ext_v = sign * mag
        v_side = np.concatenate([v_side, ext_v])  # common biases; NaN where not computed
        j_side = np.concatenate([j_side, ext_j], axis=1)
        ext_j = sign * ext_j
    curves = functools.partial(IVCurves, extension_bias_v=ext_v, extension_a_cm2=ext_j)

    rows = np.nonzero(has)[0]
    vp, jp, vv, jv, after, at_peak = _peak_and_valley(
        devices, model, grid, v_side, j_side, rows, ip, iv, bounded, sign, refine=refine
    )
    metrics["peak_current_density_a_cm2"][rows] = jp
    metrics["peak_voltage_v"][rows] = vp
    metrics["valley_current_density_a_cm2"][rows] = jv
    metrics["valley_voltage_v"][rows] = vv
    metrics["pvcr"][rows] = jp / np.where(jv > 0, jv, np.nan)
    metrics["delta_current_density_a_cm2"][rows] = jp - jv
    metrics["delta_voltage_v"][rows] = np.abs(vv - vp)
    metrics[VALLEY_BOUNDED][rows] = bounded[rows].astype(float)
    swept = None  # the branch's sweep points of the stacks rows: biases, currents, solves
    if solves:
        g, sol = solves[0]
        swept = (
            np.abs(bias[sel]),
            j_side[rows, : sel.size],
            g.center_nm[rows],
            sol.potential_ev[rows][:, sel],
            sol.well_sheet_cm2[rows][:, sel],
        )
    _peak_figures(
        metrics,
        table.take(rows),
        model,
        grid,
        rows=rows,
        up_sweep=sign if refine else 0.0,
        curve=(np.abs(v_side), j_side, table),
        extrema=(vp, jp, vv, after, at_peak, swept),
        series_resistance_ohm_um2=series_resistance_ohm_um2,
    )
    return curves(bias, j, metrics), between


def stack_iv(
    stack: Stack,
    bias_v: np.ndarray,
    *,
    grid: EnergyGrid = EnergyGrid(),
    refine: bool = True,
    island_layers: Sequence[int] = (),
) -> IVCurves:
    """I-V sweep of one stack (``n_stacks = 1``) with the stack's own model options.

    ``island_layers``: indices of layers whose fractional ``thickness_ml`` is
    taken as monolayer islands of the two neighbouring whole thicknesses; the
    curve is then the area-weighted mixture of the whole-monolayer stacks
    (:mod:`physics.islands`), and its figures of merit are the mixed curve's.

    Parameters
    ----------
    stack
        One validated stack; its ``model`` and ``device`` options apply.
    bias_v
        Biases, V, ``(n_biases,)``.
    grid
        Adaptive energy grid settings.
    refine
        Locate peak and valley more finely than the sweep grid.
    island_layers
        Indices (from 0) of layers with a fractional ``thickness_ml`` taken as monolayer
        islands.
    """
    if not isinstance(stack, Stack):
        raise TypeError(
            "stack must be a Stack (physics.load_stack(path) or parse_stack(dict)), "
            f"got {type(stack).__name__}"
        )
    table, weights = island_table([stack], island_layers)
    return sweep(
        table,
        bias_v,
        model=stack.model,
        grid=grid,
        refine=refine,
        series_resistance_ohm_um2=stack.device.series_resistance_ohm_um2,
        area_weights=weights,
    )


def island_table(
    stacks: Sequence[Stack], island_layers: Sequence[int] = ()
) -> tuple[LayerTable, np.ndarray | None]:
    """The stacks' layer table with the fractional ``thickness_ml`` of ``island_layers``
    taken as monolayer islands, and the area weights mixing its rows into the stacks.

    Without island layers: the stacks' own table and ``None`` (one device per row).
    Otherwise each stack becomes its whole-monolayer combinations
    (:func:`physics.islands.island_mixture`; a whole thickness is one combination),
    and the weights are ``(n_stacks, n_rows)`` for :func:`sweep`'s ``area_weights``.

    Parameters
    ----------
    stacks
        Validated stacks with the same layer count.
    island_layers
        Indices (from 0) of the layers taken as islands.
    """
    table = LayerTable.from_stacks(list(stacks))
    if not island_layers:
        return table, None
    ml = np.full(table.thickness_nm.shape, np.nan)
    mono = np.full(table.thickness_nm.shape, np.nan)
    for i in island_layers:
        ml[:, i] = [s.layers[i].thickness_ml for s in stacks]
        mono[:, i] = [s.layers[i].monolayer_nm for s in stacks]
    mix = island_mixture(ml)
    rows = table.take(mix.owner)
    whole = np.where(np.isfinite(mix.whole_ml), mix.whole_ml * mono[mix.owner], rows.thickness_nm)
    weights = area_weight_matrix(mix.owner, area_share=mix.area_share, n_samples=len(stacks))
    return rows.with_thickness_nm(whole), weights


def external_bias_v(
    bias_v: np.ndarray, current_density_a_cm2: np.ndarray, *, series_resistance_ohm_um2: float
) -> np.ndarray:
    """Terminal bias with a series resistance: ``V_ext = V + J R`` (R in ohm um^2, J in A/cm^2).

    Parameters
    ----------
    bias_v
        Intrinsic bias ``V``, V, any shape.
    current_density_a_cm2
        Current density ``J`` at it, A/cm^2, broadcasting with ``bias_v``.
    series_resistance_ohm_um2
        Series resistance times area ``R``, ohm um^2.
    """
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

    Parameters
    ----------
    table
        Layers of ``n_stacks`` stacks.
    bias_v
        Biases of the up sweep, V, ``(n_biases,)`` strictly increasing; the down sweep runs them
        backwards.
    model
        Model options; default :class:`physics.stack.ModelOptions`.
    grid
        Adaptive energy grid settings; default :class:`physics.current.EnergyGrid`.
    """
    model = ModelOptions() if model is None else model
    grid = EnergyGrid() if grid is None else grid
    bias = _sweep_biases(bias_v)
    if model.electrostatics != "self-consistent":
        j = current_at_bias(table, bias, model=model, grid=grid)
        return HysteresisCurves(bias, j, j.copy())
    branches = []
    for order in (np.arange(bias.size), np.arange(bias.size)[::-1]):
        previous, previous_well = None, None
        potentials = [np.empty(0)] * bias.size  # every slot filled below
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
        branches.append(_current_of_profile(profile, table, bias, model, grid))
    return HysteresisCurves(bias, branches[0], branches[1])
