"""What a calibration fits, and the model it fits: parameters, priors, the batched forward model.

Parameters (the names of ``calibration.json``; ``--fit`` takes them, or a
group name: ``thickness``, ``rate``, ``x``, ``doping``, ``offset``, ``model``,
``resistance``)
----------------------------------------------------------------------------
- ``<layer>.thickness_ml``: as-grown monolayers of a layer between the
  contacts, ``t = n (1 + r) + d`` with ``n`` the nominal count, ``r`` the
  rate error of its material and ``d`` the layer's own error (the growth
  model of :mod:`wellwright.optimize.study.growth`); the fit moves ``t``,
  the prior is on ``d``. A fractional ``t`` is an
  island average: the current is the area-weighted mean of the currents of
  the two neighbouring whole-monolayer stacks (for ``k`` such layers, the
  ``2**k`` corner stacks weighted by the products of the area fractions).
  Prior: Gaussian, ``[growth] thickness_ml_sigma``.
- ``<material>.rate``: growth-rate factor ``1 + r`` of one material's source;
  prior ``rate_sigma``. Layers whose thickness is not fitted on its own
  (spacers) follow it at their continuous thickness.
- ``<layer>.x``: composition; prior ``x_sigma``.
- ``<layer>.doping_cm3``: donor density, relative prior ``doping_sigma``.
- ``<material>.offset_ev``: shift of that material's conduction-band edge
  against the rest of the stack (a band-offset correction); prior 0.05 eV
  (common practice, from memory: published offsets of one pair scatter by a
  few tens of meV).
- model parameters (``broadening_mev``; with ``[model] transport =
  "scattering-assisted"`` the strength of its channel,
  ``roughness_height_nm``, and ``roughness_length_nm``): no prior, bounded.
- ``series_resistance_ohm_um2`` (specific, scales as 1/area) and
  ``series_resistance_ohm`` (area-independent: probes, lines); no prior.
  ``V_applied = V_intrinsic + I R`` (common practice), with
  ``I R = J (R_specific + R_fixed A)``.

Default set: the thicknesses of the layers from the first barrier to the
last one, the rate of every material that also has a layer not fitted on
its own (the spacers' material), the valley-current parameter
``roughness_height_nm`` when the model has the scattering-assisted
channel, and
``series_resistance_ohm_um2``; ``series_resistance_ohm`` joins when the
measured files have two or more areas (one area cannot tell the two apart).
"""

from __future__ import annotations

import itertools
import math
from collections import OrderedDict
from dataclasses import dataclass, fields, replace
from typing import Any, Literal, overload

import numpy as np
from scipy.interpolate import PchipInterpolator
from wellwright.optimize.calibrate.measured import Measurement
from wellwright.optimize.study.calibration import CALIBRATION_KEYS
from wellwright.optimize.study.growth import GrowthSettings, parse_growth, split_layer_growth
from wellwright.physics import checks, materials
from wellwright.physics.current import EnergyGrid
from wellwright.physics.errors import InputError
from wellwright.physics.iv import band_profile, current_of_profile, locate_peak_valley
from wellwright.physics.stack import LayerTable, ModelOptions, Stack, parse_stack

__all__ = ["FitParameter", "Problem", "KernelCache", "build_problem", "GROUPS", "MODEL_FIT"]

GROUPS = ("thickness", "rate", "x", "doping", "offset", "model", "resistance")
#: Fittable model options: (unit, scale, lower, upper). Only those ModelOptions has are used.
MODEL_FIT: dict[str, tuple[str, float, float, float]] = {
    "roughness_height_nm": ("nm", 0.05, 0.0, 2.0),
    "roughness_length_nm": ("nm", 1.0, 0.5, 50.0),
    "broadening_mev": ("meV", 1.0, 0.0, 50.0),
}
#: The valley-current parameter fitted by default, per ``[model] transport``.
VALLEY_PARAMETER = {"scattering-assisted": "roughness_height_nm"}
OFFSET_SIGMA_EV = 0.05
#: The intrinsic grid has twice the measured points' density (linear interpolation at the NDR
#: cliff: 17 % error in ln J at one point with the measured density, 3.6 % at twice; measured on
#: the InP demo stack), at most this many points.
MAX_GRID_POINTS = 241
MAX_ISLAND_LAYERS = 6
#: Barrier: an interior layer whose band edge is this far above both contacts'.
BARRIER_STEP_EV = 0.1


@dataclass(frozen=True)
class FitParameter:
    """One fitted quantity. The fit works on ``z``: deviation = ``scale * z``.

    ``nominal`` and values are in ``unit`` (what calibration.json reports);
    ``sigma`` is the prior's one-sigma deviation (0: no prior);
    ``lower``/``upper`` bound the deviation.
    """

    name: str
    kind: str
    unit: str
    nominal: float
    scale: float
    sigma: float
    lower: float
    upper: float
    layers: tuple[int, ...] = ()
    key: str = ""


