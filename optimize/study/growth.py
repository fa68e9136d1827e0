"""As-grown samples of a design: the growth-variation model.

A nominal :class:`wellwright.physics.stack.Stack` is turned into a batch of as-grown
stacks (a :class:`wellwright.physics.stack.LayerTable`, one row per sample) by drawing
growth errors. The ``[growth]`` table of a study file gives the one-sigma
figures; a layer may override its own with ``growth = {...}``::

    [growth]
    thickness_ml_sigma = 0.5     # random, per layer, monolayers
    rate_sigma = 0.01            # systematic, per material, relative
    x_sigma = 0.005              # composition, per alloy layer, absolute
    doping_sigma = 0.05          # doping, per doped layer, relative

or, naming the source cells of the run (``[growth.cells]``, see "Source
cells" below)::

    [growth]
    thickness_ml_sigma = 0.5     # random, per layer, monolayers (islands)
    [growth.cells]               # relative one-sigma flux error of each cell
    In = {flux_sigma = 0.01, drift_sigma = 0.005}
    Ga = {flux_sigma = 0.01}
    Al = {flux_sigma = 0.01}
    Si = {flux_sigma = 0.05}     # the dopant cell of every doped layer

and the wafer (``[growth.wafer]``, see "Wafer" below)::

    [growth.wafer]
    diameter_mm = 76.2           # a 3-inch wafer
    thickness_loss = 0.02        # 2 % thinner at the edge than at the centre, parabolic

The defaults are typical figures for molecular-beam epitaxy of III-V RTDs
(common practice, from memory; no single published source): about half a
monolayer of random thickness error per layer, a per cent of growth-rate
drift per source, half a per cent absolute composition error, five per cent
doping error. Calibrate them against the grower's own records.

Variation parameters (one standard-normal coordinate ``z`` each)
------------------------------------------------------------------
- ``<layer>.thickness_ml``: random thickness error of a layer between the
  contacts, ``sigma * z`` monolayers;
- ``<Material>.rate``: systematic relative growth-rate error shared by every
  layer of that material (canonical name, e.g. ``InGaAs``, ``AlAs``; only
  without ``[growth.cells]``);
- ``<cell>.flux`` and ``<cell>.flux_drift``: relative flux error of a source
  cell and its drift from the start to the end of the run (with
  ``[growth.cells]``);
- ``<layer>.x``: absolute composition error of an alloy layer (contacts
  included: their band edge sets the emitter Fermi level);
- ``<layer>.doping``: relative doping error of a doped layer;
- ``wafer.radius_mm``: the device's place on the wafer (with ``[growth.wafer]``).

As-grown thickness (Notes)
--------------------------
``t_ml = n_ml (1 + r_material) + d_ml`` with ``n_ml`` the nominal monolayer
count (``thickness_nm / monolayer_nm`` for a layer given in nm), and
``thickness_nm = t_ml * a_ml(x)`` with the monolayer thickness of the
as-grown composition from :func:`wellwright.physics.materials.material_parameters`
(which also gives the band edge, mass, nonparabolicity and permittivity at
that composition, strained to the stack's substrate). Doping is multiplied by
``max(1 + sigma z, 0.01)``.

Source cells (Notes)
--------------------
Every III-V layer here grows group-III limited under a group-V overpressure,
so its growth rate in monolayers per second is the sum of the fluxes of the
group-III cells it uses and an alloy's composition is the ratio of those
fluxes; the dopant concentration is the dopant flux over the growth rate
(common practice of III-V molecular-beam epitaxy). A cell's as-grown flux in
layer ``i`` is ``F_c (1 + e_c + d_c s_i)`` with ``e_c = flux_sigma * z`` its
error for the whole run, ``d_c = drift_sigma * z'`` its drift over the run and
``s_i`` in [0, 1] the layer's place in the run (layers grow in the file's
order, first layer first; ``s`` is the nominal thickness grown before the
layer's centre over the whole thickness between the contacts, 0 for the
first contact and 1 for the last). For a layer of composition ``x`` from the
cells A (fraction ``x`` of the group-III flux, e.g. In in In0.53Ga0.47As) and
B (``1 - x``), with ``g_c = 1 + e_c + d_c s_i``::

    x' = x g_A / (x g_A + (1 - x) g_B)        t' = t (x g_A + (1 - x) g_B)
    N' = N g_dopant / (x g_A + (1 - x) g_B)

(the growth time of each layer is the nominal one). To first order
``dx = x (1 - x) (e_A - e_B)`` and ``dt / t = x e_A + (1 - x) e_B``. Layers
sharing a cell move together: two In0.53Ga0.47As layers get the same
composition error from the cells. Group-III cells: Al, Ga, In; dopant cells
(n-type): Si, Te, Sn. A group-V alloy (GaAsSb, AlAsSb) takes its composition
from the group-V fluxes, which are not modelled: give it ``x_sigma``.

With ``[growth.cells]``, ``rate_sigma`` is not allowed (the cells set the
rates), ``x_sigma`` defaults to 0 (the cells set the compositions; a value
given adds an independent per-layer error), and ``doping_sigma`` defaults to
0 when a dopant cell is declared. The per-layer ``thickness_ml_sigma``
(random monolayer error) and the layers' own overrides stay.

Wafer (Notes)
-------------
Layers thin from the centre to the edge of the wafer by about one to a few
per cent over 2" to 4" (common practice; the shape depends on the reactor).
With ``[growth.wafer]`` a device sits at radius ``r`` on the wafer, drawn
uniformly over its area (``r = R sqrt(u)``, ``u`` uniform; in the standard
normal coordinate of the parameter ``wafer.radius_mm``, ``u = Phi(z)``), and
every grown layer's thickness is multiplied by ``1 - loss (r / R)^2``
(``thickness_loss``, parabolic) or by the measured relative thickness
interpolated in ``thickness_profile = [[r_mm, relative], ...]`` (divided by
its centre value); ``x_shift`` (absolute) and ``doping_change`` (relative)
change every composition and doping by that much at the edge, parabolically.
The yield at the centre is the point yield; the yield over the wafer's area
(the share of devices meeting the spec) is the wafer yield.

Island model (monolayers are discrete)
--------------------------------------
A layer whose as-grown thickness falls between two whole monolayers
``n = floor(t)`` and ``n + 1`` is taken as lateral islands of the two
integer thicknesses covering areas ``1 - f`` and ``f`` (``f = t - n``); the
current of the device is the area-weighted mean of the currents of the two
(parallel conduction, islands wider than the coherence length; common
practice), not the current of a fractional thickness.

:meth:`GrowthModel.grow` makes each as-grown sample such a device: the
mixture over the combinations of whole thicknesses of its island layers
(:func:`wellwright.physics.islands.island_mixture`, ``2**k`` stacks for
``k`` layers), whose figures of merit come from the mixed I-V
(:func:`wellwright.physics.iv.sweep` with ``area_weights``). The tolerance
analysis takes as island layers the three (``[growth] island_layers``, 0 to
8) whose one-monolayer steps bend the peak current most (``choose_island_layers`` in
:mod:`wellwright.optimize.tolerance.analysis`), the others at their
continuous thickness, and states the error of that truncation. Monte Carlo,
Sobol, Morris, allocation and the robust search all use it; being a
deterministic function of the growth errors, it suits the sensitivity
estimators too. :meth:`GrowthModel.as_grown` gives one whole-monolayer stack
per sample instead: ``islands="sample"`` draws the upper thickness with
probability ``f``, ``islands="nearest"`` rounds.
Layers are kept at one monolayer or more.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from wellwright.physics import checks, materials
from wellwright.physics.errors import InputError
from wellwright.physics.islands import area_weight_matrix, island_mixture
from wellwright.physics.stack import LayerTable, Stack, default_layer_name

__all__ = [
    "GrowthSettings",
    "CellSettings",
    "WaferSettings",
    "GrowthParameter",
    "GrowthModel",
    "DEFAULT_GROWTH",
    "as_generator",
    "parse_growth",
    "split_layer_growth",
    "growth_model",
    "ISLAND_MODES",
    "layer_cells",
    "GROUP_III_CELLS",
    "DOPANT_CELLS",
]

ISLAND_MODES = ("sample", "nearest")
#: Allowed one-sigma ranges of the ``[growth]`` keys: (low, high, unit).
GROWTH_KEYS: dict[str, tuple[float, float, str]] = {
    "thickness_ml_sigma": (0.0, 5.0, "monolayers"),
    "rate_sigma": (0.0, 0.5, "relative"),
    "x_sigma": (0.0, 0.2, "absolute composition"),
    "doping_sigma": (0.0, 1.0, "relative"),
}
#: Keys a layer's own ``growth`` table may override (the rate is per material).
LAYER_GROWTH_KEYS = ("thickness_ml_sigma", "x_sigma", "doping_sigma")
MIN_THICKNESS_ML = 1.0
#: Source cells a ``[growth.cells]`` table may declare (see module docstring).
GROUP_III_CELLS = ("Al", "Ga", "In")
DOPANT_CELLS = ("Si", "Te", "Sn")
#: Keys of one cell: (low, high, unit).
CELL_KEYS: dict[str, tuple[float, float, str]] = {
    "flux_sigma": (0.0, 0.5, "relative"),
    "drift_sigma": (0.0, 0.5, "relative, start to end of the run"),
}
#: Keys of ``[growth.wafer]``: (low, high, unit); ``thickness_profile`` is a table.
WAFER_KEYS: dict[str, tuple[float, float, str]] = {
    "diameter_mm": (10.0, 450.0, "mm"),
    "thickness_loss": (0.0, 0.5, "fraction lost from centre to edge"),
    "x_shift": (-0.1, 0.1, "absolute composition change from centre to edge"),
    "doping_change": (-0.5, 0.5, "relative doping change from centre to edge"),
}
#: flux_sigma of a cell that does not give one: the rate_sigma / doping_sigma defaults.
DEFAULT_FLUX_SIGMA = {"group-III": 0.01, "dopant": 0.05}


def as_generator(seed: int | np.random.Generator | None) -> np.random.Generator:
    """The one seed normaliser: int, Generator or None -> :class:`numpy.random.Generator`.

    ``None`` gives fresh entropy; an int (0 included) a reproducible stream;
    a Generator is used as is (and advanced).
    """
    if isinstance(seed, np.random.Generator):
        return seed
    if seed is not None and (isinstance(seed, bool) or not isinstance(seed, (int, np.integer))):
        raise TypeError(f"seed must be an int, a numpy Generator or None, got {seed!r}")
    return np.random.default_rng(seed)


@dataclass(frozen=True)
class CellSettings:
    """One source cell: relative one-sigma flux error for the run and drift over the run."""

    name: str
    flux_sigma: float
    drift_sigma: float = 0.0

    @property
    def dopant(self) -> bool:
        return self.name in DOPANT_CELLS


@dataclass(frozen=True)
class WaferSettings:
    """The wafer and its radial profile (see "Wafer" in the module docstring)."""

    diameter_mm: float
    thickness_loss: float = 0.0
    thickness_profile: tuple[tuple[float, float], ...] = ()  #: (radius_mm, relative thickness)
    x_shift: float = 0.0
    doping_change: float = 0.0

    @property
    def radius_mm(self) -> float:
        return 0.5 * self.diameter_mm

    def radius_of(self, z: np.ndarray) -> np.ndarray:
        """Radius, mm, of standard-normal coordinates: uniform over the wafer's area."""
        from scipy.special import ndtr

        return self.radius_mm * np.sqrt(ndtr(np.asarray(z, float)))

    def thickness_factor(self, radius_mm: np.ndarray) -> np.ndarray:
        """As-grown over centre thickness at ``radius_mm``."""
        r = np.asarray(radius_mm, float)
        if self.thickness_profile:
            rs, vs = np.array(self.thickness_profile, float).T
            return np.interp(r, rs, vs) / np.interp(0.0, rs, vs)
        return 1.0 - self.thickness_loss * (r / self.radius_mm) ** 2


