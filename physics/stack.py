"""Stack files: parse and validate a layer stack, resolve its materials.

A stack file is TOML. The first and last layers are the contacts
(semi-infinite, n-doped); every layer between them needs exactly one of
``thickness_ml`` or ``thickness_nm``. See ``studies/README.md`` for the
format key by key.
"""

from __future__ import annotations

import tomllib
import warnings
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np

from . import checks, materials
from .errors import InputError

__all__ = [
    "Layer",
    "ModelOptions",
    "DeviceOptions",
    "Stack",
    "LayerTable",
    "load_stack",
    "parse_stack",
    "read_toml",
    "parse_toml",
    "decode_text",
    "CriticalThicknessWarning",
]

#: Largest layer thickness accepted between the contacts; thicker is surely a typo.
MAX_THICKNESS_NM = 1000.0
MAX_DOPING_CM3 = 1e21
TEMPERATURE_RANGE_K = (1.0, 1000.0)
ELECTROSTATICS_MODELS = ("linear", "self-consistent")
#: ``[model] transport``: the coherent current alone, or with the scattering-assisted
#: channel of :mod:`physics.scattering`
TRANSPORT_MODELS = ("coherent", "scattering-assisted")
#: Set to True by the module that implements self-consistent electrostatics.
_ELECTROSTATICS_AVAILABLE = True

LAYER_KEYS = {
    "name": str,
    "material": str,
    "x": float,
    "thickness_ml": float,
    "thickness_nm": float,
    "doping_cm3": float,
    "conduction_band_ev": float,
    "mass_m0": float,
    "nonparabolicity_per_ev": float,
    "monolayer_nm": float,
    "permittivity_r": float,
}
CUSTOM_REQUIRED = ("conduction_band_ev", "mass_m0")
MODEL_KEYS = {
    "nonparabolicity": bool,
    "strain": bool,
    "electrostatics": str,
    "broadening_mev": float,
    "slice_nm": float,
    "transport": str,
    "roughness_height_nm": float,
    "roughness_length_nm": float,
}
DEVICE_KEYS = {"area_um2": float, "series_resistance_ohm_um2": float}
TOP_KEYS = {"temperature_k", "substrate", "model", "device", "layers"}
#: Tables that make a file a study (optimize.study), not a stack
STUDY_KEYS = ("targets", "constraints", "search", "sweep", "growth", "tolerance", "report")


class CriticalThicknessWarning(UserWarning):
    """A strained layer is thicker than its Matthews-Blakeslee critical thickness."""


@dataclass(frozen=True)
class Layer:
    """One resolved layer: what was asked for and the parameters the physics uses."""

    name: str
    material: str  #: canonical material name, or "custom"
    x: float | None
    thickness_nm: float  #: 0 for a contact given without thickness
    thickness_ml: float | None  #: monolayers, when the layer has a monolayer thickness
    doping_cm3: float
    conduction_band_ev: float  #: band edge on the materials' common scale
    mass_m0: float
    nonparabolicity_per_ev: float
    monolayer_nm: float | None
    permittivity_r: float
    strain_xx: float = 0.0
    #: X- and L-valley edges, same scale as ``conduction_band_ev`` (unstrained; None: custom)
    x_valley_ev: float | None = None
    l_valley_ev: float | None = None
    #: LO phonon and high-frequency permittivity of the scattering-assisted current
    #: (GaAs values for a custom layer, see :mod:`physics.scattering`)
    lo_phonon_ev: float = 0.0362
    permittivity_high_r: float = 10.89

    @property
    def label(self) -> str:
        """Trade notation, e.g. ``In0.53Ga0.47As``."""
        if self.material == "custom":
            return "custom"
        return materials.trade_name(self.material, self.x)


@dataclass(frozen=True)
class ModelOptions:
    """Physics switches of a stack file's ``[model]`` table."""

    nonparabolicity: bool = True
    strain: bool = True
    #: the defaults are the most trustworthy model: self-consistent electrostatics and the
    #: scattering-assisted channel; "linear" and "coherent" are the fast approximations
    electrostatics: str = "self-consistent"
    broadening_mev: float = 0.0
    slice_nm: float = 0.25  #: slice width for the linear potential inside layers
    transport: str = "scattering-assisted"  #: one of TRANSPORT_MODELS
    roughness_height_nm: float = 0.3  #: interface roughness of the scattering-assisted channel
    roughness_length_nm: float = 5.0  #: its lateral correlation length


