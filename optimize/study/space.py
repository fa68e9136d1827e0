"""The design space of a study: variables (ranges of layer keys), ``same_as`` ties, concrete stacks.

A study file's layers may carry ranges in place of values:
``thickness_ml = {min = 4, max = 12}`` (whole monolayers),
``x = {min = 0.45, max = 0.80, step = 0.01}``,
``doping_cm3 = {min = 1e17, max = 5e18, log = true}``; a layer may be tied to
another with ``same_as = "barrier1"`` (it then takes every key of that layer,
ranges included, and shares its parameters). The search parameter of a range
is named ``<layer name>.<key>``, e.g. ``barrier1.thickness_ml``.

:func:`parse_space` turns the ``layers`` of a study file into a base stack
dictionary (every range at its lower bound) and the :class:`Variable` list;
:func:`stack_dict` fills parameter values back in.
"""

from __future__ import annotations

import copy
import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from wellwright.physics import checks
from wellwright.physics.errors import InputError
from wellwright.physics.stack import LAYER_KEYS, TOP_KEYS, Stack, default_layer_name

__all__ = [
    "grid_values",
    "grid_size",
    "Variable",
    "RANGE_KEYS",
    "parse_space",
    "stack_dict",
    "parameters_of",
    "parameter_key",
    "is_finite_number",
    "layer_records",
    "growth_sheet_rows",
    "GROWTH_SHEET_HEADER",
]

#: Layer keys that may be ranges (every numeric stack key).
#: Most grid points a range with a step may have (a smaller step is surely a typo).
MAX_STEPS = 1e6
RANGE_KEYS = tuple(sorted(k for k, kind in LAYER_KEYS.items() if kind is float))


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


def is_finite_number(value: Any) -> bool:
    """A finite int or float (a bool is not a number here)."""
    if isinstance(value, bool) or not isinstance(value, int | float):
        return False
    try:
        return math.isfinite(value)
    except OverflowError:  # an integer too large for a float
        return False


def stack_dict(
    base: dict[str, Any], variables: Sequence[Variable], params: dict[str, float]
) -> dict[str, Any]:
    """A concrete stack dictionary (for :func:`wellwright.physics.stack.parse_stack`).

    Parameters
    ----------
    base
        The stack dictionary with every range at its lower bound (from
        :func:`parse_space`).
    variables
        The search parameters.
    params
        Value of every variable by parameter name; a missing one takes its
        lower bound.
    """
    data = copy.deepcopy(base)
    for var in variables:
        value = params.get(var.name, var.low)
        value = int(round(value)) if var.integer else float(f"{float(value):.12g}")
        for i in var.layers:
            data["layers"][i][var.key] = value
    return data