@dataclass(frozen=True)
class Problem:
    """A nominal stack, the measured sweeps and the fitted parameters (plain data)."""

    stack: Stack
    stacks_by_temperature: dict[float | None, Stack]  #: None: the stack file's own
    measurements: tuple[Measurement, ...]
    parameters: tuple[FitParameter, ...]
    nominal_ml: np.ndarray  #: (n_layers,) nominal monolayers, NaN for contacts
    island_layers: tuple[int, ...]  #: layers whose thickness is fitted (island mixture)
    growth: GrowthSettings
    xrd: tuple[float, float, tuple[int, ...]] | None = None  #: value nm, sigma nm, layers
    grid: EnergyGrid = EnergyGrid()
    bias_points: int | None = None  #: intrinsic grid points; None: twice the measured density
    source: str = "<dict>"

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(p.name for p in self.parameters)

    def index(self, name: str) -> int:
        return self.names.index(name)

    # ------------------------------------------------------------------ values

    def deviations(self, z: np.ndarray) -> np.ndarray:
        """``(m, p)`` deviations from ``(m, p)`` fit coordinates."""
        return np.atleast_2d(z) * np.array([p.scale for p in self.parameters])

    def thickness_ml(self, dev: np.ndarray) -> np.ndarray:
        """``(m, n_layers)`` as-grown monolayers.

        A fitted layer's coordinate is its whole deviation ``t - n`` (so the
        data, which fix ``t``, and the rate, which the spacers and the prior
        fix, are not entangled); another layer follows its material's rate,
        ``n (1 + r)``.
        """
        dev = np.atleast_2d(dev)
        ml = np.broadcast_to(self.nominal_ml, (dev.shape[0], self.nominal_ml.size)).copy()
        ml = ml * (1.0 + self._rates(dev))
        for j, p in enumerate(self.parameters):
            if p.kind == "thickness":
                ml[:, p.layers[0]] = self.nominal_ml[p.layers[0]] + dev[:, j]
        return ml

    def _rates(self, dev: np.ndarray) -> np.ndarray:
        """``(m, n_layers)`` relative rate error of each layer's material."""
        rate = np.zeros((dev.shape[0], self.nominal_ml.size))
        for j, p in enumerate(self.parameters):
            if p.kind == "rate":
                rate[:, list(p.layers)] += dev[:, j, None]
        return rate

    def values(self, dev: np.ndarray) -> np.ndarray:
        """``(m, p)`` reported values (``unit`` of each parameter) of deviations."""
        dev = np.atleast_2d(dev)
        out = np.empty_like(dev)
        ml = self.thickness_ml(dev)
        for j, p in enumerate(self.parameters):
            if p.kind == "thickness":
                out[:, j] = ml[:, p.layers[0]]
            elif p.kind in ("rate", "doping"):
                out[:, j] = p.nominal * (1.0 + dev[:, j])
            else:
                out[:, j] = p.nominal + dev[:, j]
        return out

    def deviations_of(self, values: dict[str, float]) -> np.ndarray:
        """``(p,)`` deviations giving the named values (others nominal); inverse of :meth:`values`."""
        unknown = set(values) - set(self.names)
        if unknown:
            raise ValueError(f"not fitted here: {sorted(unknown)}")
        dev = np.zeros(len(self.parameters))
        for j, p in enumerate(self.parameters):
            if p.name in values and p.kind in ("rate", "doping"):
                dev[j] = values[p.name] / p.nominal - 1.0
            elif p.name in values and p.kind != "thickness":
                dev[j] = values[p.name] - p.nominal
        ml = self.nominal_ml * (1.0 + self._rates(dev[None, :])[0])
        for j, p in enumerate(self.parameters):
            if p.kind == "thickness":
                i = p.layers[0]
                dev[j] = values.get(p.name, ml[i]) - self.nominal_ml[i]
        return dev

    def prior_residuals(self, dev: np.ndarray) -> np.ndarray:
        """``(m, n_priors)``: Gaussian priors and the X-ray constraint, in sigmas."""
        dev = np.atleast_2d(dev)
        rates = self._rates(dev)
        cols = []
        for j, p in enumerate(self.parameters):
            if p.sigma <= 0:
                continue
            if p.kind == "thickness":  # the layer's own error d = t - n (1 + r)
                i = p.layers[0]
                cols.append((dev[:, j] - self.nominal_ml[i] * rates[:, i]) / p.sigma)
            else:
                cols.append(dev[:, j] / p.sigma)
        if self.xrd is not None:
            value, sigma, layers = self.xrd
            total = self.tables(dev, continuous=True)[0].thickness_nm[:, list(layers)].sum(axis=1)
            cols.append((total - value) / sigma)
        return np.stack(cols, axis=1) if cols else np.zeros((dev.shape[0], 0))

    # ------------------------------------------------------------------ tables

    def tables(
        self,
        dev: np.ndarray,
        *,
        temperature_k: float | None = None,
        continuous: bool = False,
        slopes: list | None = None,
    ) -> tuple[LayerTable, np.ndarray]:
        """Layer tables of ``m`` parameter rows and their island weights.

        Returns the table of ``m * 2**k`` rows (row ``i * 2**k + c`` is corner
        ``c`` of parameter row ``i``; ``k`` island layers) and the weights
        ``(m, 2**k)``.

        Parameters
        ----------
        dev
            Deviations from the nominal, ``(m, p)``.
        temperature_k
            Temperature of the measurement, K; None: the stack's.
        continuous
            One row per parameter row with fractional thicknesses (for total-thickness
            constraints).
        slopes
            A list that receives, per island layer, the derivatives of the weights with respect
            to its thickness, ``(m, 2**k)`` (the island current is multilinear within a
            monolayer: its thickness derivatives need no further stacks); None: not computed.
        """
        dev = np.atleast_2d(dev)
        m = dev.shape[0]
        stack = self.stacks_by_temperature.get(temperature_k, self.stack)
        base = stack.table()
        rows = lambda a: np.repeat(a, m, axis=0)  # noqa: E731
        edge, mass, alpha = (
            rows(base.edge_ev),
            rows(base.mass_m0),
            rows(base.nonparabolicity_per_ev),
        )
        perm, doping = rows(base.permittivity_r), rows(base.doping_cm3)
        mono = np.array(
            [np.nan if lay.monolayer_nm is None else lay.monolayer_nm for lay in stack.layers]
        )
        mono = rows(mono[None, :])
        a_sub = _substrate_lattice_nm(stack)
        for j, p in enumerate(self.parameters):
            if p.kind == "x":
                (i,) = p.layers
                layer = stack.layers[i]
                mp = materials.material_parameters(
                    layer.material,
                    np.clip(layer.x + dev[:, j], 0.0, 1.0),
                    temperature_k=stack.temperature_k,
                    substrate_lattice_nm=a_sub,
                    strain=stack.model.strain,
                )
                edge[:, i] = mp.conduction_band_ev
                mass[:, i] = mp.mass_m0
                alpha[:, i] = np.asarray(mp.nonparabolicity_per_ev) * float(
                    stack.model.nonparabolicity
                )
                perm[:, i] = mp.permittivity_r
                mono[:, i] = mp.monolayer_nm
        for j, p in enumerate(self.parameters):
            if p.kind == "offset":
                edge[:, list(p.layers)] += dev[:, j, None]
            elif p.kind == "doping":
                doping[:, p.layers[0]] *= np.maximum(1.0 + dev[:, j], 0.01)
        ml = np.maximum(self.thickness_ml(dev), 1.0)
        grown = np.isfinite(ml)
        thick = np.where(grown, np.nan_to_num(ml) * np.nan_to_num(mono), rows(base.thickness_nm))
        # every other column (the layers' LO-phonon energies and high-frequency permittivities
        # of the scattering channel) as the stack has it: a fitted composition shift of a few
        # per cent leaves the phonons as grown, as in the growth model
        table = replace(
            base.take(np.zeros(m, int)),
            edge_ev=edge,
            mass_m0=mass,
            nonparabolicity_per_ev=alpha,
            thickness_nm=thick,
            doping_cm3=doping,
            permittivity_r=perm,
        )
        if continuous or not self.island_layers:
            return table, np.ones((m, 1))
        isl = list(self.island_layers)
        low = np.floor(ml[:, isl])
        frac = ml[:, isl] - low
        corners = np.array(list(itertools.product((0, 1), repeat=len(isl))))  # (2**k, k)
        factors = np.where(corners[None], frac[:, None, :], 1 - frac[:, None, :])  # (m, C, k)
        weights = np.prod(factors, axis=2)
        if slopes is not None:  # d weight / d thickness of each island layer, (m, k, C)
            sign = np.where(corners, 1.0, -1.0)  # (C, k)
            for i in range(len(isl)):
                others = np.prod(np.delete(factors, i, axis=2), axis=2)
                slopes.append(sign[None, :, i] * others)
        n_c = corners.shape[0]
        big = table.take(np.repeat(np.arange(m), n_c))
        t = big.thickness_nm.copy()
        whole = (np.repeat(low, n_c, axis=0) + np.tile(corners, (m, 1))).clip(min=1.0)
        t[:, isl] = whole * np.repeat(mono[:, isl], n_c, axis=0)
        return replace(big, thickness_nm=t), weights

    def model_options(
        self, dev_row: np.ndarray, temperature_k: float | None = None
    ) -> ModelOptions:
        """Model options of one parameter row: the stack's, with the fitted model options changed.

        Parameters
        ----------
        dev_row
            Deviations from the nominal of one row, ``(p,)``.
        temperature_k
            Temperature of the measurement, K; None: the stack's.
        """
        stack = self.stacks_by_temperature.get(temperature_k, self.stack)
        changes = {
            p.key: p.nominal + dev_row[j]
            for j, p in enumerate(self.parameters)
            if p.kind == "model"
        }
        return replace(stack.model, **changes) if changes else stack.model

    # ------------------------------------------------------------------ forward model

    def intrinsic_grids(self) -> list[np.ndarray]:
        """Per measurement, the intrinsic biases the kernel computes (spanning the measured range,
        uniform, :data:`MAX_GRID_POINTS`)."""
        out = []
        for meas in self.measurements:
            lo, hi = min(meas.bias_v[0], 0.0), max(meas.bias_v[-1], 0.0)
            n = self.bias_points or min(2 * meas.bias_v.size - 1, MAX_GRID_POINTS)
            out.append(np.linspace(lo, hi, max(n, 2)))
        return out

    @overload
    def intrinsic_currents(
        self,
        dev: np.ndarray,
        *,
        with_slopes: Literal[False] = False,
        cache: KernelCache | None = None,
    ) -> list[np.ndarray]: ...

    @overload
    def intrinsic_currents(
        self, dev: np.ndarray, *, with_slopes: Literal[True], cache: KernelCache | None = None
    ) -> tuple[list[np.ndarray], list[np.ndarray]]: ...

    def intrinsic_currents(
        self, dev: np.ndarray, *, with_slopes: bool = False, cache: KernelCache | None = None
    ) -> list[np.ndarray] | tuple[list[np.ndarray], list[np.ndarray]]:
        """Island-averaged intrinsic curves per measurement, ``(m, 2, n)``: ``[:, 0]`` the
        intrinsic biases of each row, ``[:, 1]`` the currents there.

        Each row's biases are the uniform grid of :meth:`intrinsic_grids` plus
        the :data:`CLIFF_POINTS` biases each island corner adds inside its NDR
        cliff (:func:`_distinct_currents`); a corner's current at another
        corner's added biases is interpolated on its own points (linear).
        Rows with equal physics (they differ only in series resistance) are
        computed once; rows are grouped by model options, one batched kernel
        call (and one for the cliffs) per group and measurement.

        Parameters
        ----------
        dev
            Deviations from the nominal, ``(m, p)``.
        with_slopes
            Also return, per measurement, ``(m, k, n)`` derivatives with respect to the
            thickness of each island layer (monolayers) on the same biases, from the same
            corners.
        cache
            Corner stacks computed before (their currents and band profiles), used and
            filled; None: every stack computed here.
        """
        dev = np.atleast_2d(dev)
        phys = np.array([p.kind != "resistance" for p in self.parameters])
        key_cols = np.where(phys, dev, 0.0)
        uniq, inverse = np.unique(key_cols, axis=0, return_inverse=True)
        inverse = np.asarray(inverse).reshape(-1)
        model_cols = [j for j, p in enumerate(self.parameters) if p.kind == "model"]
        groups: dict[tuple, list[int]] = {}
        for u in range(uniq.shape[0]):
            groups.setdefault(tuple(uniq[u, model_cols]), []).append(u)
        grids = self.intrinsic_grids()
        k_isl = len(self.island_layers)
        n_corners = 2**k_isl if k_isl else 1
        sizes = [g.size + n_corners * CLIFF_POINTS for g in grids]
        out = [np.empty((uniq.shape[0], 2, n)) for n in sizes]
        slope = [np.zeros((uniq.shape[0], k_isl, n)) for n in sizes]
        for members in groups.values():
            sub = uniq[members]
            for k, (meas, grid_v) in enumerate(zip(self.measurements, grids)):
                dw: list[np.ndarray] = []
                table, w = self.tables(
                    sub, temperature_k=meas.temperature_k, slopes=dw if with_slopes else None
                )
                model = self.model_options(sub[0], meas.temperature_k)
                v, j = _distinct_currents(
                    table,
                    w.reshape(-1),
                    grid_v,
                    model=model,
                    grid=self.grid,
                    all_rows=with_slopes,
                    cache=cache,
                )
                n_c = w.shape[1]
                v = v.reshape(len(members), n_c, -1)
                j = j.reshape(len(members), n_c, -1)
                # each row on the union of its corners' biases (uniform grid + every cliff)
                extra = v[:, :, grid_v.size :].reshape(len(members), -1)
                union = np.sort(
                    np.concatenate(
                        [np.broadcast_to(grid_v, (len(members), grid_v.size)), extra], 1
                    ),
                    axis=1,
                )
                on_union = np.zeros((len(members), n_c, union.shape[1]))
                for r in range(len(members)):
                    for c in range(n_c):
                        if with_slopes or w[r, c] >= ZERO_WEIGHT:
                            order = np.argsort(v[r, c], kind="stable")
                            on_union[r, c] = np.interp(union[r], v[r, c, order], j[r, c, order])
                out[k][members, 0] = union
                out[k][members, 1] = np.einsum("mc,mcb->mb", w, on_union)
                for i, d in enumerate(dw):
                    slope[k][members, i] = np.einsum("mc,mcb->mb", d, on_union)
        currents = [o[inverse] for o in out]
        if with_slopes:
            return currents, [s_[inverse] for s_ in slope]
        return currents

    def resistance_ohm_um2(self, dev: np.ndarray, meas: Measurement) -> np.ndarray:
        """``(m,)`` effective specific series resistance of each row for one measurement.

        Parameters
        ----------
        dev
            Deviations from the nominal, ``(m, p)``.
        meas
            The measurement (its area turns an area-independent resistance into ohm um^2).
        """
        dev = np.atleast_2d(dev)
        r = np.zeros(dev.shape[0])
        vals = self.values(dev)
        for j, p in enumerate(self.parameters):
            if p.key == "series_resistance_ohm_um2":
                r += vals[:, j]
            elif p.key == "series_resistance_ohm":
                r += vals[:, j] * (meas.area_um2 or 0.0)
        fixed = {p.key for p in self.parameters}
        if "series_resistance_ohm_um2" not in fixed:
            r += self.stack.device.series_resistance_ohm_um2
        return r

    def predict(
        self,
        dev: np.ndarray,
        intrinsic: list[np.ndarray] | None = None,
        *,
        cache: KernelCache | None = None,
    ) -> list[np.ndarray]:
        """Model currents at the measured biases, ``(m, n_points)`` per measurement.

        The terminal bias is ``V + J R`` (R in ohm um^2, J in A/cm^2); the
        curve followed is the up sweep away from zero: where the series
        resistance folds the NDR region back (``V + J R`` decreasing), the
        sweep jumps ahead to the next point of equal terminal bias, as a
        measured up sweep does.

        Parameters
        ----------
        dev
            Deviations from the nominal, ``(m, p)``.
        intrinsic
            Intrinsic curves of these rows (:meth:`intrinsic_currents`); None: computed.
        cache
            Stacks computed before (:class:`KernelCache`), for ``intrinsic`` None.
        """
        dev = np.atleast_2d(dev)
        intrinsic = self.intrinsic_currents(dev, cache=cache) if intrinsic is None else intrinsic
        out = []
        for meas, j in zip(self.measurements, intrinsic):
            r = self.resistance_ohm_um2(dev, meas)
            pred = np.empty((dev.shape[0], meas.bias_v.size))
            for i in range(dev.shape[0]):  # rows: a handful per call; the biases are vectors
                pred[i] = up_sweep(j[i, 0], j[i, 1], r[i], meas.bias_v)
            out.append(pred)
        return out