@dataclass(frozen=True)
class GrowthSettings:
    """One-sigma growth errors (defaults: typical practice, see module docstring).

    ``cells`` (from ``[growth.cells]``) empty: the per-material rate model.
    """

    thickness_ml_sigma: float = 0.5
    rate_sigma: float = 0.01
    x_sigma: float = 0.005
    doping_sigma: float = 0.05
    cells: tuple[CellSettings, ...] = ()
    wafer: WaferSettings | None = None
    #: layers taken as monolayer islands per design (2**n stacks per sample; see the
    #: module docstring); 0 keeps every layer at its continuous thickness (fastest)
    island_layers: int = 3

    def cell(self, name: str) -> CellSettings | None:
        return next((c for c in self.cells if c.name == name), None)


DEFAULT_GROWTH = GrowthSettings()


@dataclass(frozen=True)
class GrowthParameter:
    """One variation parameter: ``deviation = sigma * z``, z standard normal.

    ``kind`` is ``thickness`` (monolayers), ``rate`` (relative), ``x``
    (absolute), ``doping`` (relative), ``flux`` or ``drift`` (relative, of the
    cell ``cell``); ``layers`` are the affected layer indices (several for a
    rate or a cell).
    """

    name: str
    kind: str
    sigma: float
    layers: tuple[int, ...]
    cell: str | None = None

    @property
    def unit(self) -> str:
        units = {"thickness": "ML", "x": "absolute", "wafer": "mm"}
        return units.get(self.kind, "relative")

    @property
    def control(self) -> str:
        """What the grower holds to control this parameter, in words."""
        if self.cell is not None:
            return f"{self.cell} cell"
        if self.kind == "rate":
            return f"{self.name.rsplit('.', 1)[0]} growth rate"
        if self.kind == "wafer":
            return "wafer uniformity"
        return f"layer {self.name.rsplit('.', 1)[0]}"


