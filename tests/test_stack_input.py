"""Tests of wellwright.physics.stack input validation: every bad-input class of issue 2.

Each bad file differs from a valid one (``VALID_LAYERS``, an invented test
stack) by one change; the error must be a :class:`wellwright.physics.errors.InputError`
(a ``ValueError``) whose message names the file, the layer (counted from 1, with its
name; issue 18) and the key
(issue 2 and DESIGN.md: "one message naming the file, the layer index and the
key, with the allowed range").
"""

from __future__ import annotations

import re
import warnings

import pytest
from helpers_physics import BAD_STACKS, VALID_LAYERS, stack_toml, write_stack
from wellwright.physics.errors import InputError
from wellwright.physics.stack import CriticalThicknessWarning, load_stack, parse_stack


def _location(path, layer, key) -> str:
    """The message's start as a pattern: layers counted from 1, with the layer's name."""
    parts = [re.escape(str(path))]
    if layer is not None:
        parts.append(f"layer {layer + 1}" + r"(?: \('[^']+'\))?")  # the name where it has one
    if key is not None:
        parts.append(re.escape(f"key '{key}'"))
    return ", ".join(parts)


def test_valid_base_stack_loads(tmp_path) -> None:
    # the bad cases below are one edit away from this file, so it must itself be valid
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        stack = load_stack(write_stack(tmp_path, stack_toml()))
    assert len(stack.layers) == len(VALID_LAYERS)
    assert stack.layers[2].label == "Al0.3Ga0.7As" == stack.layers[4].label
    # thickness_ml -> nm through the monolayer thickness (half the lattice constant, [001])
    barrier = stack.layers[2]
    assert barrier.thickness_nm == pytest.approx(10 * barrier.monolayer_nm, rel=1e-12)


@pytest.mark.parametrize(
    ("case", "text", "layer", "key", "message"), BAD_STACKS, ids=[c[0] for c in BAD_STACKS]
)
def test_bad_input_names_file_layer_and_key(tmp_path, case, text, layer, key, message) -> None:
    path = tmp_path / "absent.toml" if text is None else write_stack(tmp_path, text)
    with pytest.raises(InputError, match="^" + _location(path, layer, key) + ": ") as info:
        load_stack(path)
    err = info.value
    assert re.search(message, err.message), err.message
    assert isinstance(err, ValueError)
    assert (err.source, err.layer, err.key) == (str(path), layer, key)
    if layer is not None and layer < len(VALID_LAYERS) and case != "duplicate_names":
        assert err.layer_name == VALID_LAYERS[layer].get("name", err.layer_name)
    assert "\n" not in str(err)
    assert "{" not in err.message  # no unfilled placeholder (STYLE.md, point 8)


def test_parse_stack_reports_dict_source() -> None:
    # input built in Python names "<dict>" (or the given source) instead of a file
    layers = [dict(x) for x in VALID_LAYERS]
    layers[3]["thickness_nm"] = -1.0
    with pytest.raises(
        InputError, match=r"^<dict>, layer 4 \('\w+'\), key 'thickness_nm': -1 outside"
    ):
        parse_stack({"layers": layers})
    with pytest.raises(InputError, match=r"^my-script, layer 4 "):
        parse_stack({"layers": layers}, source="my-script")


def test_critical_thickness_warns_but_loads(tmp_path) -> None:
    # Matthews and Blakeslee, J. Cryst. Growth 27, 118 (1974): AlAs on InP (about 3.5 %
    # tensile mismatch) has a critical thickness of a few monolayers; 40 ML must warn,
    # not fail (issue 2).
    layers = [
        {"name": "emitter", "material": "In0.53Ga0.47As", "doping_cm3": 2e18},
        {"name": "barrier", "material": "AlAs", "thickness_ml": 40},
        {"name": "collector", "material": "In0.53Ga0.47As", "doping_cm3": 2e18},
    ]
    path = write_stack(tmp_path, stack_toml(layers, top={"temperature_k": 300, "substrate": "InP"}))
    with pytest.warns(
        CriticalThicknessWarning,
        match=r"layer 2 \('barrier'\).*Matthews-Blakeslee critical thickness",
    ):
        stack = load_stack(path)
    assert stack.layers[1].thickness_ml == pytest.approx(40)
    # with strain switched off there is no strained layer, hence no warning
    path = write_stack(
        tmp_path,
        stack_toml(layers, top={"temperature_k": 300, "substrate": "InP"}, model={"strain": False}),
        "off.toml",
    )
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        load_stack(path)


def test_study_example_loads_without_warning() -> None:
    # the shipped example (5 ML AlAs barriers on InP) is meant to be pseudomorphic
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        stack = load_stack("studies/inp_thz_oscillator.toml")
    assert stack.layers[2].thickness_ml == pytest.approx(5)


def test_the_python_api_takes_numpy_scalars_and_refuses_what_is_no_stack_or_sweep():
    """A new user's fuzz finds (common practice: numpy's integer scalars are numbers; a wrong
    argument gets an exception that says what was expected, not one from deep inside):
    thickness_ml = np.int64(5) was refused while np.float64 passed; a NaN bias gave a
    convergence error at 'nan V'; a file name given for the stack an AttributeError."""
    import numpy as np
    from wellwright.physics import stack_iv

    layers = [
        {"material": "GaAs", "doping_cm3": 1e18},
        {"material": "AlAs", "thickness_ml": np.int64(5)},
        {"material": "GaAs", "thickness_ml": np.int32(15)},
        {"material": "AlAs", "thickness_ml": 5},
        {"material": "GaAs", "doping_cm3": 1e18},
    ]
    stack = parse_stack({"layers": layers})
    assert stack.layers[1].thickness_ml == 5.0 and stack.layers[2].thickness_ml == 15.0
    with pytest.raises(ValueError, match=r"finite, got nan at index 1"):
        stack_iv(stack, np.array([0.0, np.nan, 0.2]))
    with pytest.raises(TypeError, match=r"stack must be a Stack .* got str"):
        stack_iv("studies/inp_thz_oscillator.toml", np.linspace(0, 1, 5))


def test_a_material_without_a_band_gap_at_the_stack_temperature_is_refused():
    """InSb at 1000 K (a fuzz find): the Varshni fit of the material table (Vurgaftman et al.
    2001) extrapolates its gap below zero near 880 K, above InSb's melting point (about
    800 K, common knowledge); the stack was refused on a derived key the user never wrote
    ('nonparabolicity_per_ev: -25.3 outside [0, 50]'). At 700 K it still has a gap."""
    layers = [
        {"material": "InSb", "doping_cm3": 1e18},
        {"material": "AlSb", "thickness_ml": 5},
        {"material": "InSb", "thickness_ml": 15},
        {"material": "AlSb", "thickness_ml": 5},
        {"material": "InSb", "doping_cm3": 1e18},
    ]
    with pytest.raises(InputError, match=r"key 'material': InSb has no band gap at 1000 K"):
        parse_stack({"temperature_k": 1000, "layers": layers})
    parse_stack({"temperature_k": 700, "layers": layers})