#: An island corner whose area weight is below this contributes nothing (a whole-monolayer
#: thickness has weight 1 on one corner; floating round-off leaves ~1e-15 on the others).
ZERO_WEIGHT = 1e-9


#: Biases added inside each stack's NDR cliff (the grid interval between its sampled peak and
#: valley where the current falls most): the terminal bias where a measured up sweep jumps is
#: the largest ``V + J R`` before the drop, and a measured point within millivolts of it is on
#: the right branch only if the model's fold is resolved that finely (one uniform spacing of
#: ~8 mV put the demo's peak point on the wrong branch: ln J residual 1.15 at the true stack).
#: Where the NDR region falls gently at first (the linear coherent model on the InP stack: the
#: steep fall 80 mV after the peak), a series resistance of 31 ohm um^2 folds ``V + J R`` at the
#: start of that steep fall, not after the peak: the interval after the peak missed the fold
#: and the low branch after it (the demo stack's 16 um^2 point 0.3 mV beyond the fold: 22 kA/cm^2
#: in the model against 6.5 kA/cm^2 converged on 8001 biases).
CLIFF_POINTS = 8


def _steepest_fall(bias_v: np.ndarray, current: np.ndarray) -> np.ndarray:
    """``(n_stacks,)`` grid interval (index of its first point) where the current falls most
    between the first NDR peak and its valley; without a peak, the last interval.

    Parameters
    ----------
    bias_v
        Increasing biases from zero, V, ``(n,)``.
    current
        ``|J|`` there, ``(n_stacks, n)``.
    """
    peak, valley = locate_peak_valley(bias_v, current)
    out = np.full(current.shape[0], bias_v.size - 2)
    fall = np.diff(current, axis=1)
    for i in np.nonzero(peak >= 0)[0]:
        stop = max(int(valley[i]), int(peak[i]) + 1)
        out[i] = int(peak[i]) + int(np.argmin(fall[i, peak[i] : stop]))
    return out