@dataclass(frozen=True)
class DeviceOptions:
    """Optional ``[device]`` table: mesa area and series resistance."""

    area_um2: float | None = None
    series_resistance_ohm_um2: float = 0.0


@dataclass(frozen=True)
class Stack:
    """A validated layer stack. Data only; the physics is in functions."""

    layers: tuple[Layer, ...]
    temperature_k: float = 300.0
    substrate: str | None = None
    model: ModelOptions = field(default_factory=ModelOptions)
    device: DeviceOptions = field(default_factory=DeviceOptions)
    source: str = "<dict>"

    @property
    def active_thickness_nm(self) -> float:
        """Total thickness between the contacts."""
        return float(sum(layer.thickness_nm for layer in self.layers[1:-1]))

    def table(self) -> LayerTable:
        """The stack as a one-row :class:`LayerTable` for the kernel."""
        return LayerTable.from_stacks([self])


@dataclass(frozen=True)
class LayerTable:
    """Layer parameters of one or more stacks with the same layer count.

    Every array has shape ``(n_stacks, n_layers)`` except ``temperature_k``
    ``(n_stacks,)``. This is the plain record the kernel, the search and the
    tolerance analysis exchange; contacts are columns 0 and -1 (their
    thickness is ignored by the physics).
    """

    edge_ev: np.ndarray
    mass_m0: np.ndarray
    nonparabolicity_per_ev: np.ndarray
    thickness_nm: np.ndarray
    doping_cm3: np.ndarray
    permittivity_r: np.ndarray
    temperature_k: np.ndarray
    #: LO-phonon energy and high-frequency permittivity per layer; ``None``: GaAs values
    #: (:mod:`physics.scattering`)
    lo_phonon_ev: np.ndarray | None = None
    permittivity_high_r: np.ndarray | None = None

    @property
    def n_stacks(self) -> int:
        return self.edge_ev.shape[0]

    @property
    def n_layers(self) -> int:
        return self.edge_ev.shape[1]

    @classmethod
    def from_stacks(cls, stacks: list[Stack] | tuple[Stack, ...]) -> LayerTable:
        """Stack the layer parameters of stacks with equal layer counts."""
        counts = {len(s.layers) for s in stacks}
        if len(counts) != 1:
            raise ValueError(f"stacks in one table need the same layer count, got {sorted(counts)}")

        def col(attr: str) -> np.ndarray:
            return np.array([[getattr(layer, attr) for layer in s.layers] for s in stacks], float)

        alpha = col("nonparabolicity_per_ev")
        alpha *= np.array([[s.model.nonparabolicity] for s in stacks], float)
        return cls(
            edge_ev=col("conduction_band_ev"),
            mass_m0=col("mass_m0"),
            nonparabolicity_per_ev=alpha,
            thickness_nm=col("thickness_nm"),
            doping_cm3=col("doping_cm3"),
            permittivity_r=col("permittivity_r"),
            temperature_k=np.array([s.temperature_k for s in stacks], float),
            lo_phonon_ev=col("lo_phonon_ev"),
            permittivity_high_r=col("permittivity_high_r"),
        )

    def with_thickness_nm(self, thickness_nm: np.ndarray) -> LayerTable:
        """A copy with new thicknesses, broadcast to ``(n_stacks, n_layers)``."""
        return replace(self, thickness_nm=np.broadcast_to(thickness_nm, self.edge_ev.shape).copy())

    def take(self, index: np.ndarray | slice) -> LayerTable:
        """Rows ``index`` of every array."""
        rows: dict[str, Any] = {
            k: (None if v is None else v[index]) for k, v in self.__dict__.items()
        }
        return LayerTable(**rows)

    @classmethod
    def concatenate(cls, tables: list[LayerTable]) -> LayerTable:
        """Rows of several tables (same layer count) in one."""

        def join(k):
            parts = [t.__dict__[k] for t in tables]
            return None if any(p is None for p in parts) else np.concatenate(parts)

        return cls(**{k: join(k) for k in cls.__dataclass_fields__})


# --------------------------------------------------------------------------- parsing


def read_toml(path: str | Path) -> dict[str, Any]:
    """The parsed TOML document at ``path``.

    Raises
    ------
    InputError
        For a missing or unreadable file or bad TOML, naming the file.
    """
    source = str(path)
    try:
        data = Path(path).read_bytes()
    except FileNotFoundError:
        raise InputError("file not found", source=source) from None
    except IsADirectoryError:
        raise InputError("is a folder, not a file", source=source) from None
    except OSError as exc:
        raise InputError(f"cannot read file ({exc.strerror})", source=source) from None
    return parse_toml(data, source=source)


