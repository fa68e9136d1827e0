"""A study's link to a calibration: ``[calibration] from = "DIR/calibration.json"``.

The calibrated model parameters of ``wellwright calibrate`` (the ``model``
entry of calibration.json) are written into the study's stack before it is
parsed, so that the search, the tolerance analysis and the report all use
them:

- ``<material>.offset_ev``: the layers of that material get
  ``conduction_band_ev`` = their table value + the offset (needs a fixed
  composition);
- ``<material>.rate``: a systematic growth-rate factor: the layers of that
  material get ``monolayer_nm`` = their table value x the factor (and a
  fixed ``thickness_nm`` x the factor), so that a layer asked for in whole
  monolayers comes out that much thicker or thinner (a continuous thickness, no island step; where the tolerance
  analysis varies a composition, that layer's monolayer follows the
  composition and the factor is not applied);
- model options (``broadening_mev``, ``roughness_height_nm``,
  ``roughness_length_nm``) into ``[model]``;
- ``series_resistance_ohm_um2`` into ``[device]``.

Layers tied with ``same_as`` take these from the layer they copy; values the
study file sets itself for these keys are overwritten.
:func:`calibration_lines` says what was applied (the report prints it).
"""

from __future__ import annotations

import copy
import json
from pathlib import Path
from typing import Any

from wellwright.physics import checks, materials
from wellwright.physics.errors import InputError

__all__ = ["apply_calibration", "calibration_lines", "CALIBRATION_KEYS"]

CALIBRATION_KEYS = ("from", "xrd_period_nm", "xrd_layers")
MODEL_KEYS = ("broadening_mev", "roughness_height_nm", "roughness_length_nm")


def _load(data: dict[str, Any], *, source: str, base_dir: str | Path) -> tuple[Path, dict] | None:
    table = data.get("calibration")
    if table is None:
        return None
    checks.table(table, CALIBRATION_KEYS, source=source, key="calibration")
    link = table.get("from")
    if link is None:
        return None
    if not isinstance(link, str):
        raise InputError(
            'must be a path, e.g. from = "wafer1/calibration.json"',
            source=source,
            key="calibration.from",
        )
    path = Path(base_dir) / link
    try:
        record = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise InputError(
            f"{str(path)!r} not found", source=source, key="calibration.from"
        ) from None
    except (OSError, ValueError) as exc:
        raise InputError(
            f"{str(path)!r} unreadable ({exc})", source=source, key="calibration.from"
        ) from None
    if not isinstance(record, dict) or record.get("kind") != "wellwright calibration":
        raise InputError(
            f"{str(path)!r} is not a calibration.json of wellwright calibrate",
            source=source,
            key="calibration.from",
        )
    return path, record.get("model", {})


def apply_calibration(data: dict[str, Any], *, source: str, base_dir: str | Path) -> dict[str, Any]:
    """``data`` (a study or stack document) with the linked calibration's model parameters written in.

    Returns ``data`` itself when there is no ``[calibration] from``.

    Parameters
    ----------
    data
        The parsed study or stack document.
    source
        Its file name, for messages.
    base_dir
        Folder a relative ``[calibration] from`` path is taken from.

    Raises
    ------
    InputError
        A missing or foreign calibration file, or an offset on a layer whose
        composition is a range.
    """
    loaded = _load(data, source=source, base_dir=base_dir)
    if loaded is None:
        return data
    _, model = loaded
    out = copy.deepcopy(data)
    for key in MODEL_KEYS:
        if key in model:
            out.setdefault("model", {})[key] = float(model[key])
    if "series_resistance_ohm_um2" in model:
        out.setdefault("device", {})["series_resistance_ohm_um2"] = max(
            float(model["series_resistance_ohm_um2"]), 0.0
        )
    offsets = {k.rsplit(".", 1)[0]: float(v) for k, v in model.items() if k.endswith(".offset_ev")}
    rates = {k.rsplit(".", 1)[0]: float(v) for k, v in model.items() if k.endswith(".rate")}
    if offsets or rates:
        _apply_layers(out, offsets, rates, source=source)
    return out


def _apply_layers(
    out: dict[str, Any], offsets: dict[str, float], rates: dict[str, float], *, source: str
) -> None:
    t = out.get("temperature_k", 300.0)
    temperature_k = float(t) if isinstance(t, int | float) and not isinstance(t, bool) else 300.0
    model = out.get("model")
    strain = bool(model.get("strain", True)) if isinstance(model, dict) else True
    layers = [x for x in out.get("layers", []) if isinstance(x, dict)]
    a_sub = None
    sub = out.get("substrate") or (layers[0].get("material") if layers else None)
    if isinstance(sub, str) and sub != "custom":
        try:
            name, x = materials.parse_material(
                sub, layers[0].get("x") if sub == layers[0].get("material") else None
            )
            a_sub = float(materials.lattice_constant_nm(name, x, temperature_k=temperature_k))
        except (ValueError, TypeError):
            a_sub = None  # the stack check reports a bad substrate
    for i, layer in enumerate(layers):
        if (
            not isinstance(layer, dict)
            or "same_as" in layer
            or layer.get("material") in (None, "custom")
        ):
            continue
        x = layer.get("x")
        try:
            name, x_parsed = materials.parse_material(
                str(layer["material"]), None if isinstance(x, dict) else x
            )
        except ValueError:
            continue  # the stack check reports it
        if name not in offsets and name not in rates:
            continue
        if isinstance(x, dict):
            raise InputError(
                "a calibrated band offset or rate needs a fixed composition here",
                source=source,
                layer=i,
                key="x",
            )
        params = materials.material_parameters(
            name, x_parsed, temperature_k=temperature_k, substrate_lattice_nm=a_sub, strain=strain
        )
        if name in offsets:
            layer["conduction_band_ev"] = float(params.conduction_band_ev) + offsets[name]
        if name in rates:
            layer["monolayer_nm"] = float(params.monolayer_nm) * rates[name]
            if isinstance(layer.get("thickness_nm"), int | float):
                layer["thickness_nm"] = float(layer["thickness_nm"]) * rates[name]


def calibration_lines(reserved: dict[str, Any], *, base_dir: str | Path) -> list[str]:
    """What a study's calibration link applied, in words (empty without a link).

    Parameters
    ----------
    reserved
        The study's ``[calibration]`` table.
    base_dir
        Folder a relative ``from`` path is taken from.
    """
    table = reserved.get("calibration") or {}
    if "from" not in table:
        return []
    loaded = _load({"calibration": table}, source="calibration", base_dir=base_dir)
    if loaded is None:
        return []
    path, model = loaded
    lines = [f"The model is calibrated against a measured device: {path}."]
    for key, value in model.items():
        lines.append(f"{key} = {value:.4g}")
    return lines