class KernelCache:
    """Corner stacks a calibration has computed: their currents, and their band profiles.

    A fit evaluates the same whole-monolayer corner stacks again and again: the
    base row of a Jacobian is the point the trust region just accepted, a local
    fit in the next cell starts where the last one ended, the covariance steps
    thicknesses within their cells. A stack's current does not depend on its
    batch partners (each keeps its own slices: ``physics.bands.slice_grid``,
    ``own_counts``), so a stack computed once is taken from here: its
    intrinsic curve by its layers, model options, energy grid and biases; its
    band profile (which depends on the electrostatics alone, not on the
    transport settings) by its layers, electrostatics and biases, so that a
    row that changes only the scattering channel (the roughness column of a
    Jacobian) computes the transport step alone. Profiles are kept for the
    last :data:`PROFILE_STACKS` stacks (the arrays are large); currents for all.
    """

    PROFILE_STACKS = 96

    def __init__(self) -> None:
        self.curves: dict[bytes, tuple[np.ndarray, np.ndarray]] = {}
        self.profiles: OrderedDict[bytes, tuple[Any, int]] = OrderedDict()
        self.computed = 0  #: stacks whose intrinsic curve was computed here
        self.reused_profiles = 0  #: of those, stacks whose band profiles were reused

    def profile_of(self, key: bytes) -> tuple[Any, int] | None:
        """The batch profile holding the stack of ``key`` and the stack's row in it, or None."""
        found = self.profiles.get(key)
        if found is not None:
            self.profiles.move_to_end(key)
        return found

    def keep_profiles(self, keys: list[bytes], profile: Any) -> None:
        """Remember the profiles of a batch (oldest stacks forgotten beyond the limit).

        Parameters
        ----------
        keys
            Profile keys of the batch's stacks, in its row order.
        profile
            The batch's band profiles (``physics.bands.Profile``, batch ``(n_stacks, n_biases)``).
        """
        for i, key in enumerate(keys):
            self.profiles[key] = (profile, i)
            self.profiles.move_to_end(key)
        while len(self.profiles) > self.PROFILE_STACKS:
            self.profiles.popitem(last=False)