def parameters_of(
    variables: Sequence[Variable],
    stack: Stack,
    *,
    layer_names: Sequence[str],
    source: str | None = None,
) -> dict[str, float]:
    """The variables' values in a stack whose layers carry the study's layer names.

    Parameters
    ----------
    variables
        The study's design variables.
    stack
        A stack with the study's layers.
    layer_names
        The study's layer names, in order.
    source
        Where the stack came from, for messages.

    Raises
    ------
    InputError
        When a layer is missing or a value is outside its range.
    """
    by_name = {layer.name: layer for layer in stack.layers}
    src = source or stack.source
    params: dict[str, float] = {}
    for var in variables:
        layer_name = var.name.rsplit(".", 1)[0]
        if layer_name not in by_name:
            raise InputError(
                f"has no layer named '{layer_name}'; its layers must carry the study's "
                f"layer names ({', '.join(layer_names)})",
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


def grid_values(variables: Sequence[Variable]) -> dict[str, list[float | int]] | None:
    """Every value of each variable when all are on a grid (whole monolayers, a stated
    step), else None (a continuous range cannot be enumerated)."""
    grid: dict[str, list[float | int]] = {}
    for v in variables:
        if v.integer:
            step = 1 if v.log else int(v.step or 1)
            grid[v.name] = list(range(int(v.low), int(v.high) + 1, step))
        elif v.step is not None:
            n = int(math.floor((v.high - v.low) / v.step + 1e-9))
            grid[v.name] = [round(v.low + k * v.step, 12) for k in range(n + 1)]
        else:
            return None
    return grid


def grid_size(grid: dict[str, list[float | int]]) -> int:
    """Number of designs of a grid (the product of the value counts)."""
    return math.prod(len(values) for values in grid.values())


def parameter_key(variables: Sequence[Variable], params: dict[str, Any]) -> tuple:
    """A hashable key of a parameter set (equal for the same design; rounding noise removed).

    Parameters
    ----------
    variables
        The study's design variables.
    params
        Parameter values by variable name.
    """
    return tuple(round(float(params[v.name]), 12) if v.name in params else None for v in variables)


def _layer_names(raw_layers: list[dict[str, Any]], *, source: str) -> list[str]:
    """Each layer's name (the default rule where it has none), checked and unique."""
    n = len(raw_layers)
    names = []
    for i, raw in enumerate(raw_layers):
        nm = raw.get("name", default_layer_name(i, n_layers=n))
        if not isinstance(nm, str) or not nm or "." in nm:
            raise InputError(
                f"must be a non-empty string without '.', got {checks.show(nm)}",
                source=source,
                layer=i,
                key="name",
            )
        if nm in names:
            raise InputError(
                f"name '{nm}' used twice", source=source, layer=i, layer_name=nm, key="name"
            )
        names.append(nm)

    return names


def _split_layer(
    raw: dict[str, Any], *, index: int, name: str, source: str
) -> tuple[dict[str, Any], dict[str, Any] | None, dict[str, dict[str, Any]]]:
    """A layer's fixed keys (with ``same_as``), its ``growth`` table and its ranges by key."""
    i = index
    growth = None
    ranges: dict[str, dict[str, Any]] = {}
    fixed: dict[str, Any] = {"name": name}
    for key, value in raw.items():
        if key == "name":
            continue
        if key == "growth":
            if not isinstance(value, dict):
                raise InputError(
                    "must be a table, e.g. growth = {...}",
                    source=source,
                    layer=i,
                    layer_name=name,
                    key=key,
                )
            growth = copy.deepcopy(value)
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
                    layer_name=name,
                    key=key,
                )
            ranges[key] = value
            continue
        fixed[key] = value
    return fixed, growth, ranges


def _resolve_same_as(
    layers: list[dict[str, Any]],
    raw_layers: list[dict[str, Any]],
    names: list[str],
    *,
    source: str,
) -> dict[int, int]:
    """``same_as``: the layer each tied layer takes every key of (resolved through chains)."""
    resolved: dict[int, int] = {}
    for i, layer in enumerate(layers):
        if "same_as" not in layer:
            continue
        target = layer["same_as"]
        if not isinstance(target, str):
            raise InputError(
                f"must be the name of another layer, got {checks.show(target)}",
                source=source,
                layer=i,
                layer_name=names[i],
                key="same_as",
            )
        extra = sorted(k for k in raw_layers[i] if k not in ("name", "same_as", "growth"))
        if extra:
            raise InputError(
                f"a layer with same_as takes only name (and growth); remove {', '.join(extra)}",
                source=source,
                layer=i,
                layer_name=names[i],
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
                    layer_name=names[j],
                    key="same_as",
                )
            j = names.index(ref)
            if j in (0, len(names) - 1):
                raise InputError(
                    f"'{ref}' is a contact (the first or last layer), which has no thickness to "
                    "share; same_as ties inner layers only",
                    source=source,
                    layer=i,
                    layer_name=names[i],
                    key="same_as",
                )
            if j in seen:
                raise InputError(
                    "same_as chain loops back to this layer",
                    source=source,
                    layer=i,
                    layer_name=names[i],
                    key="same_as",
                )
            seen.add(j)
        resolved[i] = j
    return resolved


