"""Growth sheets a grower can read: whole monolayers with the nm beside them.

Check value: the In0.53Ga0.47As monolayer is half its lattice constant,
5.8687 A / 2 = 0.2934 nm (lattice-matched to InP, I. Vurgaftman et al.,
J. Appl. Phys. 89, 5815 (2001)), so a 5.0 nm spacer is 17.04 ML and is grown
as 17 ML = 4.99 nm.
"""

from __future__ import annotations

import numpy as np
import pytest
from wellwright.optimize.search.designs import GROWTH_SHEET_HEADER, growth_sheet_rows, layer_records
from wellwright.physics import parse_stack


def test_a_layer_given_in_nm_is_rounded_to_whole_monolayers_with_a_note():
    stack = parse_stack(
        {
            "substrate": "InP",
            "layers": [
                {"name": "emitter", "material": "In0.53Ga0.47As", "doping_cm3": 2e18},
                {"name": "barrier1", "material": "AlAs", "thickness_ml": 5},
                {"name": "spacer", "material": "In0.53Ga0.47As", "thickness_nm": 5.0},
                {"name": "collector", "material": "In0.53Ga0.47As", "doping_cm3": 2e18},
            ],
        }
    )
    rows = growth_sheet_rows({"layers": layer_records(stack)})
    assert GROWTH_SHEET_HEADER[4:6] == ["monolayers", "nm"] and GROWTH_SHEET_HEADER[-1] == "note"
    barrier, spacer = rows[1], rows[2]
    assert barrier[4] == "5" and barrier[-1] == ""
    assert spacer[4] == "17"
    assert float(spacer[5]) == pytest.approx(17 * 0.29344, abs=0.005)
    assert "5.000 nm" in spacer[-1] and "17 ML" in spacer[-1]
    assert rows[0][4] == "" and rows[-1][4] == ""  # contacts: no thickness


def test_a_fixed_fractional_layer_is_simulated_and_listed_as_the_islands_it_grows_into(
    write_study,
):
    """A study fixing ``thickness_ml = 4.5`` grows a part-covered last monolayer; the search
    must simulate that device (the islands' area-weighted mixture, physics.islands), not a
    uniform 4.5 ML layer nor the 4 ML a rounded sheet would say, and the growth sheet must
    list 4.5 ML. Check value: the islands model's own definition, J = sum of the whole
    stacks' currents weighted by their area shares (here barrier2 is tied to barrier1, so
    the shares are 1/4 for each of 4/4, 4/5, 5/4 and 5/5 ML)."""
    from conftest import study_text
    from wellwright.optimize.search.engine import evaluate, nominal_metrics
    from wellwright.optimize.study.study import load_study
    from wellwright.physics.iv import stack_iv

    study = load_study(
        write_study(study_text(barrier="4.5", extra="[sweep]\npoints = 31\n"), "fractional")
    )
    names = study.layer_names
    assert study.island_layers == (names.index("barrier1"), names.index("barrier2"))
    params = {"well.thickness_ml": 14}
    (out,), _ = evaluate(study, [params], nominal_metrics)
    jp = out.attrs["metrics"]["peak_current_density_a_cm2"]

    bias = study.sweep.bias_v
    stack = study.stack(params)
    whole = {}
    for b1 in (4, 5):
        for b2 in (4, 5):
            data = study.stack_dict(params)
            data["layers"][2]["thickness_ml"], data["layers"][4]["thickness_ml"] = b1, b2
            whole[b1, b2] = stack_iv(parse_stack(data), bias, refine=False)
    mixed = stack_iv(stack, bias, refine=False, island_layers=study.island_layers)
    expected = sum(c.current_density_a_cm2[0] for c in whole.values()) / 4
    np.testing.assert_allclose(mixed.current_density_a_cm2[0], expected, rtol=1e-9)
    refined = stack_iv(stack, bias, island_layers=study.island_layers)
    assert jp == pytest.approx(refined.metrics["peak_current_density_a_cm2"][0], rel=1e-9)
    uniform = stack_iv(stack, bias).metrics["peak_current_density_a_cm2"][0]
    assert abs(jp / uniform - 1) > 1e-3  # the uniform layer is another device (1.6 % apart)

    rows = growth_sheet_rows({"layers": out.attrs["layers"]})
    barrier = rows[names.index("barrier1")]
    assert barrier[4] == "4.5"
    assert "islands of 4 ML (50 % of the area) and 5 ML (50 %)" in barrier[-1]