def _check_sigma(value: Any, key: str, **where: Any) -> float:
    return _check_range(value, GROWTH_KEYS[key.rsplit(".", 1)[-1]], key, **where)


def _check_range(value: Any, bounds: tuple[float, float, str], key: str, **where: Any) -> float:
    lo, hi, unit = bounds
    return checks.number(value, low=lo, high=hi, unit=f"({unit})", key=key, **where)


def parse_growth(
    table: Any,
    layer_growth: dict[str, Any] | None = None,
    *,
    layer_names: tuple[str, ...] | list[str] = (),
    source: str = "<dict>",
) -> tuple[GrowthSettings, dict[str, GrowthSettings]]:
    """Validate ``[growth]`` and the layers' own ``growth`` tables.

    Returns the global settings and, per layer name with an override, its
    settings (the global ones with the override applied).

    Parameters
    ----------
    table
        The study's ``[growth]`` table (``None`` when absent).
    layer_growth
        The layers' own ``growth`` tables by layer name.
    layer_names
        The study's layer names, in order (empty: not checked).
    source
        The study file, for messages.

    Raises
    ------
    InputError
        Naming the key (``growth.<key>`` or ``layers.growth.<key>``) and the allowed form.
    """
    table = {} if table is None else table
    if not isinstance(table, dict):
        raise InputError("must be a table, e.g. [growth]", source=source, key="growth")
    values = _global_growth(table, source=source)
    settings = GrowthSettings(**values)
    per_layer: dict[str, GrowthSettings] = {}
    names = list(layer_names)
    for name, sub in (layer_growth or {}).items():
        index = names.index(name) if name in names else None
        if names and index is None:
            raise InputError(f"no layer named '{name}'", source=source, key="growth")
        if not isinstance(sub, dict):
            raise InputError(
                "must be a table, e.g. growth = {thickness_ml_sigma = 0.3}",
                source=source,
                layer=index,
                layer_name=name,
                key="growth",
            )
        per_layer[name] = _layer_growth(sub, settings, index=index, name=name, source=source)
    return settings, per_layer


def _global_growth(table: dict[str, Any], *, source: str) -> dict[str, Any]:
    """The ``[growth]`` table's settings, checked, with its cells and wafer."""
    values: dict[str, Any] = {}
    for key, value in table.items():
        if key in ("cells", "wafer"):
            continue
        if key == "island_layers":
            if isinstance(value, bool) or not isinstance(value, int) or not 0 <= value <= 8:
                raise InputError(
                    f"must be a whole number in [0, 8] (layers taken as islands), got {value!r}",
                    source=source,
                    key="growth.island_layers",
                )
            values[key] = value
            continue
        if key not in GROWTH_KEYS:
            raise InputError(
                f"unknown key; allowed: {', '.join(GROWTH_KEYS)}, island_layers, "
                "[growth.cells], [growth.wafer]",
                source=source,
                key=f"growth.{key}",
            )
        values[key] = _check_sigma(value, f"growth.{key}", source=source, layer=None)
    if "cells" in table:
        cells = _parse_cells(table["cells"], source=source)
        if "rate_sigma" in values:
            raise InputError(
                "not with [growth.cells]: the cells' flux_sigma sets every layer's growth rate",
                source=source,
                key="growth.rate_sigma",
            )
        values.update(cells=cells, rate_sigma=0.0)
        values.setdefault("x_sigma", 0.0)
        if any(c.dopant for c in cells):
            values.setdefault("doping_sigma", 0.0)
    if "wafer" in table:
        values["wafer"] = _parse_wafer(table["wafer"], source=source)
    return values


def _layer_growth(
    sub: dict[str, Any], settings: GrowthSettings, *, index: int | None, name: str, source: str
) -> GrowthSettings:
    """A layer's settings: the global ``settings`` with its own ``growth`` table applied."""
    over = {}
    for key, value in sub.items():
        if key not in LAYER_GROWTH_KEYS:
            extra = (
                " (the rate is per material: set rate_sigma in [growth])"
                if key == "rate_sigma"
                else ""
            )
            raise InputError(
                f"unknown key; allowed: {', '.join(LAYER_GROWTH_KEYS)}{extra}",
                source=source,
                layer=index,
                layer_name=name,
                key=f"growth.{key}",
            )
        over[key] = _check_sigma(
            value, f"growth.{key}", source=source, layer=index, layer_name=name
        )
    return GrowthSettings(**{**settings.__dict__, **over})


