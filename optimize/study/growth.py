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

The defaults are typical figures for molecular-beam epitaxy of III-V RTDs
(common practice, from memory; no single published source): about half a
monolayer of random thickness error per layer, a per cent of growth-rate
drift per source, half a per cent absolute composition error, five per cent
doping error. Calibrate them against the grower's own records.

Variation parameters (one standard-normal coordinate ``z`` each)
------------------------------------------------------------------
- ``<layer>.thickness``: random thickness error of a layer between the
  contacts, ``sigma * z`` monolayers;
- ``<Material>.rate``: systematic relative growth-rate error shared by every
  layer of that material (canonical name, e.g. ``InGaAs``, ``AlAs``);
- ``<layer>.x``: absolute composition error of an alloy layer (contacts
  included: their band edge sets the emitter Fermi level);
- ``<layer>.doping``: relative doping error of a doped layer.

As-grown thickness (Notes)
--------------------------
``t_ml = n_ml (1 + r_material) + d_ml`` with ``n_ml`` the nominal monolayer
count (``thickness_nm / monolayer_nm`` for a layer given in nm), and
``thickness_nm = t_ml * a_ml(x)`` with the monolayer thickness of the
as-grown composition from :func:`wellwright.physics.materials.material_parameters`
(which also gives the band edge, mass, nonparabolicity and permittivity at
that composition, strained to the stack's substrate). Doping is multiplied by
``max(1 + sigma z, 0.01)``.

Island model (monolayers are discrete)
--------------------------------------
A layer whose as-grown thickness falls between two whole monolayers
``n = floor(t)`` and ``n + 1`` is taken as lateral islands of the two
integer thicknesses covering areas ``1 - f`` and ``f`` (``f = t - n``); the
current of the device is the area-weighted mean of the currents of the two
(parallel conduction, islands wider than the coherence length; common
practice), not the current of a fractional thickness.

For ``k`` fractional layers the exact mean needs ``2**k`` stacks per sample.
Here instead each sample draws, per layer independently, the thickness
``n + 1`` with probability ``f`` and ``n`` otherwise
(``islands="sample"``): every evaluated stack has whole monolayers, and the
Monte Carlo mean over samples is the area-weighted mean (an unbiased
estimate; the island choice adds sampling noise that the yield's interval
already covers). :func:`island_mean_current` gives the exact two-stack mean
for one layer. ``islands="nearest"`` rounds to the nearest whole monolayer:
a deterministic model, used by the sensitivity analyses (Sobol, Morris),
whose estimators need the output to be a function of the parameters.
Layers are kept at one monolayer or more.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from wellwright.physics import materials
from wellwright.physics.errors import InputError
from wellwright.physics.stack import LayerTable, Stack

__all__ = [
    "GrowthSettings",
    "GrowthParameter",
    "GrowthModel",
    "DEFAULT_GROWTH",
    "as_generator",
    "parse_growth",
    "split_layer_growth",
    "growth_model",
    "island_mean_current",
    "ISLAND_MODES",
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
class GrowthSettings:
    """One-sigma growth errors (defaults: typical practice, see module docstring)."""

    thickness_ml_sigma: float = 0.5
    rate_sigma: float = 0.01
    x_sigma: float = 0.005
    doping_sigma: float = 0.05


DEFAULT_GROWTH = GrowthSettings()


@dataclass(frozen=True)
class GrowthParameter:
    """One variation parameter: ``deviation = sigma * z``, z standard normal.

    ``kind`` is ``thickness`` (monolayers), ``rate`` (relative), ``x``
    (absolute) or ``doping`` (relative); ``layers`` are the affected layer
    indices (several for a rate).
    """

    name: str
    kind: str
    sigma: float
    layers: tuple[int, ...]

    @property
    def unit(self) -> str:
        return {"thickness": "ML", "rate": "relative", "x": "absolute", "doping": "relative"}[
            self.kind
        ]


def _check_sigma(value: Any, key: str, *, source: str, layer: int | None) -> float:
    lo, hi, unit = GROWTH_KEYS[key.rsplit(".", 1)[-1]]
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise InputError(
            f"must be a number in [{lo:g}, {hi:g}] ({unit}), got {value!r}",
            source=source,
            layer=layer,
            key=key,
        )
    if not lo <= value <= hi:
        raise InputError(
            f"{value:g} outside [{lo:g}, {hi:g}] ({unit})", source=source, layer=layer, key=key
        )
    return float(value)


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

    Raises
    ------
    InputError
        Naming the key (``growth.<key>`` or ``layers.growth.<key>``) and the allowed form.
    """
    table = {} if table is None else table
    if not isinstance(table, dict):
        raise InputError("must be a table, e.g. [growth]", source=source, key="growth")
    values = {}
    for key, value in table.items():
        if key not in GROWTH_KEYS:
            raise InputError(
                f"unknown key; allowed: {', '.join(GROWTH_KEYS)}",
                source=source,
                key=f"growth.{key}",
            )
        values[key] = _check_sigma(value, f"growth.{key}", source=source, layer=None)
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
                key="growth",
            )
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
                    key=f"growth.{key}",
                )
            over[key] = _check_sigma(value, f"growth.{key}", source=source, layer=index)
        per_layer[name] = GrowthSettings(**{**settings.__dict__, **over})
    return settings, per_layer


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
                default = "emitter" if i == 0 else ("collector" if i == n - 1 else f"layer{i}")
                growth[str(raw.get("name", default))] = raw.pop("growth")
            new.append(raw)
        out["layers"] = new
    return out, growth


# --------------------------------------------------------------------------- the model


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

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(p.name for p in self.parameters)

    @property
    def sigmas(self) -> np.ndarray:
        return np.array([p.sigma for p in self.parameters], float)

    def draw_z(self, n: int, seed: int | np.random.Generator | None = None) -> np.ndarray:
        """``(n, n_parameters)`` standard-normal coordinates."""
        return as_generator(seed).standard_normal((n, len(self.parameters)))

    def draw_island_u(self, n: int, seed: int | np.random.Generator | None = None) -> np.ndarray:
        """``(n, n_layers)`` uniforms deciding each layer's island thickness."""
        return as_generator(seed).random((n, self.nominal.n_layers))

    def thickness_ml(self, z: np.ndarray, *, sigma_scale: np.ndarray | None = None) -> np.ndarray:
        """As-grown (continuous) monolayer counts ``(n, n_layers)`` before the island step."""
        z = np.atleast_2d(np.asarray(z, float))
        dev = z * self.sigmas * (1.0 if sigma_scale is None else np.asarray(sigma_scale, float))
        n = z.shape[0]
        ml = np.broadcast_to(self.nominal_ml, (n, self.nominal_ml.size)).copy()
        rate = np.zeros_like(ml)
        extra = np.zeros_like(ml)
        for j, p in enumerate(self.parameters):
            if p.kind == "rate":
                rate[:, list(p.layers)] += dev[:, j, None]
            elif p.kind == "thickness":
                extra[:, list(p.layers)] += dev[:, j, None]
        return ml * (1.0 + rate) + extra

    def as_grown(
        self,
        z: np.ndarray,
        *,
        islands: str = "sample",
        island_u: np.ndarray | None = None,
        seed: int | np.random.Generator | None = None,
        sigma_scale: np.ndarray | None = None,
    ) -> LayerTable:
        """As-grown stacks for standard-normal coordinates ``z`` ``(n, n_parameters)``.

        Parameters
        ----------
        z
            One row per sample.
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
        z = np.atleast_2d(np.asarray(z, float))
        n = z.shape[0]
        dev = z * self.sigmas * (1.0 if sigma_scale is None else np.asarray(sigma_scale, float))
        t = self.nominal
        rows = lambda a: np.broadcast_to(a[0], (n, a.shape[1])).copy()  # noqa: E731
        edge, mass, alpha = rows(t.edge_ev), rows(t.mass_m0), rows(t.nonparabolicity_per_ev)
        perm, doping = rows(t.permittivity_r), rows(t.doping_cm3)
        mono = np.array(
            [np.nan if lay.monolayer_nm is None else lay.monolayer_nm for lay in self.stack.layers]
        )
        mono = np.broadcast_to(mono, (n, mono.size)).copy()
        for j, p in enumerate(self.parameters):
            (i, *_) = p.layers
            if p.kind == "x":
                layer = self.stack.layers[i]
                x = np.clip(layer.x + dev[:, j], 0.0, 1.0)
                mp = materials.material_parameters(
                    layer.material,
                    x,
                    temperature_k=self.stack.temperature_k,
                    substrate_lattice_nm=self.substrate_lattice_nm,
                    strain=self.stack.model.strain,
                )
                edge[:, i] = mp.conduction_band_ev
                mass[:, i] = mp.mass_m0
                alpha[:, i] = np.asarray(mp.nonparabolicity_per_ev) * float(
                    self.stack.model.nonparabolicity
                )
                perm[:, i] = mp.permittivity_r
                mono[:, i] = mp.monolayer_nm
            elif p.kind == "doping":
                doping[:, i] *= np.maximum(1.0 + dev[:, j], 0.01)
        ml = self.thickness_ml(z, sigma_scale=sigma_scale)
        grown = np.isfinite(ml)
        ml_g = np.where(grown, np.maximum(ml, MIN_THICKNESS_ML), 0.0)
        if islands == "nearest":
            whole = np.floor(ml_g + 0.5)
        else:
            u = self.draw_island_u(n, seed) if island_u is None else np.asarray(island_u, float)
            low = np.floor(ml_g)
            whole = low + (u < (ml_g - low))
        whole = np.maximum(whole, MIN_THICKNESS_ML)
        thickness = np.where(grown, whole * np.nan_to_num(mono), t.thickness_nm[0])
        return LayerTable(
            edge_ev=edge,
            mass_m0=mass,
            nonparabolicity_per_ev=alpha,
            thickness_nm=thickness,
            doping_cm3=doping,
            permittivity_r=perm,
            temperature_k=np.full(n, t.temperature_k[0]),
        )


def growth_model(
    stack: Stack,
    settings: GrowthSettings = DEFAULT_GROWTH,
    per_layer: dict[str, GrowthSettings] | None = None,
) -> GrowthModel:
    """The variation parameters of a nominal stack (those with sigma > 0).

    Thickness parameters for every layer between the contacts that has a
    monolayer thickness; a rate per material of those layers; composition
    for every alloy layer; doping for every doped layer.
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
                        f"{layer.name}.thickness", "thickness", g.thickness_ml_sigma, (i,)
                    )
                )
        if layer.x is not None and layer.material != "custom" and g.x_sigma > 0:
            params.append(GrowthParameter(f"{layer.name}.x", "x", g.x_sigma, (i,)))
        if layer.doping_cm3 > 0 and g.doping_sigma > 0:
            params.append(GrowthParameter(f"{layer.name}.doping", "doping", g.doping_sigma, (i,)))
    if settings.rate_sigma > 0:
        for mat, idx in by_material.items():
            if mat != "custom":
                params.append(
                    GrowthParameter(f"{mat}.rate", "rate", settings.rate_sigma, tuple(idx))
                )
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
    )


