"""The fit: robust least squares in log current, priors as penalties, multistart, uncertainties.

Residuals (Notes)
-----------------
For each measured point ``i`` of a sweep,
``r_i = sqrt(w_i) (ln(|J_model| + f) - ln(|J_meas| + f)) / s`` with the floor
``f = 1e-3 max |J_meas|`` (currents below a thousandth of the largest are
instrument floor, not shape), ``s`` the scatter of the measurement in log
current (first 0.05, then re-estimated from the weighted residuals of the
best fit, and the fit refined once more with it). The weights make the
three parts of the curve count alike: the measured points are split per
polarity at the measured peak and valley into the rise (up to the peak),
the NDR region (after the peak, up to the valley) and the rest; each part
gets the same total weight, shared equally by its points, scaled so that
the weights sum to the number of points (a sweep with few points in its
NDR region would otherwise be fitted on the rise and the valley alone),
each capped at ``MAX_WEIGHT`` (a single point on the NDR cliff, where the
measured current is least reliable, must not outweigh the rest).
The priors add ``(theta - theta_nominal) / sigma`` per parameter (and
``(d_xrd - value) / sigma`` for an X-ray thickness). The loss is
``soft_l1`` with ``f_scale = 2``: residuals beyond two sigmas (a
bias-circuit oscillation in the NDR region, a contact glitch) count
linearly, not quadratically (``scipy.optimize.least_squares``).

Multistart: every whole-monolayer combination of the fitted thicknesses
within one monolayer of nominal (``3**k`` stacks, one batched kernel call;
one-layer moves only above 729) is evaluated with the series resistance
fitted on it (no kernel call needed: a scan of resistances whose largest
drop ``|J| R`` is 0 or 0.1 % to 50 % of the measured bias span, then a
local fit from the best of them; from the nominal resistance alone the fit
stopped at once: 0 ohm um^2 on the demo data, 20 true, and on the two
areas of the tests, where the local fits then stuck behind the NDR jump's
discontinuity); the best ``starts`` combinations
(those scoring within ``START_FACTOR`` of the best) start local fits of
every parameter. The continuous physics parameters (rates,
compositions, doping, band offsets, model parameters) start at nominal
there; ``RANDOM_STARTS`` further starts draw them at random (a Gaussian of
twice the prior sigma, or uniform between the bounds for a parameter without
a prior) on the best whole-monolayer combination, scored in one more batch;
the best draw replaces that combination's start when it scores better (the
other combinations keep theirs, so a one-monolayer alternative is still
refined), so that a model parameter far from its nominal value (the valley
channel's strength) is reached. This draw is the fit's
only random step: ``seed`` makes it reproducible (the same seed, the same
record). Distinct optima within
``AMBIGUOUS_DCHI2`` of the best are reported as alternatives, so a
one-monolayer ambiguity is shown, not hidden.

Uncertainties: the Gauss-Newton covariance ``(J^T J)^-1`` of the
(non-robustified) residuals, priors included, at the optimum, with ``J``
from central differences (thicknesses +- a quarter monolayer, so that the
kink of the island current at a whole monolayer is averaged, not taken
from one side), and 95 % intervals ``value +- 1.96 sd``: a linear
approximation. A thickness's interval is asymmetric: its upper (lower)
half uses the largest of the central sd, the sd from the slope a
quarter monolayer above (below), and, for a value within a quarter
monolayer of a whole monolayer, the sd from the slope of its own cell up
to that monolayer, since a barrier's current falls more gently above a
whole monolayer than it rises below it (an estimate just above a whole
monolayer sits on the gentle side: the quarter-monolayer step down
crosses into the steep cell and alone gave too short a lower half).
A measured point next to the NDR jump (where a measured up sweep jumps to
the valley branch) changes branch in the model within one difference step
of a parameter: its residual is discontinuous there, and a difference
across the jump (a change of ln J of order one over a step that moves the
rest by a few hundredths) made the series resistance look known to
0.1 ohm um^2 when the truth was 4 ohm um^2 away at a chi-square only 4
higher. Where one side's difference exceeds the other's by ``JUMP_RATIO``
(and changes the residual by more than ``JUMP_SIGMAS``), the slope of the
branch the point is on, the other side's, is used.

Current scale: before the fit, each sweep's largest measured current density
is set against the model's at the measured biases, for the nominal stack and
for the stacks with every fitted thickness at the thin and at the thick end of
its range (other parameters nominal): the least and largest of the three are
what the stack can carry within the fit's ranges. A sweep more than
``REACH_MARGIN`` beyond them cannot be fitted and is refused (bad input: the
units, most likely). One more than ``UNITS_FACTOR`` from the nominal stack's
is fitted with a warning naming the units (:mod:`.record`).
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy.optimize import least_squares
from wellwright.optimize.calibrate.problem import KernelCache, Problem
from wellwright.optimize.study.growth import as_generator
from wellwright.physics.errors import InputError
from wellwright.physics.iv import locate_peak_valley

__all__ = [
    "FitResult",
    "run_fit",
    "point_weights",
    "current_scale",
    "units_hint",
    "AMBIGUOUS_DCHI2",
]

FLOOR_FRACTION = 1e-3
INITIAL_SCATTER = 0.05
F_SCALE = 2.0
STEP_Z = 0.05
AMBIGUOUS_DCHI2 = 4.0
Z95 = 1.959963984540054
CORRELATED = 0.9
PRIOR_DOMINATED = 0.7
MAX_COMBOS = 729
#: Largest weight of one point (1 = uniform weighting): a steep NDR region of one or two
#: points would otherwise outweigh the rest, and there the current is least reliable.
MAX_WEIGHT = 4.0
REFINE_NFEV = 6
MAX_CELL_MOVES = 3
THICKNESS_STEP_ML = 0.25
#: A start is refined when its whole-monolayer score is within this factor of the best one.
START_FACTOR = 3.0
#: A residual whose two one-sided slopes differ by more than this factor of the smaller one,
#: changing by more than ``JUMP_SIGMAS`` over a step, jumped branch at the NDR jump.
JUMP_RATIO = 10.0
JUMP_SIGMAS = 3.0
#: Random draws of the continuous physics parameters on the best whole-monolayer combination.
RANDOM_STARTS = 8
#: Width of the Gaussian draw of a parameter with a prior, in prior sigmas.
RANDOM_PRIOR_SIGMAS = 2.0
#: Series resistances scanned before a start's resistance fit: those whose largest voltage drop
#: ``|J| R`` over the measured sweeps is 0 or log-spaced from ``RESISTANCE_SCAN_LOW`` to
#: ``RESISTANCE_SCAN_HIGH`` of the measured bias span (each resistance parameter; their product).
RESISTANCE_SCAN = 13
RESISTANCE_SCAN_LOW = 1e-3
RESISTANCE_SCAN_HIGH = 0.5
#: A sweep's largest current density more than this factor from the nominal stack's (either
#: way) warns of its units. On the InP example every fitted thickness 4 ML off (the ends of the
#: fit's ranges) moves it by 1/31 to 32x, and the invented wafer (two layers 1 ML off) by 0.55x;
#: a unit slip moves it by 1e3 (mA read as A) or by the area in cm^2 (A read as A/cm^2).
UNITS_FACTOR = 100.0
#: A sweep's largest current density more than this factor past what the stacks at the ends of
#: the fitted thicknesses' ranges carry is refused (room for the parameters those stacks keep
#: nominal: rates, the valley channel's strength).
REACH_MARGIN = 10.0


@dataclass
class FitResult:
    """The optimum and what the record needs (plain arrays)."""

    z: np.ndarray
    dev: np.ndarray
    values: np.ndarray
    sd: np.ndarray  #: standard deviations of the reported values (central slopes)
    correlation: np.ndarray
    scatter: float
    chi2: float
    n_points: int
    alternatives: list[dict[str, Any]] = field(default_factory=list)
    starts: int = 0
    random_starts: int = 0
    seed: int | None = None
    evaluations: int = 0
    notes: list[str] = field(default_factory=list)
    combos: int = 0
    sd_low: np.ndarray | None = None  #: for the lower interval bound (one-sided at a kink)
    sd_high: np.ndarray | None = None  #: for the upper bound
    scale: list[dict[str, Any]] = field(default_factory=list)  #: :func:`current_scale`


def point_weights(bias_v: np.ndarray, current: np.ndarray) -> np.ndarray:
    """Weights of the measured points: rise, NDR region and the rest count alike (see module notes).

    Parameters
    ----------
    bias_v
        Measured biases, V.
    current
        Measured current densities there, A/cm^2.
    """
    w = np.zeros(bias_v.size)
    for sign in (1.0, -1.0):
        side = np.nonzero(sign * bias_v > 0)[0]
        if side.size == 0:
            continue
        side = side[np.argsort(np.abs(bias_v[side]))]
        j = np.abs(current[side])
        ip, iv = locate_peak_valley(np.abs(bias_v[side]), j[None, :])
        parts = (
            [side[: ip[0] + 1], side[ip[0] + 1 : iv[0] + 1], side[iv[0] + 1 :]]
            if ip[0] >= 0
            else [side]
        )
        parts = [p for p in parts if p.size]
        for p in parts:
            w[p] = 1.0 / (len(parts) * p.size)
    zero = bias_v == 0
    w[zero] = 0.0
    w *= np.count_nonzero(~zero) / max(w.sum(), 1e-300)
    return np.minimum(w, MAX_WEIGHT)


class Objective:
    """Residuals and a batched finite-difference Jacobian (one kernel batch per Jacobian)."""

    def __init__(self, problem: Problem, scatter: float) -> None:
        self.problem = problem
        self.scatter = scatter
        self.weights = [
            point_weights(m.bias_v, m.current_density_a_cm2) for m in problem.measurements
        ]
        self.floors = [
            FLOOR_FRACTION * np.abs(m.current_density_a_cm2).max() for m in problem.measurements
        ]
        self.logs = [
            np.log(np.abs(m.current_density_a_cm2) + f)
            for m, f in zip(problem.measurements, self.floors)
        ]
        self.lower = np.array([p.lower / p.scale for p in problem.parameters])
        self.upper = np.array([p.upper / p.scale for p in problem.parameters])
        self.evaluations = 0
        self.jumps = 0  #: points whose slope was taken from one side (NDR jump), last covariance
        self._cache: dict[bytes, np.ndarray] = {}
        #: corner stacks computed so far (currents, band profiles): never computed twice
        self.kernel_cache = KernelCache()

    @property
    def n_points(self) -> int:
        return int(sum(np.count_nonzero(w) for w in self.weights))

    def raw_log_residuals(self, z: np.ndarray, intrinsic=None) -> list[np.ndarray]:
        """Unweighted ``ln`` residuals per measurement, ``(m, n_points)``.

        Parameters
        ----------
        z
            Fit coordinates, ``(m, p)``.
        intrinsic
            Intrinsic curves of these rows (:meth:`Problem.intrinsic_currents`); None: computed.
        """
        pred = self.problem.predict(self.problem.deviations(z), intrinsic, cache=self.kernel_cache)
        return [np.log(np.abs(p) + f) - lg for p, f, lg in zip(pred, self.floors, self.logs)]

    def residuals_many(self, z: np.ndarray, intrinsic=None) -> np.ndarray:
        """``(m, n_residuals)``: weighted data residuals in sigmas, then the priors.

        Parameters
        ----------
        z
            Fit coordinates, ``(m, p)`` or ``(p,)``.
        intrinsic
            Intrinsic curves of these rows (:meth:`Problem.intrinsic_currents`); None: computed.
        """
        z = np.atleast_2d(z)
        self.evaluations += z.shape[0]
        raw = self.raw_log_residuals(z, intrinsic)
        data = [np.sqrt(w) * r / self.scatter for w, r in zip(self.weights, raw)]
        return np.concatenate(
            data + [self.problem.prior_residuals(self.problem.deviations(z))], axis=1
        )

    def __call__(self, z: np.ndarray) -> np.ndarray:
        key = np.asarray(z, float).tobytes()
        if key not in self._cache:
            self._cache = {key: self.residuals_many(z)[0]}
        return self._cache[key]

    def jacobian(self, z: np.ndarray) -> np.ndarray:
        """Forward differences, one batch: the thickness columns from the island slopes
        (no extra stacks), the resistance columns from the base currents (no kernel call)."""
        z = np.asarray(z, float)
        prob = self.problem
        p = z.size
        step = np.where(z + STEP_Z <= self.upper, STEP_Z, -STEP_Z)
        rows = np.vstack([z, z + np.diag(step)])
        kinds = [q.kind for q in prob.parameters]
        island_col = {
            j: prob.island_layers.index(q.layers[0])
            for j, q in enumerate(prob.parameters)
            if q.kind == "thickness"
        }
        need = [0] + [j + 1 for j in range(p) if kinds[j] not in ("thickness", "resistance")]
        base, slopes = prob.intrinsic_currents(
            prob.deviations(rows[need]), with_slopes=True, cache=self.kernel_cache
        )
        intrinsic = []
        for cur, sl in zip(base, slopes):
            full = np.repeat(cur[:1], p + 1, axis=0)
            full[need] = cur
            for j, i in island_col.items():  # the base row's biases, its current moved
                full[j + 1, 1] = cur[0, 1] + step[j] * prob.parameters[j].scale * sl[0, i]
            intrinsic.append(full)
        res = self.residuals_many(rows, intrinsic)
        self._cache = {z.tobytes(): res[0]}
        return (res[1:] - res[0]).T / step[None, :]

    def central_jacobian(
        self, z: np.ndarray
    ) -> tuple[np.ndarray, list[np.ndarray], list[np.ndarray]]:
        """Central differences and, per side, the one-sided differences an
        interval half may rest on, from one batch (thickness steps of
        ``THICKNESS_STEP_ML``; the one-sided ones differ from the central one
        in the thickness columns only).

        At a whole monolayer the island current has a kink: the central slope
        (for the covariance and the correlations) averages both sides, so that,
        e.g., the two barriers of a symmetric stack are not made to look
        separable by one side's slope; the one-sided slopes give each
        thickness's upper and lower interval (the current of a barrier falls
        more gently above a whole monolayer than it rises below it). A
        thickness a little above (below) a whole monolayer has, between it and
        the kink, the slope of its own cell, not the quarter-monolayer step's
        mixture of both cells: that within-cell slope (a step to the cell's
        edge; the island current is linear in the thickness within a cell) is
        the second one-sided difference of that side. Returns the central
        Jacobian and, for the upper and the lower side, the list of one-sided
        Jacobians.
        """
        z = np.asarray(z, float)
        p = z.size
        params = self.problem.parameters
        thick = np.array([q.kind == "thickness" for q in params])
        step = np.array(
            [THICKNESS_STEP_ML / q.scale if t else STEP_Z for q, t in zip(params, thick)]
        )
        up = np.minimum(z + step, self.upper)
        down = np.maximum(z - step, self.lower)
        # within-cell steps to the cell's edge where the edge is nearer than a quarter monolayer
        ml = self.problem.values(self.problem.deviations(z))[0]
        extra: list[tuple[str, int, float]] = []
        for col in (int(i) for i in np.nonzero(thick)[0]):
            frac = ml[col] - np.floor(ml[col] + 1e-9)
            to_top = 1.0 - frac
            if (
                1e-6 < frac < THICKNESS_STEP_ML
                and z[col] - frac / params[col].scale >= self.lower[col]
            ):
                extra.append(("lower", col, -frac / params[col].scale))
            if (
                1e-6 < to_top < THICKNESS_STEP_ML
                and z[col] + to_top / params[col].scale <= self.upper[col]
            ):
                extra.append(("upper", col, to_top / params[col].scale))
        moves = [z + np.diag(up - z), z + np.diag(down - z)]
        for _, col, h in extra:
            row = z.copy()
            row[col] += h
            moves.append(row[None, :])
        rows = np.vstack([z[None, :]] + moves)
        res = self.residuals_many(rows)
        r0, r_up, r_down = res[0], res[1 : p + 1], res[p + 1 : 2 * p + 1]
        safe = lambda d: np.where(d > 0, d, 1.0)  # noqa: E731
        central = (r_up - r_down).T / safe(up - down)[None, :]
        d_up = (r_up - r0).T / safe(up - z)[None, :]
        d_down = (r0 - r_down).T / safe(z - down)[None, :]
        # a point that jumps branch (its terminal bias crosses the model's NDR jump) within
        # one step: the slope of the branch it is on is the other side's
        smooth = np.where(np.abs(d_up) <= np.abs(d_down), d_up, d_down)
        big = np.maximum(np.abs(r_up - r0), np.abs(r0 - r_down)).T
        jump = (np.abs(d_up - d_down) > JUMP_RATIO * np.abs(smooth)) & (big > JUMP_SIGMAS)
        jump_up = jump & (np.abs(d_up) > np.abs(d_down))
        jump_down = jump & ~jump_up
        central = np.where(jump, smooth, central)
        d_up = np.where(jump_up, d_down, d_up)
        d_down = np.where(jump_down, d_up, d_down)
        self.jumps = int(np.count_nonzero(np.any(jump, axis=1)))
        upper = np.where(thick[None, :], d_up, central)
        lower = np.where(thick[None, :], d_down, central)
        sides = {"upper": [upper], "lower": [lower]}
        for k, (side, col, h) in enumerate(extra):
            within = sides[side][0].copy()
            within[:, col] = (res[2 * p + 1 + k] - r0) / h
            sides[side].append(within)
        return central, sides["upper"], sides["lower"]

    def cost(self, res: np.ndarray) -> np.ndarray:
        """Robust cost ``sum rho(r^2)`` with soft_l1 at ``F_SCALE`` (per row)."""
        u = (np.atleast_2d(res) / F_SCALE) ** 2
        return F_SCALE**2 * np.sum(2.0 * (np.sqrt(1.0 + u) - 1.0), axis=1)


def _combos(problem: Problem) -> np.ndarray:
    """``(n, p)`` fit coordinates of the whole-monolayer neighbourhood (other parameters nominal)."""
    thick = [j for j, p in enumerate(problem.parameters) if p.kind == "thickness"]
    base = np.zeros(len(problem.parameters))
    if not thick:
        return base[None, :]
    nominal = np.array([problem.parameters[j].nominal for j in thick])
    centre = np.round(nominal)
    if 3 ** len(thick) <= MAX_COMBOS:
        steps = np.array(list(itertools.product((-1, 0, 1), repeat=len(thick))), float)
    else:
        steps = np.vstack([np.zeros(len(thick)), np.eye(len(thick)), -np.eye(len(thick))])
    whole = np.maximum(centre + steps, 1.0)
    rows = np.repeat(base[None, :], whole.shape[0], axis=0)
    for c, j in enumerate(thick):
        p = problem.parameters[j]
        rows[:, j] = np.clip(whole[:, c] - p.nominal, p.lower, p.upper) / p.scale
    return np.unique(rows, axis=0)


def _fit_resistance(
    obj: Objective, z: np.ndarray, intrinsic: list[np.ndarray]
) -> tuple[np.ndarray, float]:
    """Series resistance fitted on fixed intrinsic currents (no kernel call)."""
    cols = [j for j, p in enumerate(obj.problem.parameters) if p.kind == "resistance"]
    if not cols:
        res = obj.residuals_many(z, intrinsic)
        return z, float(obj.cost(res)[0])

    def fun(rz):
        zz = z.copy()
        zz[cols] = rz
        return obj.residuals_many(zz, intrinsic)[0]

    scan = _resistance_scan(obj, cols)
    rows = np.repeat(z[None, :], scan.shape[0], axis=0)
    rows[:, cols] = scan
    costs = obj.cost(
        obj.residuals_many(rows, [np.repeat(j, scan.shape[0], axis=0) for j in intrinsic])
    )
    sol = least_squares(
        fun,
        rows[int(np.argmin(costs)), cols],
        bounds=(obj.lower[cols], obj.upper[cols]),
        loss="soft_l1",
        f_scale=F_SCALE,
        max_nfev=60,
    )
    out = z.copy()
    out[cols] = sol.x
    return out, float(2 * sol.cost)


def _resistance_scan(obj: Objective, cols: list[int]) -> np.ndarray:
    """``(n, len(cols))`` fit coordinates of the resistances scanned before a resistance fit.

    The product of, per resistance parameter, its nominal value and the values
    whose largest voltage drop ``|J| R`` over the measured sweeps is 0 or
    log-spaced between ``RESISTANCE_SCAN_LOW`` and ``RESISTANCE_SCAN_HIGH`` of
    the measured bias span (within the parameter's bounds).
    """
    prob = obj.problem
    span = max(float(np.ptp(m.bias_v)) for m in prob.measurements)
    drops = np.concatenate(
        [
            [0.0],
            span
            * np.logspace(
                np.log10(RESISTANCE_SCAN_LOW), np.log10(RESISTANCE_SCAN_HIGH), RESISTANCE_SCAN
            ),
        ]
    )
    axes = []
    for j in cols:
        q = prob.parameters[j]
        per_area = q.key == "series_resistance_ohm"  # ohm: times the area, ohm um^2
        largest = max(
            float(np.abs(m.current_density_a_cm2).max())
            * ((m.area_um2 or 0.0) if per_area else 1.0)
            for m in prob.measurements
        )
        values = drops / max(largest * 1e-8, 1e-300)  # ohm um^2 (or ohm): J R with R in ohm cm^2
        z = np.clip(
            (np.append(values, q.nominal) - q.nominal) / q.scale, obj.lower[j], obj.upper[j]
        )
        axes.append(np.unique(z))
    return np.array(list(itertools.product(*axes)))


def _random_rows(obj: Objective, z: np.ndarray, n: int, rng: np.random.Generator) -> np.ndarray:
    """``(n', p)`` random draws of the continuous physics parameters around ``z``
    (thicknesses and resistances kept); ``n' = 0`` when there are none."""
    params = obj.problem.parameters
    cols = [j for j, q in enumerate(params) if q.kind not in ("thickness", "resistance")]
    if not cols or n <= 0:
        return np.zeros((0, z.size))
    rows = np.repeat(z[None, :], n, axis=0)
    for j in cols:
        q = params[j]
        if q.sigma > 0:
            sd = RANDOM_PRIOR_SIGMAS * q.sigma * (q.nominal if q.kind == "doping" else 1.0)
            draw = rng.normal(0.0, sd / q.scale, n)
        else:
            draw = rng.uniform(obj.lower[j], obj.upper[j], n)
        rows[:, j] = np.clip(draw, obj.lower[j], obj.upper[j])
    return rows


def current_scale(obj: Objective) -> list[dict[str, Any]]:
    """Per sweep, its largest measured current density and the model's (module notes), A/cm^2.

    Returns ``source``, ``column``, ``measured_a_cm2``, ``nominal_a_cm2`` and ``reach_a_cm2``
    (the least and largest of the nominal stack's and those of the stacks with every fitted
    thickness at an end of its range).

    Raises
    ------
    InputError
        A sweep more than ``REACH_MARGIN`` past that reach: no fit within the ranges meets it.
    """
    prob = obj.problem
    rows = np.zeros((3, len(prob.parameters)))
    for j, q in enumerate(prob.parameters):
        if q.kind == "thickness":
            rows[1, j], rows[2, j] = obj.lower[j], obj.upper[j]
    pred = prob.predict(prob.deviations(rows), cache=obj.kernel_cache)
    out = []
    for m, p in zip(prob.measurements, pred):
        largest = np.abs(p).max(axis=1)
        measured = float(np.abs(m.current_density_a_cm2).max())
        low, high = float(largest.min()), float(largest.max())
        if not low / REACH_MARGIN <= measured <= high * REACH_MARGIN:
            amps = ""
            if m.column == "current_a" and m.area_um2:
                amps = f" ({measured * m.area_um2 * 1e-8:.3g} A over {m.area_um2:g} um^2)"
            raise InputError(
                f"column {m.column}: the largest current density, {measured:.3g} A/cm^2{amps}, "
                f"is far outside what the stack can carry within the fit's ranges, {low:.3g} to "
                f"{high:.3g} A/cm^2 (nominal stack {largest[0]:.3g}); {units_hint(m.column)}",
                source=m.source,
            )
        out.append(
            {
                "source": m.source,
                "column": m.column,
                "measured_a_cm2": measured,
                "nominal_a_cm2": float(largest[0]),
                "reach_a_cm2": [low, high],
            }
        )
    return out


def units_hint(column: str) -> str:
    """What to check in a measured file whose current is far off, by its current column."""
    if column == "current_a":
        return "check the units: current_a in A (not mA or uA) and the '# area_um2' line in um^2"
    return "check the units: current_density_a_cm2 in A/cm^2 (not A, or mA/cm^2)"


def global_stage(
    obj: Objective, starts: int, *, rng: np.random.Generator, random_starts: int = RANDOM_STARTS
) -> tuple[list[np.ndarray], int, int]:
    """The best ``starts`` starts, each with its series resistance fitted: the whole-monolayer
    combinations (continuous parameters nominal) and random draws of the
    continuous parameters on the best combination. Returns the starts, the number of
    combinations and the number of random draws.

    Parameters
    ----------
    obj
        The fit's objective.
    starts
        Largest number of starts kept (those not far worse than the best).
    rng
        Random generator of the draws.
    random_starts
        Random draws of the continuous parameters.
    """
    rows = _combos(obj.problem)
    intrinsic = obj.problem.intrinsic_currents(obj.problem.deviations(rows), cache=obj.kernel_cache)
    scored = []
    for i in range(rows.shape[0]):
        z, c = _fit_resistance(obj, rows[i], [j[i : i + 1] for j in intrinsic])
        scored.append((c, i, z))
    scored.sort(key=lambda t: (t[0], t[1]))
    extra = _random_rows(obj, rows[scored[0][1]], random_starts, rng)
    if extra.shape[0]:
        more = obj.problem.intrinsic_currents(obj.problem.deviations(extra), cache=obj.kernel_cache)
        drawn = []
        for i in range(extra.shape[0]):
            z, c = _fit_resistance(obj, extra[i], [j[i : i + 1] for j in more])
            drawn.append((c, rows.shape[0] + i, z))
        drawn.sort(key=lambda t: (t[0], t[1]))
        if drawn[0][0] < scored[0][0]:  # a better start in the same whole-monolayer cell
            scored[0] = drawn[0]
    best = scored[0][0]
    keep = [z for c, _, z in scored[:starts] if c <= START_FACTOR * best + AMBIGUOUS_DCHI2]
    return keep, rows.shape[0], extra.shape[0]


def _cell_bounds(
    obj: Objective, z: np.ndarray, cells: dict[int, float]
) -> tuple[np.ndarray, np.ndarray]:
    lo, hi = obj.lower.copy(), obj.upper.copy()
    for j, low_ml in cells.items():
        p = obj.problem.parameters[j]
        n = obj.problem.nominal_ml[p.layers[0]]
        lo[j] = max(lo[j], (low_ml - n) / p.scale)
        hi[j] = min(hi[j], (low_ml + 1.0 - n) / p.scale)
    return lo, hi


def _cell(obj: Objective, j: int, ml: float) -> float:
    """The lower whole monolayer of the cell of fitted thickness ``j`` at ``ml`` monolayers.

    A thickness on the top of its range, a whole monolayer, is in the cell below it: the cell
    above lies outside the range (its bounds would be one value, which the local fit refuses).
    """
    p = obj.problem.parameters[j]
    cell = float(np.floor(ml + 1e-9))
    top = obj.problem.nominal_ml[p.layers[0]] + obj.upper[j] * p.scale
    return cell - 1.0 if cell >= top - 1e-9 else cell


def _local(obj: Objective, z0: np.ndarray, max_nfev: int) -> tuple[np.ndarray, float]:
    """Local fit, one whole-monolayer cell of the island layers at a time.

    Within a cell the island current is multilinear in the thicknesses, so
    the residuals are smooth there; at a cell edge they have a kink that a
    trust-region step cannot cross. A fit that ends on a cell edge is
    repeated in the neighbouring cell (at most ``MAX_CELL_MOVES`` times)
    and the better one kept.
    """
    thick = [j for j, p in enumerate(obj.problem.parameters) if p.kind == "thickness"]
    z = np.clip(z0, obj.lower, obj.upper)
    ml = obj.problem.values(obj.problem.deviations(z))[0]
    cells = {j: _cell(obj, j, ml[j]) for j in thick}
    best: tuple[np.ndarray, float] | None = None
    tried = set()
    for _ in range(MAX_CELL_MOVES + 1):
        tried.add(tuple(cells.values()))
        lo, hi = _cell_bounds(obj, z, cells)
        sol = least_squares(
            obj, np.clip(z, lo, hi), jac=obj.jacobian, bounds=(lo, hi), loss="soft_l1",
            f_scale=F_SCALE, x_scale=1.0, max_nfev=max_nfev, xtol=1e-6, ftol=1e-8,
        )  # fmt: skip
        cost = float(2 * sol.cost)
        if best is not None and cost >= best[1]:
            break
        best = (sol.x, cost)
        z = sol.x
        moved = dict(cells)
        for j in thick:
            edge = 1e-6
            if sol.x[j] <= lo[j] + edge and lo[j] > obj.lower[j]:
                moved[j] = cells[j] - 1.0
            elif sol.x[j] >= hi[j] - edge and hi[j] < obj.upper[j]:
                moved[j] = cells[j] + 1.0
        if tuple(moved.values()) in tried:
            break
        cells = moved
    assert best is not None
    return best


def _scatter(obj: Objective, z: np.ndarray) -> float:
    """Weighted rms of the log residuals at ``z``, per degree of freedom."""
    raw = obj.raw_log_residuals(z)
    ssq = sum(float(np.sum(w * r[0] ** 2)) for w, r in zip(obj.weights, raw))
    dof = max(obj.n_points - len(obj.problem.parameters), 1)
    return max(math.sqrt(ssq / dof), 1e-4)


def run_fit(
    problem: Problem,
    *,
    starts: int = 2,
    max_nfev: int = 15,
    seed: int | np.random.Generator | None = 0,
    random_starts: int = RANDOM_STARTS,
    progress=None,
) -> FitResult:
    """Fit ``problem``: global stage, local fits, scatter re-estimated, covariance at the optimum.

    Parameters
    ----------
    problem
        What is fitted to which measurements.
    starts
        Largest number of local fits (the best starts of the global stage).
    max_nfev
        Largest number of function evaluations of each local fit (per whole-monolayer cell).
    seed
        A whole-number seed or a generator of the random starts of the global stage (the
        only random step; module notes): the same seed gives the same result.
    random_starts
        Random starts of the global stage.
    progress
        Callable receiving one-line progress messages; None: silent.
    """
    say = progress or (lambda msg: None)
    rng = as_generator(seed)
    obj = Objective(problem, INITIAL_SCATTER)
    scale = current_scale(obj)
    begins, n_combos, n_random = global_stage(obj, starts, rng=rng, random_starts=random_starts)
    say(
        f"{n_combos} whole-monolayer combinations and {n_random} random starts scored; "
        f"{len(begins)} local fits"
    )
    optima = []
    for k, z0 in enumerate(begins):
        z, cost = _local(obj, z0, max_nfev)
        optima.append((cost, z))
        say(f"local fit {k + 1}/{len(begins)}: cost {cost:.4g}")
    optima.sort(key=lambda t: t[0])
    scatter = _scatter(obj, optima[0][1])
    obj.scatter = scatter
    obj._cache = {}
    z_best, _ = _local(obj, optima[0][1], REFINE_NFEV)
    rescored = []
    for _, z in optima:
        res = obj(z)
        rescored.append((float(np.sum(res**2)), z))
    res_best = obj(z_best)
    chi2 = float(np.sum(res_best**2))
    jac, jacs_up, jacs_down = obj.central_jacobian(z_best)
    result = _uncertainty(problem, obj, z_best, jac)
    thick = np.array([p.kind == "thickness" for p in problem.parameters])
    for side, jacs in (("sd_high", jacs_up), ("sd_low", jacs_down)):
        widest = result.sd
        for j in jacs:
            widest = np.maximum(widest, _uncertainty(problem, obj, z_best, j).sd)
        setattr(result, side, np.where(thick, widest, result.sd))
    result.scatter, result.chi2 = scatter, chi2
    result.n_points, result.starts, result.combos = obj.n_points, len(begins), n_combos
    result.random_starts = n_random
    result.seed = seed if isinstance(seed, int) else None
    result.alternatives = _alternatives(problem, z_best, chi2, rescored)
    result.evaluations = obj.evaluations
    result.scale = scale
    return result


def _uncertainty(problem: Problem, obj: Objective, z: np.ndarray, jac: np.ndarray) -> FitResult:
    p = z.size
    free = (z > obj.lower + 1e-9) & (z < obj.upper - 1e-9)
    cov_z = np.zeros((p, p))
    if np.any(free):
        jf = jac[:, free]
        cov_z[np.ix_(free, free)] = np.linalg.pinv(jf.T @ jf)
    # reported values are (nearly) linear in z: their gradient by differences, no physics needed
    h = 1e-4
    dev0 = problem.deviations(z)
    v0 = problem.values(dev0)[0]
    grad = np.empty((p, p))
    for j in range(p):
        zz = z.copy()
        zz[j] += h
        grad[:, j] = (problem.values(problem.deviations(zz))[0] - v0) / h
    cov_v = grad @ cov_z @ grad.T
    sd = np.sqrt(np.clip(np.diag(cov_v), 0.0, None))
    with np.errstate(invalid="ignore", divide="ignore"):
        corr = cov_v / np.outer(sd, sd)
    corr = np.where(np.isfinite(corr), corr, 0.0)
    np.fill_diagonal(corr, 1.0)
    return FitResult(
        z=z, dev=dev0[0], values=v0, sd=sd, correlation=corr, scatter=0, chi2=0, n_points=0
    )


def _alternatives(problem: Problem, z_best, chi2_best, rescored) -> list[dict[str, Any]]:
    """Distinct optima (another whole monolayer in some layer) within ``AMBIGUOUS_DCHI2``."""
    thick = [j for j, p in enumerate(problem.parameters) if p.kind == "thickness"]
    best_ml = np.round(problem.values(problem.deviations(z_best))[0][thick])
    out, seen = [], {tuple(best_ml)}
    for chi2, z in sorted(rescored, key=lambda t: t[0]):
        vals = problem.values(problem.deviations(z))[0]
        key = tuple(np.round(vals[thick]))
        if key in seen:
            continue
        seen.add(key)
        out.append(
            {
                "delta_chi2": chi2 - chi2_best,
                "ambiguous": chi2 - chi2_best < AMBIGUOUS_DCHI2,
                "values": {problem.parameters[j].name: float(vals[j]) for j in range(vals.size)},
            }
        )
    return out