def _parse_cells(table: Any, *, source: str) -> tuple[CellSettings, ...]:
    """``[growth.cells]``: cell name -> ``{flux_sigma, drift_sigma}``."""
    allowed = GROUP_III_CELLS + DOPANT_CELLS
    if not isinstance(table, dict) or not table:
        raise InputError(
            "must be a table of cells, e.g. In = {flux_sigma = 0.01}",
            source=source,
            key="growth.cells",
        )
    cells = []
    for name, sub in table.items():
        key = f"growth.cells.{name}"
        if name not in allowed:
            raise InputError(f"unknown cell; allowed: {', '.join(allowed)}", source=source, key=key)
        if not isinstance(sub, dict):
            raise InputError(
                "must be a table, e.g. {flux_sigma = 0.01, drift_sigma = 0.005}",
                source=source,
                key=key,
            )
        vals = {}
        for k, v in sub.items():
            if k not in CELL_KEYS:
                raise InputError(
                    f"unknown key; allowed: {', '.join(CELL_KEYS)}", source=source, key=f"{key}.{k}"
                )
            vals[k] = _check_range(v, CELL_KEYS[k], f"{key}.{k}", source=source, layer=None)
        sort = "dopant" if name in DOPANT_CELLS else "group-III"
        vals.setdefault("flux_sigma", DEFAULT_FLUX_SIGMA[sort])
        cells.append(CellSettings(name, **vals))
    if sum(c.dopant for c in cells) > 1:
        raise InputError(
            "declares more than one dopant cell; every doped layer here is n-type from one cell",
            source=source,
            key="growth.cells",
        )
    return tuple(cells)


def _parse_wafer(table: Any, *, source: str) -> WaferSettings:
    """``[growth.wafer]``: diameter and radial profile."""
    if not isinstance(table, dict):
        raise InputError(
            "must be a table, e.g. {diameter_mm = 76.2, thickness_loss = 0.02}",
            source=source,
            key="growth.wafer",
        )
    vals: dict[str, Any] = {}
    for k, v in table.items():
        key = f"growth.wafer.{k}"
        if k == "thickness_profile":
            vals[k] = _parse_profile(v, key, source=source)
        elif k in WAFER_KEYS:
            vals[k] = _check_range(v, WAFER_KEYS[k], key, source=source, layer=None)
        else:
            raise InputError(
                f"unknown key; allowed: {', '.join(WAFER_KEYS)}, thickness_profile",
                source=source,
                key=key,
            )
    if "diameter_mm" not in vals:
        raise InputError(
            "missing, e.g. diameter_mm = 76.2", source=source, key="growth.wafer.diameter_mm"
        )
    if "thickness_profile" in vals and "thickness_loss" in vals:
        raise InputError(
            "give thickness_loss or thickness_profile, not both",
            source=source,
            key="growth.wafer.thickness_profile",
        )
    wafer = WaferSettings(**vals)
    last_mm = wafer.thickness_profile[-1][0] if wafer.thickness_profile else wafer.radius_mm
    if abs(last_mm - wafer.radius_mm) > 1e-9:  # beyond the edge: a unit slip, cm for mm
        raise InputError(
            f"must end at the wafer's edge ({wafer.radius_mm:g} mm), its last radius is "
            f"{last_mm:g} mm",
            source=source,
            key="growth.wafer.thickness_profile",
        )
    return wafer


def _parse_profile(value: Any, key: str, *, source: str) -> tuple[tuple[float, float], ...]:
    form = "a list of [radius_mm, relative thickness] pairs from 0 mm, radii increasing"
    ok = isinstance(value, list) and len(value) >= 2
    pairs = []
    for item in value if ok else []:
        if not (
            isinstance(item, list)
            and len(item) == 2
            and all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in item)
        ):
            ok = False
            break
        pairs.append((float(item[0]), float(item[1])))
    if ok:
        r = [p[0] for p in pairs]
        ok = (
            r[0] == 0.0
            and all(b > a for a, b in zip(r, r[1:]))
            and all(0.5 <= p[1] <= 1.5 for p in pairs)
        )
    if not ok:
        raise InputError(
            f"must be {form}, relative thickness in [0.5, 1.5]", source=source, key=key
        )
    return tuple(pairs)


def split_layer_growth(data: dict[str, Any]) -> tuple[dict[str, Any], dict[str, Any]]:
    """A stack dictionary without its layers' ``growth`` tables, and those tables by layer name.

    :func:`wellwright.physics.stack.parse_stack` rejects unknown layer keys, so a stack
    file carrying growth overrides goes through this first.
    """
    out = dict(data)
    growth: dict[str, Any] = {}
    layers = data.get("layers")
    if isinstance(layers, list):
        new = []
        n = len(layers)
        for i, raw in enumerate(layers):
            if isinstance(raw, dict) and "growth" in raw:
                raw = dict(raw)
                name = raw.get("name", default_layer_name(i, n_layers=n))
                growth[str(name)] = raw.pop("growth")
            new.append(raw)
        out["layers"] = new
    return out, growth


# --------------------------------------------------------------------------- the model


def layer_cells(material: str, x: float | None) -> tuple[tuple[str, float, bool], ...]:
    """Group-III cells a layer grows from: ``(cell, share of the group-III flux, sets x)``.

    ``In0.53Ga0.47As`` -> ``(("In", 0.53, True), ("Ga", 0.47, False))``; ``AlAs`` ->
    ``(("Al", 1.0, False),)``; a group-V alloy (``GaAsSb``) has its one
    group-III cell; a custom material none. ``sets x``: the cell whose share
    is the composition ``x`` (see the module docstring; common practice).

    Parameters
    ----------
    material
        The layer's material as the material table keys it (``Layer.material``; ``custom``:
        no cells).
    x
        Its composition, or ``None``.
    """
    from wellwright.physics.material_data import BINARIES, TERNARIES

    if material in TERNARIES:
        iii = [(el, role) for el, role in TERNARIES[material].formula if el in GROUP_III_CELLS]
        if len(iii) == 1 or x is None:
            return ((iii[0][0], 1.0, False),)
        return tuple((el, x if role == "x" else 1.0 - x, role == "x") for el, role in iii)
    if material in BINARIES:
        return tuple(
            (el, 1.0, False) for el in re.findall(r"[A-Z][a-z]?", material) if el in GROUP_III_CELLS
        )
    return ()