def _row_keys(table: LayerTable) -> np.ndarray:
    """``(n_stacks, n_values)`` every layer value of each stack (equal rows: equal stacks)."""
    arrays = [v for v in table.__dict__.values() if v is not None]
    return np.nan_to_num(
        np.concatenate([np.asarray(a, float).reshape(table.n_stacks, -1) for a in arrays], axis=1),
        nan=-1.0,
    )


def _currents(
    table: LayerTable,
    bias_v: np.ndarray,
    keys: np.ndarray,
    *,
    model: ModelOptions,
    grid: EnergyGrid,
    cache: KernelCache | None,
) -> np.ndarray:
    """``current_at_bias`` of ``table`` at ``bias_v`` (``(n_biases,)`` shared or
    ``(n_stacks, n_biases)``), band profiles reused from ``cache`` where it has them
    (stacks identified by the rows of ``keys``)."""
    if cache is None:
        return current_of_profile(
            band_profile(table, bias_v, model=model), table, bias_v=bias_v, model=model, grid=grid
        )
    shared = bias_v.ndim == 1
    per_row = np.broadcast_to(bias_v, (table.n_stacks, bias_v.shape[-1]))
    electro = f"{model.electrostatics}|{model.slice_nm!r}|".encode()
    pkeys = [electro + keys[i].tobytes() + per_row[i].tobytes() for i in range(table.n_stacks)]
    out = np.empty(per_row.shape)
    by_batch: dict[int, tuple[Any, list[int], list[int]]] = {}
    new: list[int] = []
    for i, key in enumerate(pkeys):
        found = cache.profile_of(key)
        if found is None:
            new.append(i)
        else:
            batch = by_batch.setdefault(id(found[0]), (found[0], [], []))
            batch[1].append(i)
            batch[2].append(found[1])
    for profile, rows, at in by_batch.values():
        sub = table.take(np.array(rows))
        out[rows] = current_of_profile(
            profile.take(np.array(at)),
            sub,
            bias_v=bias_v if shared else bias_v[rows],
            model=model,
            grid=grid,
        )
        cache.reused_profiles += len(rows)
    if new:
        sub = table.take(np.array(new))
        bias = bias_v if shared else bias_v[new]
        profile = band_profile(sub, bias, model=model)
        cache.keep_profiles([pkeys[i] for i in new], profile)
        out[new] = current_of_profile(profile, sub, bias_v=bias, model=model, grid=grid)
    return out