def decode_text(data: bytes, *, source: str) -> str:
    """``data`` as UTF-8 text (TOML files are UTF-8); raises :class:`InputError` otherwise.

    Parameters
    ----------
    data
        Raw file contents.
    source
        File name for the error message.
    """
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise InputError(
            f"not UTF-8 text (byte {exc.start} is 0x{data[exc.start]:02x}); save it as UTF-8",
            source=source,
        ) from None


def parse_toml(data: bytes | str, *, source: str) -> dict[str, Any]:
    """The TOML document in ``data`` (bytes must be UTF-8), naming ``source`` on error.

    Parameters
    ----------
    data
        File contents, bytes (UTF-8) or text.
    source
        File name for the error message.
    """
    text = decode_text(data, source=source) if isinstance(data, bytes) else data
    if text.startswith("\ufeff"):  # tomllib's message would name line 1, column 1 only
        raise InputError(
            "starts with a byte-order mark (UTF-8 with BOM), which TOML does not allow; save it "
            "as UTF-8 without one",
            source=source,
        )
    try:
        return tomllib.loads(text)
    except ValueError as exc:  # TOMLDecodeError, or an integer past Python's digit limit
        raise InputError(f"not valid TOML ({str(exc)[:200]})", source=source) from None
    except RecursionError:  # tomllib recurses per nesting level
        raise InputError("not valid TOML (nested too deeply)", source=source) from None


def default_layer_name(index: int, *, n_layers: int) -> str:
    """The name of a layer without one: ``emitter``, ``collector``, else ``layer<index>``
    (zero-based, as parameter names of existing studies have it).

    Parameters
    ----------
    index
        Layer index from 0.
    n_layers
        Number of layers of the stack, contacts included.
    """
    if index == 0:
        return "emitter"
    return "collector" if index == n_layers - 1 else f"layer{index}"


def load_stack(path: str | Path) -> Stack:
    """Read and validate a stack file.

    Raises
    ------
    InputError
        For a missing or unreadable file, bad TOML or any invalid entry.
    """
    return parse_stack(read_toml(path), source=str(path))


def _typed(value: Any, kind: type, **where: Any) -> Any:
    """Check one value's type (ints are accepted for floats, bools are not); ranges come later."""
    if kind is float:
        return checks.number(value, **where)
    if kind is bool:
        return checks.flag(value, **where)
    if not isinstance(value, kind):
        raise InputError(f"must be a {kind.__name__}, got {checks.show(value)}", **where)
    return value


def _table(
    data: Any, allowed: Mapping[str, type], *, source: str, name: str, **where: Any
) -> dict[str, Any]:
    """A table of the file with its values type-checked (``name``: its dotted key)."""
    checks.table(data, sorted(allowed), source=source, key=name, **where)
    return {
        key: _typed(value, allowed[key], source=source, key=f"{name}.{key}", **where)
        for key, value in data.items()
    }


def parse_stack(data: dict[str, Any], *, source: str = "<dict>") -> Stack:
    """Validate a stack given as the dictionary of a parsed stack file.

    Parameters
    ----------
    data
        The TOML document as a dictionary (keys as in the stack file).
    source
        Name used in error messages.

    Raises
    ------
    InputError
        Naming the file, the layer index and the key, with the allowed range.
    """
    study = [k for k in STUDY_KEYS if isinstance(data, dict) and k in data]
    if study:  # one line on what the file is, not "unknown key"
        raise InputError(
            f"a study file's table: a stack is wanted here (no {', '.join(STUDY_KEYS)}); "
            "give the study to search, tolerance or run",
            source=source,
            key=study[0],
        )
    checks.table(data, sorted(TOP_KEYS), source=source)
    lo, hi = TEMPERATURE_RANGE_K
    temperature_k = checks.number(
        data.get("temperature_k", 300.0),
        low=lo,
        high=hi,
        unit="K",
        source=source,
        key="temperature_k",
    )

    model = _parse_model(data.get("model", {}), source=source)
    device = _parse_device(data.get("device", {}), source=source)

    raw_layers = data.get("layers")
    if not isinstance(raw_layers, list) or not all(isinstance(x, dict) for x in raw_layers):
        raise InputError("needs a list of [[layers]] tables", source=source, key="layers")
    if len(raw_layers) < 3:
        raise InputError(
            f"needs at least 3 layers (two contacts and one between), got {len(raw_layers)}",
            source=source,
            key="layers",
        )

    sub_name, sub_x = _substrate(data.get("substrate"), raw_layers[0], source=source)
    substrate_lattice_nm = (
        None
        if sub_name is None
        else float(materials.lattice_constant_nm(sub_name, sub_x, temperature_k=temperature_k))
    )

    layers = []
    names: set[str] = set()
    n = len(raw_layers)
    for i, raw in enumerate(raw_layers):
        layer = _parse_layer(
            raw,
            index=i,
            n_layers=n,
            source=source,
            temperature_k=temperature_k,
            substrate_lattice_nm=substrate_lattice_nm,
            model=model,
        )
        if layer.name in names:
            raise InputError(
                f"name '{layer.name}' used twice",
                source=source,
                layer=i,
                layer_name=layer.name,
                key="name",
            )
        names.add(layer.name)
        layers.append(layer)
    return Stack(
        layers=tuple(layers),
        temperature_k=temperature_k,
        substrate=None if sub_name is None else materials.trade_name(sub_name, sub_x),
        model=model,
        device=device,
        source=source,
    )