def parse_space(
    data: dict[str, Any], *, source: str
) -> tuple[dict[str, Any], tuple[Variable, ...], dict[str, Any]]:
    """Split layers into fixed values and ranges; resolve ``same_as``.

    Parameters
    ----------
    data
        The study's stack document (``layers`` and the other stack keys).
    source
        The study file, for messages.
    """
    raw_layers = data.get("layers")
    if not isinstance(raw_layers, list) or not all(isinstance(x, dict) for x in raw_layers):
        raise InputError("needs a list of [[layers]] tables", source=source, key="layers")
    names = _layer_names(raw_layers, source=source)
    layer_growth: dict[str, Any] = {}
    layers: list[dict[str, Any]] = []
    ranges: dict[tuple[int, str], dict[str, Any]] = {}
    for i, raw in enumerate(raw_layers):
        fixed, growth, layer_ranges = _split_layer(raw, index=i, name=names[i], source=source)
        if growth is not None:
            layer_growth[names[i]] = growth
        ranges.update({(i, key): spec for key, spec in layer_ranges.items()})
        layers.append(fixed)
    resolved = _resolve_same_as(layers, raw_layers, names, source=source)
    for i, j in resolved.items():
        tied = {k: copy.deepcopy(v) for k, v in layers[j].items() if k not in ("name", "same_as")}
        tied["name"] = names[i]
        layers[i] = tied

    # ranges -> variables (a tied layer shares the reference's variable)
    variables = []
    for (i, key), spec in ranges.items():
        tied_layers = (i,) + tuple(t for t, ref in resolved.items() if ref == i)
        var = parse_range(
            spec, name=f"{names[i]}.{key}", key=key, layers=tied_layers, source=source, index=i
        )
        variables.append(var)
        for t in var.layers:
            layers[t][key] = int(var.low) if var.integer else var.low
    variables.sort(key=lambda v: (v.layers[0], v.key))

    base = {k: copy.deepcopy(v) for k, v in data.items() if k in TOP_KEYS and k != "layers"}
    base["layers"] = layers
    return base, tuple(variables), layer_growth


def parse_range(
    spec: dict[str, Any], *, name: str, key: str, layers: tuple[int, ...], source: str, index: int
) -> Variable:
    """One range table of a layer key as a design :class:`Variable`.

    Parameters
    ----------
    spec
        The range table: ``min``, ``max`` and optionally ``step`` or ``log``.
    name
        The variable's name, ``<layer>.<key>``.
    key
        The layer key (``thickness_ml`` gives whole monolayers).
    layers
        Indices (from 0) of the layers it sets: the layer and those tied to it.
    source, index
        The study file and the layer index (from 0), for messages.
    """
    integer = key == "thickness_ml"
    form = (
        "{min = 4, max = 12} in whole monolayers (optional step, log)"
        if integer
        else "{min = .., max = ..} with optional step = .. or log = true"
    )

    def err(message: str, sub: str | None = None) -> InputError:
        return InputError(
            message,
            source=source,
            layer=index,
            layer_name=name.rsplit(".", 1)[0],
            key=key if sub is None else f"{key}.{sub}",
        )

    unknown = sorted(set(spec) - {"min", "max", "step", "log"})
    if unknown:
        raise err(f"unknown range key {unknown[0]!r}; a range is {form}", unknown[0])
    for bound in ("min", "max"):
        if bound not in spec:
            raise err(f"range needs min and max; a range is {form}", bound)
        if not is_finite_number(spec[bound]):
            raise err(f"must be a finite number, got {checks.show(spec[bound])}", bound)
        if integer and float(spec[bound]) != int(spec[bound]):
            raise err(f"{spec[bound]!r} is not a whole number of monolayers", bound)
    low, high = float(spec["min"]), float(spec["max"])
    if not low < high:
        raise err(f"min ({low:g}) must be below max ({high:g})", "max")
    log = spec.get("log", False)
    if not isinstance(log, bool):
        raise err(f"must be true or false, got {checks.show(log)}", "log")
    step = spec.get("step")
    if step is not None:
        if not is_finite_number(step) or step <= 0:
            raise err(f"must be a positive number, got {checks.show(step)}", "step")
        if integer and float(step) != int(step):
            raise err(f"{checks.show(step)} is not a whole number of monolayers", "step")
        if log:
            raise err("give either step or log = true, not both", "step")
        k = (high - low) / step
        if not k <= MAX_STEPS:  # also catches an overflow to inf
            raise err(
                f"{step:g} is too small: (max - min) / step = {k:.3g} steps, at most {MAX_STEPS:g}",
                "step",
            )
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