@dataclass(frozen=True)
class CellUse:
    """How the layers of a stack use the declared cells (arrays over cells x layers)."""

    names: tuple[str, ...]
    share: np.ndarray  #: (n_cells, n_layers) nominal share of each layer's group-III flux
    x_share: np.ndarray  #: (n_cells, n_layers) share of the cell that sets x, else 0
    run_position: np.ndarray  #: (n_layers,) place in the run, 0 (first contact) to 1 (last)

    def flux_factors(self, flux: np.ndarray, drift: np.ndarray) -> np.ndarray:
        """``(n, n_cells, n_layers)`` as-grown over nominal flux from ``(n, n_cells)`` errors.

        Parameters
        ----------
        flux
            Relative flux error of each cell, ``(n, n_cells)``.
        drift
            Relative drift of each cell over the run, ``(n, n_cells)``.
        """
        return 1.0 + flux[:, :, None] + drift[:, :, None] * self.run_position

    def rate_factor(self, g: np.ndarray) -> np.ndarray:
        """``(n, n_layers)`` as-grown over nominal group-III rate (1 where a layer uses no cell)."""
        used = self.share.sum(axis=0) > 0
        return np.where(used, np.einsum("cl,ncl->nl", self.share, g), 1.0)


def _run_position(stack: Stack) -> np.ndarray:
    n = len(stack.layers)
    t = np.array(
        [0.0 if not 0 < i < n - 1 else lay.thickness_nm for i, lay in enumerate(stack.layers)]
    )
    total = t.sum()
    if total <= 0:
        return np.linspace(0.0, 1.0, n)
    pos = (np.cumsum(t) - 0.5 * t) / total
    pos[0], pos[-1] = 0.0, 1.0
    return pos


def check_cells(stack: Stack, settings: GrowthSettings) -> None:
    """An :class:`InputError` where a layer of ``stack`` grows from a group-III cell that
    ``settings.cells`` does not declare (none without cells); what :func:`growth_model` finds
    later, said when the study is read (a fuzz run's ``run`` found it only after the search,
    and ``search`` not at all).

    Parameters
    ----------
    stack
        A stack of the study (its materials are those of every design).
    settings
        The global growth settings (``[growth]``).
    """
    if settings.cells:
        _cell_use(stack, settings)


def _cell_use(stack: Stack, settings: GrowthSettings) -> CellUse:
    iii = [c.name for c in settings.cells if not c.dopant]
    n = len(stack.layers)
    share = np.zeros((len(iii), n))
    x_share = np.zeros((len(iii), n))
    for i, layer in enumerate(stack.layers):
        for cell, frac, sets_x in layer_cells(layer.material, layer.x):
            if cell not in iii:
                raise InputError(
                    f"{layer.material} grows from the {cell} cell, which [growth.cells] does not "
                    f"declare (declared: {', '.join(c.name for c in settings.cells)})",
                    source=stack.source,
                    layer=i,
                    layer_name=layer.name,
                    key="growth.cells",
                )
            share[iii.index(cell), i] = frac
            if sets_x:
                x_share[iii.index(cell), i] = frac
    return CellUse(tuple(iii), share, x_share, _run_position(stack))


