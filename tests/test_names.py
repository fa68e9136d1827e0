"""The one table of names, units and formats (wellwright.optimize.shared.names)."""

from __future__ import annotations

import pytest
from wellwright.optimize.shared import names
from wellwright.physics.iv import METRIC_NAMES

#: SI prefixes (BIPM, The International System of Units, 9th ed., 2019).
PREFIX = {"k": 1e3, "": 1.0, "m": 1e-3, "µ": 1e-6, "p": 1e-12, "f": 1e-15, "G": 1e9}
#: Unit each key suffix carries, as (base unit, per-area length unit or None).
SUFFIX = {
    "_a_cm2": ("A", "cm"),
    "_w_cm2": ("W", "cm"),
    "_s_cm2": ("S", "cm"),
    "_f_cm2": ("F", "cm"),
    "_v": ("V", None),
    "_s": ("s", None),
    "_hz": ("Hz", None),
}
LENGTH_M = {"cm": 1e-2, "µm": 1e-6}


def _factor(key: str, shown: str) -> float:
    """Conversion factor from the key's unit to the shown unit, worked out from the prefixes."""
    suffix = next(s for s in sorted(SUFFIX, key=len, reverse=True) if key.endswith(s))
    base, per = SUFFIX[suffix]
    top, _, bottom = shown.partition("/")
    prefix = top.removesuffix(base)
    assert top.endswith(base), (key, shown)
    factor = 1.0 / PREFIX[prefix]
    if per is not None:
        length = bottom.removesuffix("²")
        factor *= (LENGTH_M[length] / LENGTH_M[per]) ** 2
    return factor


def test_every_metric_has_words_and_a_consistent_trade_unit():
    """Each figure of merit of a sweep has words, and its display factor agrees with SI prefixes."""
    for key in METRIC_NAMES:
        q = names.QUANTITIES[key]
        assert q.words and "_" not in q.words and q.words[0] != q.words[0].upper() or key == "pvcr"
        if key in ("pvcr", "valley_bounded_by_sweep"):  # a ratio and a flag
            assert q.unit == ""
            continue
        assert q.factor == pytest.approx(_factor(key, q.unit), rel=1e-12), key


def test_labels_and_formats():
    assert names.label("peak_current_density_a_cm2") == "peak current density (kA/cm²)"
    assert names.label("pvcr", dimensionless="dimensionless") == "PVCR (dimensionless)"
    assert names.format_value("peak_voltage_v", 0.3456) == "346"
    assert names.format_value("cutoff_frequency_hz", 6.4e11, with_unit=True) == "640 GHz"
    assert names.format_value("pvcr", None) == "-"
    assert names.format_value("pvcr", float("nan")) == "-"
    assert names.words("some_new_key") == "some new key"


def test_quantities_at_a_stated_bias_take_their_row_with_the_bias_in_words():
    # keys of physics.iv.at_bias_key / at_bias_current_key (issue 14, circuit designer)
    from wellwright.physics.iv import at_bias_current_key, at_bias_key

    assert names.label(at_bias_key(0.3)) == "current density at 0.3 V (kA/cm²)"
    assert names.label(at_bias_current_key(-0.25)) == "current at -0.25 V (mA)"
    q = names.quantity(at_bias_key(0.3))
    assert q.factor == pytest.approx(_factor("x_a_cm2", q.unit), rel=1e-12)
    assert names.format_value(at_bias_current_key(0.3), 1.234, with_unit=True) == "1.23 mA"


def test_growth_parameters_and_variables_in_words():
    assert names.parameter_words("barrier1.thickness") == "barrier1 thickness error (ML)"
    assert names.parameter_words("AlAs.rate") == "AlAs growth rate (relative)"
    assert names.parameter_words("well.x") == "well composition x (absolute)"
    assert names.parameter_words("collector.doping") == "collector doping (relative)"
    assert names.parameter_words("barrier1.thickness_ml") == "barrier1 thickness error (ML)"
    assert names.parameter_words("In.flux") == "In cell flux (relative)"
    assert names.parameter_words("In.flux_drift") == "In cell flux drift over the run (relative)"
    assert names.parameter_words("cap.unknown_kind") == "cap unknown_kind"
    assert names.variable_label("barrier1.thickness_ml") == "barrier1 thickness (ML)"
    assert names.variable_label("well.x") == "well composition x"