def _parse_model(raw: Any, *, source: str) -> ModelOptions:
    """The ``[model]`` table, type- and range-checked."""
    model = ModelOptions(**_table(raw, MODEL_KEYS, source=source, name="model"))
    if model.electrostatics not in ELECTROSTATICS_MODELS:
        raise InputError(
            f"'{model.electrostatics}' is not one of {', '.join(ELECTROSTATICS_MODELS)}",
            source=source,
            key="model.electrostatics",
        )
    if model.electrostatics != "linear" and not _ELECTROSTATICS_AVAILABLE:
        raise InputError(
            "only 'linear' is available in this version", source=source, key="model.electrostatics"
        )
    if not 0.0 <= model.broadening_mev <= 100.0:
        raise InputError(
            f"{model.broadening_mev:g} outside [0, 100] meV",
            source=source,
            key="model.broadening_mev",
        )
    if model.transport not in TRANSPORT_MODELS:
        raise InputError(
            f"'{model.transport}' is not one of {', '.join(TRANSPORT_MODELS)}",
            source=source,
            key="model.transport",
        )
    for key, (lo, hi) in {
        "roughness_height_nm": (0.0, 2.0),
        "roughness_length_nm": (0.5, 50.0),
    }.items():
        if not lo <= getattr(model, key) <= hi:
            raise InputError(
                f"{getattr(model, key):g} outside [{lo:g}, {hi:g}] nm",
                source=source,
                key=f"model.{key}",
            )
    if not 0.01 <= model.slice_nm <= 2.0:
        raise InputError(
            f"{model.slice_nm:g} outside [0.01, 2] nm", source=source, key="model.slice_nm"
        )
    return model


def _parse_device(raw: Any, *, source: str) -> DeviceOptions:
    """The ``[device]`` table, type- and range-checked."""
    device = DeviceOptions(**_table(raw, DEVICE_KEYS, source=source, name="device"))
    if device.area_um2 is not None and not 0.0 < device.area_um2 <= 1e8:
        raise InputError(
            f"{device.area_um2:g} outside (0, 1e8] um^2", source=source, key="device.area_um2"
        )
    if not 0.0 <= device.series_resistance_ohm_um2 <= 1e6:
        raise InputError(
            f"{device.series_resistance_ohm_um2:g} outside [0, 1e6] ohm um^2",
            source=source,
            key="device.series_resistance_ohm_um2",
        )
    return device


def _substrate(
    substrate: Any, first: dict[str, Any], *, source: str
) -> tuple[str | None, float | None]:
    """``(name, x)`` of the substrate: the ``substrate`` key, else the emitter's material
    (``(None, None)`` for a custom emitter; a bad emitter is reported by the layer check)."""
    if substrate is not None:
        substrate = _typed(substrate, str, source=source, key="substrate")
        try:
            return materials.parse_material(substrate)
        except ValueError as exc:
            raise InputError(str(exc), source=source, key="substrate") from None
    if first.get("material", "custom") == "custom":
        return None, None
    try:
        return materials.parse_material(str(first["material"]), first.get("x"))
    except (ValueError, TypeError, OverflowError):
        return None, None  # the layer check reports it