def island_mean_current(
    stack: Stack, layer: int | str, thickness_ml: float, bias_v: np.ndarray, *, grid: Any = None
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Exact island-model current of one layer at a fractional thickness.

    Returns ``(mean, lower, upper)`` current densities, A/cm^2, ``(n_biases,)``:
    ``mean = (1 - f) J(n) + f J(n + 1)`` with ``n = floor(thickness_ml)``,
    ``f`` its fractional part; ``lower``/``upper`` the currents of the two
    whole-monolayer stacks (one batched call).
    """
    from wellwright.physics.current import EnergyGrid
    from wellwright.physics.iv import current_at_bias

    index = layer if isinstance(layer, int) else [lay.name for lay in stack.layers].index(layer)
    mono = stack.layers[index].monolayer_nm
    if mono is None:
        raise ValueError(f"layer {index} has no monolayer thickness")
    lo = math.floor(thickness_ml)
    f = thickness_ml - lo
    table = stack.table().take(np.array([0, 0]))
    thick = table.thickness_nm.copy()
    thick[:, index] = np.array([lo, lo + 1]) * mono
    j = current_at_bias(
        table.with_thickness_nm(thick),
        np.asarray(bias_v, float),
        model=stack.model,
        grid=grid or EnergyGrid(),
    )
    return (1.0 - f) * j[0] + f * j[1], j[0], j[1]