def layer_records(stack: Stack, *, islands: Sequence[int] = ()) -> list[dict[str, Any]]:
    """The layers of a stack as plain records (contacts have no thickness).

    Parameters
    ----------
    stack
        The design.
    islands
        Layers (from 0) grown and simulated as monolayer islands (their record has
        ``islands: true``; :attr:`wellwright.optimize.study.Study.island_layers`).
    """
    out = []
    n = len(stack.layers)
    for i, layer in enumerate(stack.layers):
        contact = i in (0, n - 1)
        ml = layer.thickness_ml
        out.append(
            {
                "name": layer.name,
                "material": layer.material,
                "label": layer.label,
                "x": layer.x,
                "thickness_ml": None
                if contact or ml is None
                else (int(round(ml)) if abs(ml - round(ml)) < 1e-9 else ml),
                "thickness_nm": None if contact else layer.thickness_nm,
                "doping_cm3": layer.doping_cm3,
                **({"islands": True} if i in islands else {}),
            }
        )
    return out


def island_text(thickness_ml: float) -> str:
    """How a fractional monolayer count is grown and simulated: its islands' shares.

    Parameters
    ----------
    thickness_ml
        The layer's monolayers (fractional).
    """
    n = math.floor(thickness_ml)
    f = thickness_ml - n
    return (
        f"islands of {n} ML ({100 * (1 - f):.0f} % of the area) and {n + 1} ML "
        f"({100 * f:.0f} %); the I-V is their area-weighted mixture"
    )


#: Columns of a growth sheet (:func:`growth_sheet_rows`).
GROWTH_SHEET_HEADER = ["layer", "name", "material", "x", "monolayers", "nm", "doping_cm3", "note"]


def growth_sheet_rows(record: dict[str, Any]) -> list[list[Any]]:
    """Rows of a design's growth sheet, in stack order (first row: emitter contact).

    Material in trade notation; monolayers with the nm they make beside them.
    A fractional ``thickness_ml`` the study fixes is grown as given, the last
    monolayer part-covered, and was simulated as such islands (``islands`` in
    the record): the last column (``note``) gives their shares. A layer the
    study gives in nm whose thickness is not a whole number of monolayers is
    rounded to the nearest and the note says so. Contacts have no thickness
    (grown as thick as the device process needs).
    """
    rows = []
    for i, layer in enumerate(record["layers"] or []):
        ml, nm = layer["thickness_ml"], layer["thickness_nm"]
        note = ""
        if layer.get("islands"):
            note = f"grown to {ml:g} ML, the last monolayer part-covered: {island_text(ml)}"
        elif ml is not None and nm and abs(ml - round(ml)) > 1e-6:
            whole = max(1, round(ml))
            note = (
                f"given as {nm:.3f} nm = {ml:.2f} ML; rounded to {whole} ML "
                f"({whole * nm / ml:.3f} nm) for growth"
            )
            ml, nm = whole, whole * nm / ml
        rows.append(
            [
                i,
                layer["name"],
                layer["label"],
                "" if layer["x"] is None else f"{layer['x']:.3f}",
                "" if ml is None else (f"{ml:g}" if layer.get("islands") else str(int(round(ml)))),
                "" if nm is None else f"{nm:.3f}",
                f"{layer['doping_cm3']:.3g}",
                note,
            ]
        )
    return rows