@dataclass(frozen=True)
class _LayerMaterial:
    """A layer's band parameters: the material table's, or a custom material's, with the
    layer's own overrides."""

    material: str
    x: float | None
    edge: float
    mass: float
    alpha: float
    monolayer: float | None
    permittivity: float
    strain_xx: float
    valleys: tuple[float | None, float | None]
    phonon: dict[str, float]  #: empty: the Layer's GaAs defaults

    def check_ranges(self, err: Callable[..., InputError]) -> None:
        if not 0.001 <= self.mass <= 10.0:
            raise err(f"{self.mass:g} outside [0.001, 10]", "mass_m0")
        if not 0.0 <= self.alpha <= 50.0:
            raise err(f"{self.alpha:g} outside [0, 50] 1/eV", "nonparabolicity_per_ev")
        if not -20.0 <= self.edge <= 20.0:
            raise err(f"{self.edge:g} outside [-20, 20] eV", "conduction_band_ev")
        if self.monolayer is not None and not 0.05 <= self.monolayer <= 2.0:
            raise err(f"{self.monolayer:g} outside [0.05, 2] nm", "monolayer_nm")
        if not 1.0 <= self.permittivity <= 100.0:
            raise err(f"{self.permittivity:g} outside [1, 100]", "permittivity_r")


def _custom_material(values: dict[str, Any], err: Callable[..., InputError]) -> _LayerMaterial:
    for key in CUSTOM_REQUIRED:
        if key not in values:
            raise err("missing; a custom material needs conduction_band_ev and mass_m0", key)
    if "x" in values:
        raise err("a custom material takes no composition", "x")
    return _LayerMaterial(
        material="custom",
        x=None,
        edge=values["conduction_band_ev"],
        mass=values["mass_m0"],
        alpha=values.get("nonparabolicity_per_ev", 0.0),
        monolayer=values.get("monolayer_nm"),
        permittivity=values.get("permittivity_r", 12.9),  # GaAs-like default, see docs
        strain_xx=0.0,
        valleys=(None, None),
        phonon={},
    )


def _table_material(
    values: dict[str, Any],
    err: Callable[..., InputError],
    *,
    temperature_k: float,
    substrate_lattice_nm: float | None,
    strain: bool,
) -> _LayerMaterial:
    if "x" in values and not 0.0 <= values["x"] <= 1.0:
        raise err(f"{values['x']:g} outside [0, 1]", "x")
    try:
        material, x = materials.parse_material(values["material"], values.get("x"))
    except ValueError as exc:
        raise err(
            str(exc), "x" if "x" in values and "allowed range" in str(exc) else "material"
        ) from None
    params = materials.material_parameters(
        material,
        x,
        temperature_k=temperature_k,
        substrate_lattice_nm=substrate_lattice_nm,
        strain=strain,
    )
    gap = float(np.min(params.gap_ev))
    if gap <= 0.0:  # Varshni's fit extrapolated past its use (InSb above 880 K, molten)
        raise err(
            f"{values['material']} has no band gap at {temperature_k:g} K in the material "
            f"table (its Varshni fit gives {gap:.3g} eV there): lower temperature_k",
            "material",
        )
    return _LayerMaterial(
        material=material,
        x=x,
        edge=values.get("conduction_band_ev", float(params.conduction_band_ev)),
        mass=values.get("mass_m0", float(params.mass_m0)),
        alpha=values.get("nonparabolicity_per_ev", float(params.nonparabolicity_per_ev)),
        monolayer=values.get("monolayer_nm", float(params.monolayer_nm)),
        permittivity=values.get("permittivity_r", float(params.permittivity_r)),
        strain_xx=float(params.strain_xx),
        valleys=(float(params.x_valley_ev), float(params.l_valley_ev)),
        phonon={
            "lo_phonon_ev": float(params.lo_phonon_ev),
            "permittivity_high_r": float(params.permittivity_high_r),
        },
    )


def _thickness(
    values: dict[str, Any],
    monolayer: float | None,
    *,
    is_contact: bool,
    err: Callable[..., InputError],
) -> tuple[float, float | None]:
    """``(thickness_nm, thickness_ml)`` from exactly one of the two keys (contacts: none)."""
    has_ml, has_nm = "thickness_ml" in values, "thickness_nm" in values
    if has_ml and has_nm:
        raise err("give exactly one of thickness_ml and thickness_nm, not both", "thickness_nm")
    if not is_contact and not (has_ml or has_nm):
        raise err("missing; give thickness_ml or thickness_nm", "thickness_ml")
    thickness_ml = None
    thickness_nm = 0.0
    if has_ml:
        if monolayer is None:
            raise err("thickness_ml needs monolayer_nm for a custom material", "thickness_ml")
        thickness_ml = values["thickness_ml"]
        max_ml = MAX_THICKNESS_NM / monolayer
        if not 0.0 < thickness_ml <= max_ml:
            raise err(f"{thickness_ml:g} outside (0, {max_ml:.0f}] monolayers", "thickness_ml")
        thickness_nm = thickness_ml * monolayer
    elif has_nm:
        thickness_nm = values["thickness_nm"]
        if not 0.0 < thickness_nm <= MAX_THICKNESS_NM:
            raise err(f"{thickness_nm:g} outside (0, {MAX_THICKNESS_NM:g}] nm", "thickness_nm")
        if monolayer is not None:
            thickness_ml = thickness_nm / monolayer
    return thickness_nm, thickness_ml