def _distinct_currents(
    table: LayerTable,
    weights: np.ndarray,
    bias_v: np.ndarray,
    *,
    model: ModelOptions,
    grid: EnergyGrid,
    all_rows: bool,
    cache: KernelCache | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """Biases and currents ``(n_stacks, n + CLIFF_POINTS)`` of the rows of ``table``: the
    uniform ``bias_v`` (increasing, one side of zero or spanning it), then
    :data:`CLIFF_POINTS` biases evenly inside the grid interval after the
    stack's first NDR peak (away from zero; where there is none, inside the
    last interval).

    Rows whose weight is below :data:`ZERO_WEIGHT` are skipped (left 0)
    unless ``all_rows``; rows with equal layer parameters (the corners of
    neighbouring whole-monolayer combinations coincide) share one kernel
    computation: a stack's current does not depend on its batch partners.
    The 27 whole-monolayer combinations of three layers need 27 stacks
    instead of 216. Stacks in ``cache`` (:class:`KernelCache`) are not
    computed again; those computed here are added to it.
    """
    need = np.ones(weights.size, bool) if all_rows else weights >= ZERO_WEIGHT
    idx = np.nonzero(need)[0]
    key = _row_keys(table)
    _, first, inverse = np.unique(key[idx], axis=0, return_index=True, return_inverse=True)
    distinct = table.take(idx[first])
    n_d = distinct.n_stacks
    v_all = np.empty((n_d, bias_v.size + CLIFF_POINTS))
    j_all = np.empty_like(v_all)
    tag = f"{model!r}|{grid!r}|".encode() + bias_v.tobytes()
    skeys = [tag + key[idx[f]].tobytes() for f in first]
    todo = []
    for d, skey in enumerate(skeys):
        hit = None if cache is None else cache.curves.get(skey)
        if hit is None:
            todo.append(d)
        else:
            v_all[d], j_all[d] = hit
    # the side the sweep goes: a measurement is one polarity away from zero
    sign = 1.0 if abs(bias_v[-1]) >= abs(bias_v[0]) else -1.0
    if todo:
        rows = distinct.take(np.array(todo))
        rkeys = key[idx[first[todo]]]
        j = _currents(rows, bias_v, rkeys, model=model, grid=grid, cache=cache)
        order = np.argsort(sign * bias_v)
        v_side, j_side = sign * bias_v[order], sign * j[:, order]
        keep = v_side >= 0
        v_side, j_side = v_side[keep], j_side[:, keep]
        start = _steepest_fall(v_side, np.abs(j_side))
        h = np.diff(v_side)[start]
        frac = np.arange(1, CLIFF_POINTS + 1) / (CLIFF_POINTS + 1)
        cliff = sign * (v_side[start, None] + h[:, None] * frac[None, :])
        j_cliff = _currents(rows, cliff, rkeys, model=model, grid=grid, cache=cache)
        v_all[todo, : bias_v.size] = bias_v
        v_all[todo, bias_v.size :] = cliff
        j_all[todo, : bias_v.size] = j
        j_all[todo, bias_v.size :] = j_cliff
        if cache is not None:
            cache.computed += len(todo)
            for d in todo:
                cache.curves[skeys[d]] = (v_all[d].copy(), j_all[d].copy())
    inv = np.asarray(inverse).reshape(-1)
    v_out = np.zeros((table.n_stacks, bias_v.size + CLIFF_POINTS))
    j_out = np.zeros_like(v_out)
    v_out[:, : bias_v.size] = bias_v
    # a skipped row (weight 0) repeats the sweep's far end: no new bias for its row's union
    v_out[:, bias_v.size :] = bias_v[-1] if sign > 0 else bias_v[0]
    v_out[idx] = v_all[inv]
    j_out[idx] = j_all[inv]
    return v_out, j_out


def up_sweep(
    bias_v: np.ndarray, current_a_cm2: np.ndarray, r_ohm_um2: float, terminal_v: np.ndarray
) -> np.ndarray:
    """Current at terminal biases of an up sweep with series resistance; each polarity
    is swept away from zero.

    Parameters
    ----------
    bias_v
        Increasing intrinsic biases, V (either side of zero).
    current_a_cm2
        Intrinsic current densities there, A/cm^2.
    r_ohm_um2
        Specific series resistance, ohm um^2.
    terminal_v
        Terminal biases, V, at which the current is wanted.

    Notes
    -----
    ``V_terminal = V + J R`` (common practice). Where ``V + J R`` falls back
    (the NDR region folded by the resistance), a rising sweep jumps at the
    fold's terminal bias to the low branch; a terminal bias beyond it takes the
    low branch's current, interpolated on that branch alone (from where its
    ``V + J R`` first exceeds the fold's). An interpolation across the jump
    gave a point just beyond the fold a current between the branches that
    depended on where the grid's points fell: on the InP example stack (linear
    coherent model, barrier1 6 ML, 31 ohm um^2), 0.3 mV beyond the fold, 13.3
    kA/cm^2 on 401 intrinsic biases against 6.5 kA/cm^2 converged (6.54 on
    2001 and 8001 biases, 6.83 on 401 with the jump taken here).
    """
    out = np.zeros(terminal_v.size)
    for sign in (1.0, -1.0):
        side = sign * bias_v >= 0
        want = sign * terminal_v > 0
        if not np.any(want) or np.count_nonzero(side) < 2:
            continue
        v = sign * bias_v[side]
        jj = sign * current_a_cm2[side]
        order = np.argsort(v)
        v, jj = v[order], jj[order]
        ext = v + jj * r_ohm_um2 * 1e-8
        top = np.maximum.accumulate(ext)
        keep = np.ones(ext.size, bool)
        keep[1:] = ext[1:] > top[:-1]
        # a fold: the points whose terminal bias falls back are never reached; the sweep
        # jumps to the low branch, which starts where its terminal bias first exceeds the
        # fold's (its current interpolated there, between the last point below and the first
        # above); a terminal bias beyond the fold is on that branch, never between the two
        starts = [0] + [int(k) for k in np.nonzero(keep[1:] & ~keep[:-1])[0] + 1]
        ends = starts[1:] + [ext.size]
        branch_x, branch_j = [], []
        for a, b in zip(starts, ends):
            idx = a + np.nonzero(keep[a:b])[0]
            x, y = ext[idx], jj[idx]
            if a > 0:
                fold = top[a - 1]
                share = (fold - ext[a - 1]) / (ext[a] - ext[a - 1])
                x = np.concatenate([[fold], x])
                y = np.concatenate([[jj[a - 1] + share * (jj[a] - jj[a - 1])], y])
            branch_x.append(x)
            branch_j.append(y)
        t = sign * terminal_v[want]
        on = np.searchsorted([x[0] for x in branch_x], t, side="left") - 1
        on = np.clip(on, 0, len(branch_x) - 1)
        got = np.empty(t.size)
        for k, (x, y) in enumerate(zip(branch_x, branch_j)):
            mine = on == k
            if not np.any(mine):
                continue
            if x.size < 2:
                got[mine] = y[0]
                continue
            # monotone cubic (Fritsch-Carlson): no overshoot at the NDR cliff, and on the
            # smooth rise far closer than straight lines (these bias the series resistance)
            got[mine] = PchipInterpolator(x, y)(np.clip(t[mine], x[0], x[-1]))
        out[want] = sign * got
    return out


def _substrate_lattice_nm(stack: Stack) -> float | None:
    if stack.substrate is None:
        return None
    name, x = materials.parse_material(stack.substrate)
    return float(materials.lattice_constant_nm(name, x, temperature_k=stack.temperature_k))


# --------------------------------------------------------------------------- building


def _barrier_span(stack: Stack) -> tuple[int, ...]:
    """Interior layers from the first barrier to the last one (with a monolayer thickness)."""
    n = len(stack.layers)
    top = max(stack.layers[0].conduction_band_ev, stack.layers[-1].conduction_band_ev)
    barriers = [
        i for i in range(1, n - 1) if stack.layers[i].conduction_band_ev > top + BARRIER_STEP_EV
    ]
    span = range(barriers[0], barriers[-1] + 1) if barriers else range(1, n - 1)
    return tuple(i for i in span if stack.layers[i].monolayer_nm is not None)


def candidate_parameters(
    stack: Stack, growth: GrowthSettings, per_layer: dict[str, GrowthSettings], n_areas: int
) -> tuple[dict[str, FitParameter], tuple[str, ...]]:
    """Every fittable parameter of a stack, and the names of the default set.

    Parameters
    ----------
    stack
        The nominal stack.
    growth
        Growth spreads of the stack (the priors' sigmas).
    per_layer
        Growth spreads of named layers that differ from ``growth``.
    n_areas
        Number of distinct device areas measured; with two or more the area-independent
        series resistance joins the default set.
    """
    n = len(stack.layers)
    cands: dict[str, FitParameter] = {}
    default: list[str] = []
    span = _barrier_span(stack)
    by_material: dict[str, list[int]] = {}
    for i, layer in enumerate(stack.layers):
        g = per_layer.get(layer.name, growth)
        interior = 0 < i < n - 1
        if interior and layer.monolayer_nm is not None:
            by_material.setdefault(layer.material, []).append(i)
            name = f"{layer.name}.thickness_ml"
            cands[name] = FitParameter(
                name, "thickness", "ML", layer.thickness_nm / layer.monolayer_nm, 1.0,
                g.thickness_ml_sigma, -4.0, 4.0, (i,),
            )  # fmt: skip
            if i in span:
                default.append(name)
        if layer.x is not None and layer.material != "custom":
            name = f"{layer.name}.x"
            lo, hi = max(-0.1, -layer.x), min(0.1, 1.0 - layer.x)
            cands[name] = FitParameter(name, "x", "", layer.x, 0.01, g.x_sigma, lo, hi, (i,))
        if layer.doping_cm3 > 0:
            name = f"{layer.name}.doping_cm3"
            cands[name] = FitParameter(
                name, "doping", "cm^-3", layer.doping_cm3, 0.1, g.doping_sigma, -0.9, 3.0, (i,)
            )
    for mat, idx in by_material.items():
        if mat == "custom":
            continue
        name = f"{mat}.rate"
        cands[name] = FitParameter(
            name, "rate", "factor", 1.0, 0.01, growth.rate_sigma, -0.15, 0.15, tuple(idx)
        )
        if any(i not in span for i in idx):
            default.append(name)
    for mat in sorted({lay.material for lay in stack.layers} - {"custom"}):
        of_mat = tuple(i for i, lay in enumerate(stack.layers) if lay.material == mat)
        name = f"{mat}.offset_ev"
        cands[name] = FitParameter(
            name, "offset", "eV", 0.0, 0.01, OFFSET_SIGMA_EV, -0.3, 0.3, of_mat
        )
    model_fields = {f.name for f in fields(ModelOptions)}
    for key, (unit, scale, lo, hi) in MODEL_FIT.items():
        if key in model_fields:
            nominal = float(getattr(stack.model, key))
            cands[key] = FitParameter(key, "model", unit, nominal, scale, 0.0, lo - nominal, hi - nominal, key=key)  # fmt: skip
    valley = VALLEY_PARAMETER.get(getattr(stack.model, "transport", ""))
    if valley in cands:
        default.append(valley)
    r0 = stack.device.series_resistance_ohm_um2
    cands["series_resistance_ohm_um2"] = FitParameter(
        "series_resistance_ohm_um2", "resistance", "ohm um^2", r0, 10.0, 0.0, -r0, 1e5,
        key="series_resistance_ohm_um2",
    )  # fmt: skip
    cands["series_resistance_ohm"] = FitParameter(
        "series_resistance_ohm", "resistance", "ohm", 0.0, 1.0, 0.0, 0.0, 1e4,
        key="series_resistance_ohm",
    )  # fmt: skip
    default.append("series_resistance_ohm_um2")
    if n_areas >= 2:
        default.append("series_resistance_ohm")
    return cands, tuple(default)


def select(
    cands: dict[str, FitParameter], default: tuple[str, ...], fit: list[str] | None
) -> tuple[FitParameter, ...]:
    """The fit set: the ``--fit`` parameters, or the default set.

    Parameters
    ----------
    cands
        Every fittable parameter, name -> parameter.
    default
        Names of the default set.
    fit
        ``--fit`` items: parameter names, group names (:data:`GROUPS`) or ``default``;
        None or empty: the default set.
    """
    if not fit:
        return tuple(cands[n] for n in default)
    chosen: list[str] = []
    for item in fit:
        if item in GROUPS:
            kind = item
            chosen += [n for n, p in cands.items() if p.kind == kind and n not in chosen]
        elif item == "default":
            chosen += [n for n in default if n not in chosen]
        elif item in cands:
            if item not in chosen:
                chosen.append(item)
        else:
            raise InputError(
                f"{item!r} is not a fittable parameter; choose from: "
                f"{', '.join(GROUPS)}, default, {', '.join(cands)}",
                key="--fit",
            )
    return tuple(cands[n] for n in chosen)


def calibration_table(
    raw: Any, *, source: str, stack: Stack
) -> tuple[float, float, tuple[int, ...]] | None:
    """``[calibration]`` of the input file: ``xrd_period_nm = {value, sigma}``, ``xrd_layers``.

    Parameters
    ----------
    raw
        The ``[calibration]`` table, or None.
    source
        File name for messages.
    stack
        The stack (its layer names, for ``xrd_layers``).
    """
    if raw is None:
        return None
    checks.table(raw, CALIBRATION_KEYS, source=source, key="calibration")
    xrd = raw.get("xrd_period_nm")
    if xrd is None:
        return None
    form = "a table {value = <nm>, sigma = <nm>} with value > 0, sigma > 0"
    if not isinstance(xrd, dict) or set(xrd) != {"value", "sigma"}:
        raise InputError(f"must be {form}", source=source, key="calibration.xrd_period_nm")
    value, sigma = xrd["value"], xrd["sigma"]
    if not all(
        isinstance(v, int | float) and not isinstance(v, bool) and math.isfinite(v) and v > 0
        for v in (value, sigma)
    ):
        raise InputError(f"must be {form}", source=source, key="calibration.xrd_period_nm")
    names = [lay.name for lay in stack.layers]
    wanted = raw.get("xrd_layers", names[1:-1])
    if not isinstance(wanted, list) or any(w not in names[1:-1] for w in wanted) or not wanted:
        raise InputError(
            f"must be a list of layer names between the contacts ({', '.join(names[1:-1])})",
            source=source,
            key="calibration.xrd_layers",
        )
    return float(value), float(sigma), tuple(names.index(w) for w in wanted)


def read_input(
    data: dict[str, Any], *, source: str
) -> tuple[dict[str, Any], dict[str, Any], Any, Any]:
    """Split a stack or study file into its stack dictionary, layer growth tables, [growth], [calibration].

    A study's ranges are refused: a calibration needs the stack that was grown.

    Parameters
    ----------
    data
        The parsed stack or study file.
    source
        File name for messages.
    """
    from wellwright.physics.stack import TOP_KEYS

    stack_data = {k: v for k, v in data.items() if k in TOP_KEYS}
    layers = stack_data.get("layers")
    if isinstance(layers, list):
        for i, layer in enumerate(layers):
            if not isinstance(layer, dict):
                continue
            for key, value in layer.items():
                if isinstance(value, dict) and key != "growth" or key == "same_as":
                    raise InputError(
                        "a calibration needs the stack that was grown: give fixed values, "
                        "not ranges or same_as",
                        source=source,
                        layer=i,
                        key=key,
                    )
    stack_data, layer_growth = split_layer_growth(stack_data)
    return stack_data, layer_growth, data.get("growth"), data.get("calibration")


def build_problem(
    data: dict[str, Any],
    measurements: list[Measurement],
    *,
    source: str = "<dict>",
    fit: list[str] | None = None,
    bias_points: int | None = None,
) -> Problem:
    """Validate the input file's stack, growth and calibration tables against the measured sweeps.

    Parameters
    ----------
    data
        The parsed input file (stack or study without ranges).
    measurements
        The measured sweeps.
    source
        File name for messages.
    fit
        ``--fit`` items (:func:`select`); None: the default set.
    bias_points
        Points of the intrinsic bias grid; None: twice the measured density.
    """
    stack_data, layer_growth, growth_raw, calib_raw = read_input(data, source=source)
    stack = parse_stack(stack_data, source=source)
    names = tuple(lay.name for lay in stack.layers)
    growth, per_layer = parse_growth(growth_raw, layer_growth, layer_names=names, source=source)
    by_t: dict[float | None, Stack] = {}
    for meas in measurements:
        t = meas.temperature_k
        if t is not None and t not in by_t:
            by_t[t] = parse_stack({**stack_data, "temperature_k": t}, source=source)
    areas = {m.area_um2 for m in measurements if m.area_um2 is not None}
    cands, default = candidate_parameters(stack, growth, per_layer, len(areas))
    params = select(cands, default, fit)
    if any(p.key == "series_resistance_ohm" for p in params):
        missing = [m.source for m in measurements if m.area_um2 is None]
        if missing:
            raise InputError(
                "series_resistance_ohm needs each file's area: add '# area_um2 = ...'",
                source=missing[0],
            )
    island = tuple(p.layers[0] for p in params if p.kind == "thickness")
    if len(island) > MAX_ISLAND_LAYERS:
        raise InputError(
            f"{len(island)} layer thicknesses fitted; at most {MAX_ISLAND_LAYERS} "
            "(each doubles the stacks computed)",
            key="--fit",
        )
    nominal_ml = np.array(
        [
            lay.thickness_nm / lay.monolayer_nm
            if 0 < i < len(names) - 1 and lay.monolayer_nm
            else np.nan
            for i, lay in enumerate(stack.layers)
        ]
    )
    return Problem(
        stack=stack,
        stacks_by_temperature=by_t,
        measurements=tuple(measurements),
        parameters=params,
        nominal_ml=nominal_ml,
        island_layers=island,
        growth=growth,
        xrd=calibration_table(calib_raw, source=source, stack=stack),
        bias_points=bias_points,
        source=source,
    )