@dataclass(frozen=True)
class GrowthModel:
    """A nominal stack and its variation parameters; draws as-grown tables.

    Build with :func:`growth_model`. Plain data (picklable).
    """

    stack: Stack
    parameters: tuple[GrowthParameter, ...]
    nominal: LayerTable = field(repr=False)
    nominal_ml: np.ndarray = field(
        repr=False
    )  #: (n_layers,) nominal monolayer counts, NaN for contacts
    substrate_lattice_nm: float | None = None
    cells: CellUse | None = field(default=None, repr=False)
    #: layers taken as monolayer islands (None: every layer; others keep their continuous
    #: thickness); see :func:`wellwright.optimize.tolerance.analysis.choose_island_layers`
    island_layers: tuple[int, ...] | None = None
    #: how many layers the choice may take (``[growth] island_layers``)
    max_island_layers: int = 3
    wafer: WaferSettings | None = None

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(p.name for p in self.parameters)

    @property
    def sigmas(self) -> np.ndarray:
        return np.array([p.sigma for p in self.parameters], float)

    def draw_z(self, n: int, seed: int | np.random.Generator | None = None) -> np.ndarray:
        """``(n, n_parameters)`` standard-normal coordinates.

        Parameters
        ----------
        n
            Number of samples.
        seed
            A whole-number seed or a generator, normalised by :func:`as_generator`; ``None``:
            fresh entropy.
        """
        return as_generator(seed).standard_normal((n, len(self.parameters)))

    def draw_island_u(self, n: int, seed: int | np.random.Generator | None = None) -> np.ndarray:
        """``(n, n_layers)`` uniforms deciding each layer's island thickness.

        Parameters
        ----------
        n
            Number of samples.
        seed
            A whole-number seed or a generator, normalised by :func:`as_generator`; ``None``:
            fresh entropy.
        """
        return as_generator(seed).random((n, self.nominal.n_layers))

    def _deviations(self, z: np.ndarray, sigma_scale: np.ndarray | None) -> np.ndarray:
        z = np.atleast_2d(np.asarray(z, float))
        return z * self.sigmas * (1.0 if sigma_scale is None else np.asarray(sigma_scale, float))

    def _cell_errors(self, dev: np.ndarray, kind: str) -> np.ndarray:
        """``(n, n_cells)`` flux (or drift) errors of the group-III cells."""
        out = np.zeros((dev.shape[0], len(self.cells.names) if self.cells else 0))
        for j, p in enumerate(self.parameters):
            if p.kind == kind and self.cells and p.cell in self.cells.names:
                out[:, self.cells.names.index(p.cell)] = dev[:, j]
        return out

    def radius_mm(self, z: np.ndarray, radius_mm: np.ndarray | None = None) -> np.ndarray | None:
        """Each sample's radius on the wafer, mm (None without ``[growth.wafer]``).

        Parameters
        ----------
        z
            Standard-normal coordinates of the variation parameters, ``(n, n_parameters)``.
        radius_mm
            Radii to use instead, mm, ``(n,)`` or scalar; ``None``: from ``z``.
        """
        j = next((j for j, p in enumerate(self.parameters) if p.kind == "wafer"), None)
        if j is None or self.wafer is None:
            return None
        if radius_mm is not None:
            return np.broadcast_to(np.asarray(radius_mm, float), (np.atleast_2d(z).shape[0],))
        return self.wafer.radius_of(np.atleast_2d(np.asarray(z, float))[:, j])

    def grown_fields(
        self,
        z: np.ndarray,
        *,
        sigma_scale: np.ndarray | None = None,
        radius_mm: np.ndarray | None = None,
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """As-grown monolayers (before the island step), compositions and doping factors.

        Returns ``(thickness_ml, x, doping_factor)``, each ``(n, n_layers)``:
        ``thickness_ml`` NaN for the contacts, ``x`` NaN for layers without a
        composition, ``doping_factor`` the as-grown over nominal doping.
        ``radius_mm`` (with ``[growth.wafer]``) puts the samples at those radii
        instead of the ones their ``wafer.radius_mm`` coordinate gives; a
        ``sigma_scale`` of 0 on that parameter puts them at the centre.

        Parameters
        ----------
        z
            Standard-normal coordinates of the variation parameters, ``(n, n_parameters)``.
        sigma_scale
            Factor on each parameter's sigma, ``(n_parameters,)``; ``None``: 1 (0 fixes a
            parameter at its nominal value).
        radius_mm
            Radii on the wafer to put the samples at, mm, ``(n,)`` or scalar (with
            ``[growth.wafer]``); ``None``: from ``z``.
        """
        dev = self._deviations(z, sigma_scale)
        n, n_layers = dev.shape[0], self.nominal_ml.size
        ml = np.broadcast_to(self.nominal_ml, (n, n_layers)).copy()
        x = np.array([np.nan if lay.x is None else lay.x for lay in self.stack.layers])
        x = np.broadcast_to(x, (n, n_layers)).copy()
        rate, extra = np.ones((n, n_layers)), np.zeros((n, n_layers))
        doping = np.ones((n, n_layers))
        if self.cells is not None:
            g = self.cells.flux_factors(
                self._cell_errors(dev, "flux"), self._cell_errors(dev, "drift")
            )
            rate = self.cells.rate_factor(g)
            sets_x = self.cells.x_share.sum(axis=0) > 0
            x_cells = np.einsum("cl,ncl->nl", self.cells.x_share, g) / rate
            x = np.where(sets_x, x_cells, x)
            doping = doping / rate
        position = self.cells.run_position if self.cells is not None else _run_position(self.stack)
        for j, p in enumerate(self.parameters):
            cols = list(p.layers)
            if p.kind == "rate":
                rate[:, cols] += dev[:, j, None]
            elif p.kind == "thickness":
                extra[:, cols] += dev[:, j, None]
            elif p.kind == "x":
                x[:, cols] += dev[:, j, None]
            elif p.kind == "doping" or (p.kind == "flux" and p.cell in DOPANT_CELLS):
                doping[:, cols] *= 1.0 + dev[:, j, None]
            elif p.kind == "drift" and p.cell in DOPANT_CELLS:
                doping[:, cols] *= 1.0 + dev[:, j, None] * position[cols]
            elif p.kind == "wafer":
                scale = 1.0 if sigma_scale is None else float(np.asarray(sigma_scale)[j])
                r = self.radius_mm(z, radius_mm)
                w = self.wafer
                assert (
                    w is not None and r is not None
                )  # a wafer parameter exists only with [growth.wafer]
                edge = (r / w.radius_mm) ** 2 * scale
                rate *= (1.0 + (w.thickness_factor(r) - 1.0) * scale)[:, None]
                x += w.x_shift * edge[:, None]
                doping *= (1.0 + w.doping_change * edge)[:, None]
        return ml * rate + extra, np.clip(x, 0.0, 1.0), np.maximum(doping, 0.01)

    def thickness_ml(
        self,
        z: np.ndarray,
        *,
        sigma_scale: np.ndarray | None = None,
        radius_mm: np.ndarray | None = None,
    ) -> np.ndarray:
        """As-grown (continuous) monolayer counts ``(n, n_layers)`` before the island step.

        Parameters
        ----------
        z
            Standard-normal coordinates of the variation parameters, ``(n, n_parameters)``.
        sigma_scale
            Factor on each parameter's sigma, ``(n_parameters,)``; ``None``: 1 (0 fixes a
            parameter at its nominal value).
        radius_mm
            Radii on the wafer to put the samples at, mm, ``(n,)`` or scalar (with
            ``[growth.wafer]``); ``None``: from ``z``.
        """
        return self.grown_fields(z, sigma_scale=sigma_scale, radius_mm=radius_mm)[0]

    def composition(self, z: np.ndarray, *, sigma_scale: np.ndarray | None = None) -> np.ndarray:
        """As-grown compositions ``(n, n_layers)`` (NaN for layers without one).

        Parameters
        ----------
        z
            Standard-normal coordinates of the variation parameters, ``(n, n_parameters)``.
        sigma_scale
            Factor on each parameter's sigma, ``(n_parameters,)``; ``None``: 1 (0 fixes a
            parameter at its nominal value).
        """
        return self.grown_fields(z, sigma_scale=sigma_scale)[1]

    def _continuous(
        self, z: np.ndarray, sigma_scale: np.ndarray | None, radius_mm: np.ndarray | None = None
    ) -> tuple[dict[str, np.ndarray], np.ndarray, np.ndarray]:
        """Per-sample layer columns (materials, doping) and continuous monolayers.

        Returns ``(columns, monolayer_nm, thickness_ml)``: ``thickness_ml`` NaN
        for layers not grown in monolayers (contacts), at least one monolayer
        elsewhere.
        """
        ml, x, doping_factor = self.grown_fields(z, sigma_scale=sigma_scale, radius_mm=radius_mm)
        n = ml.shape[0]
        t = self.nominal
        rows = lambda a: np.broadcast_to(a[0], (n, a.shape[1])).copy()  # noqa: E731
        cols = {
            "edge_ev": rows(t.edge_ev),
            "mass_m0": rows(t.mass_m0),
            "nonparabolicity_per_ev": rows(t.nonparabolicity_per_ev),
            "permittivity_r": rows(t.permittivity_r),
            "doping_cm3": rows(t.doping_cm3) * doping_factor,
            "thickness_nm": rows(t.thickness_nm),
        }
        # composition drifts of a few per cent leave the phonons as grown
        for key in ("lo_phonon_ev", "permittivity_high_r"):
            if getattr(t, key) is not None:
                cols[key] = rows(getattr(t, key))
        mono = np.array(
            [np.nan if lay.monolayer_nm is None else lay.monolayer_nm for lay in self.stack.layers]
        )
        mono = np.broadcast_to(mono, (n, mono.size)).copy()
        for i, layer in enumerate(self.stack.layers):
            if layer.x is None or layer.material == "custom" or np.all(x[:, i] == layer.x):
                continue
            mp = materials.material_parameters(
                layer.material,
                x[:, i],
                temperature_k=self.stack.temperature_k,
                substrate_lattice_nm=self.substrate_lattice_nm,
                strain=self.stack.model.strain,
            )
            cols["edge_ev"][:, i] = mp.conduction_band_ev
            cols["mass_m0"][:, i] = mp.mass_m0
            cols["nonparabolicity_per_ev"][:, i] = np.asarray(mp.nonparabolicity_per_ev) * float(
                self.stack.model.nonparabolicity
            )
            cols["permittivity_r"][:, i] = mp.permittivity_r
            mono[:, i] = mp.monolayer_nm
        ml = np.where(np.isfinite(ml), np.maximum(ml, MIN_THICKNESS_ML), np.nan)
        return cols, mono, ml

    def _table(
        self, cols: dict[str, np.ndarray], mono: np.ndarray, whole: np.ndarray
    ) -> LayerTable:
        """A table of whole-monolayer stacks (``whole`` NaN: the column's own thickness)."""
        thick = np.where(
            np.isfinite(whole),
            np.maximum(np.nan_to_num(whole), MIN_THICKNESS_ML) * np.nan_to_num(mono),
            cols["thickness_nm"],
        )
        return LayerTable(
            **{k: v for k, v in cols.items() if k != "thickness_nm"},
            thickness_nm=thick,
            temperature_k=np.full(thick.shape[0], self.nominal.temperature_k[0]),
        )

    def as_grown(
        self,
        z: np.ndarray,
        *,
        islands: str = "sample",
        island_u: np.ndarray | None = None,
        seed: int | np.random.Generator | None = None,
        sigma_scale: np.ndarray | None = None,
    ) -> LayerTable:
        """One whole-monolayer stack per sample for standard-normal coordinates ``z``.

        The tolerance analysis uses :meth:`grow` (the island mixture); this
        gives one stack per sample.

        Parameters
        ----------
        z
            ``(n, n_parameters)``, one row per sample.
        islands
            ``"sample"``: each layer takes the upper whole thickness with
            probability equal to its fractional part (``island_u`` or drawn
            from ``seed``); ``"nearest"``: rounded (see module docstring).
        island_u
            ``(n, n_layers)`` uniforms for ``"sample"`` (common random numbers).
        sigma_scale
            ``(n_parameters,)`` factors on each sigma (tolerance allocation).
        """
        if islands not in ISLAND_MODES:
            raise ValueError(f"islands must be one of {ISLAND_MODES}, got {islands!r}")
        cols, mono, ml = self._continuous(z, sigma_scale)
        if islands == "nearest":
            whole = np.floor(ml + 0.5)
        else:
            n = ml.shape[0]
            u = self.draw_island_u(n, seed) if island_u is None else np.asarray(island_u, float)
            low = np.floor(ml)
            whole = low + (u < (ml - low))
        return self._table(cols, mono, whole)

    def grow(
        self,
        z: np.ndarray,
        *,
        sigma_scale: np.ndarray | None = None,
        radius_mm: np.ndarray | None = None,
    ) -> AsGrown:
        """As-grown devices: each sample the island mixture of whole-monolayer stacks.

        See :mod:`wellwright.physics.islands`: the layers ``island_layers``
        as islands (``2**k`` stacks per sample), the others continuous.

        Parameters
        ----------
        z
            Standard-normal coordinates of the variation parameters, ``(n, n_parameters)``.
        sigma_scale
            Factor on each parameter's sigma, ``(n_parameters,)``; ``None``: 1 (0 fixes a
            parameter at its nominal value).
        radius_mm
            Radii on the wafer to put the samples at, mm (with ``[growth.wafer]``); ``None``:
            from ``z``.
        """
        cols, mono, ml = self._continuous(z, sigma_scale, radius_mm)
        return self._mixture(cols, mono, ml)

    def with_thickness_ml(self, thickness_ml: dict[int, float]) -> GrowthModel:
        """The same growth spreads on another nominal design: layer ``i`` at
        ``thickness_ml[i]`` monolayers (of its nominal composition), the others unchanged.

        The variation parameters, their sigmas and the island layers stay as
        they are (same coordinates ``z``, so common random numbers compare the
        two designs); the run positions of the cells' drift follow the new
        thicknesses.
        """
        import dataclasses

        layers = list(self.stack.layers)
        ml = self.nominal_ml.copy()
        for i, value in thickness_ml.items():
            mono = layers[i].monolayer_nm
            if mono is None or not 0 < i < len(layers) - 1:
                raise ValueError(f"layer {i} ({layers[i].name}) is not grown in monolayers")
            layers[i] = dataclasses.replace(
                layers[i], thickness_ml=float(value), thickness_nm=float(value) * mono
            )
            ml[i] = float(value)
        stack = dataclasses.replace(self.stack, layers=tuple(layers))
        cells = self.cells
        if cells is not None:
            cells = dataclasses.replace(cells, run_position=_run_position(stack))
        return dataclasses.replace(
            self, stack=stack, nominal=stack.table(), nominal_ml=ml, cells=cells
        )

    def grow_shifted(self, delta_ml: np.ndarray) -> AsGrown:
        """Nominal devices with layer thicknesses shifted by ``delta_ml`` ``(n, n_layers)`` ML."""
        delta = np.atleast_2d(np.asarray(delta_ml, float))
        cols, mono, _ = self._continuous(np.zeros((1, len(self.parameters))), None)
        n = delta.shape[0]
        cols = {k: np.repeat(v, n, axis=0) for k, v in cols.items()}
        ml = np.maximum(self.nominal_ml + delta, MIN_THICKNESS_ML)
        return self._mixture(cols, np.repeat(mono, n, axis=0), ml)

    def _mixture(self, cols: dict[str, np.ndarray], mono: np.ndarray, ml: np.ndarray) -> AsGrown:
        mask = None
        if self.island_layers is not None:
            mask = np.zeros(ml.shape[1], bool)
            mask[list(self.island_layers)] = True
        mix = island_mixture(ml, layers=mask)
        table = self._table(
            {k: v[mix.owner] for k, v in cols.items()}, mono[mix.owner], mix.whole_ml
        )
        return AsGrown(table, mix.owner, mix.area_share, ml.shape[0])


@dataclass(frozen=True)
class AsGrown:
    """As-grown devices: whole-monolayer stacks and each one's device and area share."""

    table: LayerTable
    owner: np.ndarray  #: (n_rows,) device (sample) of each stack, sorted
    area_share: np.ndarray  #: (n_rows,) area share of each stack in its device
    n_samples: int

    @classmethod
    def concatenate(cls, parts: list[AsGrown]) -> AsGrown:
        """The devices of ``parts`` one after the other (one batch for the kernel)."""
        offsets = np.cumsum([0] + [p.n_samples for p in parts])
        return cls(
            LayerTable.concatenate([p.table for p in parts]),
            np.concatenate([p.owner + o for p, o in zip(parts, offsets, strict=False)]),
            np.concatenate([p.area_share for p in parts]),
            int(offsets[-1]),
        )

    def batch(self, start: int, stop: int) -> tuple[LayerTable, np.ndarray]:
        """Stacks and ``(stop - start, n_rows)`` area weights of the devices ``start:stop``.

        Parameters
        ----------
        start, stop
            First device and one past the last (sample indices).
        """
        lo, hi = np.searchsorted(self.owner, [start, stop])
        owner = self.owner[lo:hi] - start
        weights = area_weight_matrix(
            owner, area_share=self.area_share[lo:hi], n_samples=stop - start
        )
        return self.table.take(slice(lo, hi)), weights


def _cell_parameters(stack: Stack, settings: GrowthSettings, use: CellUse) -> list[GrowthParameter]:
    """``<cell>.flux`` and ``<cell>.flux_drift`` of every declared cell some layer uses."""
    doped = tuple(i for i, lay in enumerate(stack.layers) if lay.doping_cm3 > 0)
    params = []
    for cell in settings.cells:
        if cell.dopant:
            layers = doped
        else:
            layers = tuple(np.nonzero(use.share[use.names.index(cell.name)] > 0)[0].tolist())
        if not layers:
            continue
        for kind, sigma, suffix in (
            ("flux", cell.flux_sigma, "flux"),
            ("drift", cell.drift_sigma, "flux_drift"),
        ):
            if sigma > 0:
                params.append(
                    GrowthParameter(f"{cell.name}.{suffix}", kind, sigma, layers, cell.name)
                )
    return params


def growth_model(
    stack: Stack,
    settings: GrowthSettings = DEFAULT_GROWTH,
    per_layer: dict[str, GrowthSettings] | None = None,
) -> GrowthModel:
    """The variation parameters of a nominal stack (those with sigma > 0).

    Thickness parameters for every layer between the contacts that has a
    monolayer thickness; a rate per material of those layers (or, with
    ``settings.cells``, a flux and a drift per source cell); composition for
    every alloy layer; doping for every doped layer (unless a dopant cell
    carries it).

    Parameters
    ----------
    stack
        The nominal stack.
    settings
        The global growth settings (``[growth]``).
    per_layer
        Settings of the layers with their own ``growth`` table, by layer name.

    Raises
    ------
    InputError
        A layer grows from a group-III cell that ``[growth.cells]`` does not declare.
    """
    per_layer = per_layer or {}
    n = len(stack.layers)
    params: list[GrowthParameter] = []
    by_material: dict[str, list[int]] = {}
    nominal_ml = np.full(n, np.nan)
    for i, layer in enumerate(stack.layers):
        g = per_layer.get(layer.name, settings)
        interior = 0 < i < n - 1
        if interior and layer.monolayer_nm is not None:
            nominal_ml[i] = layer.thickness_nm / layer.monolayer_nm
            by_material.setdefault(layer.material, []).append(i)
            if g.thickness_ml_sigma > 0:
                params.append(
                    GrowthParameter(
                        f"{layer.name}.thickness_ml", "thickness", g.thickness_ml_sigma, (i,)
                    )
                )
        if layer.x is not None and layer.material != "custom" and g.x_sigma > 0:
            params.append(GrowthParameter(f"{layer.name}.x", "x", g.x_sigma, (i,)))
        if layer.doping_cm3 > 0 and g.doping_sigma > 0:
            params.append(GrowthParameter(f"{layer.name}.doping", "doping", g.doping_sigma, (i,)))
    use = None
    if settings.cells:
        use = _cell_use(stack, settings)
        params += _cell_parameters(stack, settings, use)
    elif settings.rate_sigma > 0:
        for mat, idx in by_material.items():
            if mat != "custom":
                params.append(
                    GrowthParameter(f"{mat}.rate", "rate", settings.rate_sigma, tuple(idx))
                )
    if settings.wafer is not None:
        grown = tuple(i for i in range(n) if np.isfinite(nominal_ml[i]))
        params.append(GrowthParameter("wafer.radius_mm", "wafer", 1.0, grown))
    a_sub = None
    if stack.substrate is not None:
        name, x = materials.parse_material(stack.substrate)
        a_sub = float(materials.lattice_constant_nm(name, x, temperature_k=stack.temperature_k))
    return GrowthModel(
        stack=stack,
        parameters=tuple(params),
        nominal=stack.table(),
        nominal_ml=nominal_ml,
        substrate_lattice_nm=a_sub,
        cells=use,
        max_island_layers=settings.island_layers,
        wafer=settings.wafer,
    )