def _warn_if_beyond_critical(
    mat: _LayerMaterial,
    thickness_nm: float,
    *,
    substrate_lattice_nm: float,
    temperature_k: float,
    where: str,
) -> None:
    """Warn (:class:`CriticalThicknessWarning`) when a strained layer is thicker than its
    Matthews-Blakeslee critical thickness."""
    if mat.material == "custom" or abs(mat.strain_xx) <= 1e-5:
        return
    h_c = materials.critical_thickness_nm(
        mat.material, mat.x, substrate_lattice_nm=substrate_lattice_nm, temperature_k=temperature_k
    )
    if thickness_nm > h_c:
        warnings.warn(
            f"{where}: {thickness_nm:.2f} nm exceeds the "
            f"Matthews-Blakeslee critical thickness {h_c:.2f} nm; it may relax",
            CriticalThicknessWarning,
            stacklevel=5,  # the caller of parse_stack's caller, as before the split
        )


def _parse_layer(
    raw: dict[str, Any],
    *,
    index: int,
    n_layers: int,
    source: str,
    temperature_k: float,
    substrate_lattice_nm: float | None,
    model: ModelOptions,
) -> Layer:
    is_contact = index in (0, n_layers - 1)
    default_name = default_layer_name(index, n_layers=n_layers)
    raw_name = raw.get("name") if isinstance(raw, dict) else None
    name = raw_name if isinstance(raw_name, str) else default_name
    where: dict[str, Any] = {"source": source, "layer": index, "layer_name": name}

    def err(message: str, key: str | None) -> InputError:
        return InputError(message, key=key, **where)

    checks.table(raw, sorted(LAYER_KEYS), **where)
    values = {key: _typed(value, LAYER_KEYS[key], key=key, **where) for key, value in raw.items()}

    if "material" not in values:
        raise err(
            "missing; give a material name such as 'GaAs' or 'In0.53Ga0.47As', or 'custom'",
            "material",
        )

    if values["material"] == "custom":
        mat = _custom_material(values, err)
    else:
        mat = _table_material(
            values,
            err,
            temperature_k=temperature_k,
            substrate_lattice_nm=substrate_lattice_nm,
            strain=model.strain,
        )
    mat.check_ranges(err)

    doping = values.get("doping_cm3", 0.0)
    if not 0.0 <= doping <= MAX_DOPING_CM3:
        raise err(f"{doping:g} outside [0, {MAX_DOPING_CM3:g}] cm^-3", "doping_cm3")
    if is_contact and doping <= 0.0:
        raise err(
            "contacts must be n-doped; give doping_cm3 > 0 (typically 1e17 to 5e18)", "doping_cm3"
        )

    thickness_nm, thickness_ml = _thickness(values, mat.monolayer, is_contact=is_contact, err=err)
    if not is_contact and model.strain and substrate_lattice_nm is not None:
        _warn_if_beyond_critical(
            mat,
            thickness_nm,
            substrate_lattice_nm=substrate_lattice_nm,
            temperature_k=temperature_k,
            where=f"{source}, layer {index + 1} ('{name}')",
        )

    return Layer(
        name=name,
        material=mat.material,
        x=mat.x,
        thickness_nm=float(thickness_nm),
        thickness_ml=None if thickness_ml is None else float(thickness_ml),
        doping_cm3=float(doping),
        conduction_band_ev=float(mat.edge),
        mass_m0=float(mat.mass),
        nonparabolicity_per_ev=float(mat.alpha),
        monolayer_nm=None if mat.monolayer is None else float(mat.monolayer),
        permittivity_r=float(mat.permittivity),
        strain_xx=mat.strain_xx,
        x_valley_ev=mat.valleys[0],
        l_valley_ev=mat.valleys[1],
        **mat.phonon,
    )
