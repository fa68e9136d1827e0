"""Growth sheets a grower can read: whole monolayers with the nm beside them.

Check value: the In0.53Ga0.47As monolayer is half its lattice constant,
5.8687 A / 2 = 0.2934 nm (lattice-matched to InP, I. Vurgaftman et al.,
J. Appl. Phys. 89, 5815 (2001)), so a 5.0 nm spacer is 17.04 ML and is grown
as 17 ML = 4.99 nm.
"""

from __future__ import annotations

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
