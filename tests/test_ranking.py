"""Growth rankings that say when they are resolved: Sobol on the Ishigami function.

Source: T. Ishigami and T. Homma, Proc. ISUMA '90, 398 (1990), with the
analytic variances of A. Saltelli et al., Global Sensitivity Analysis: The
Primer (Wiley, 2008) (from memory):
V1 = (1 + b pi^4 / 5)^2 / 2, V2 = a^2 / 8, V13 = b^2 pi^8 (1/18 - 1/50), V3 = 0.
With a = 7, b = 0.1 the total indices are 0.558, 0.442, 0.244; choosing
a^2 = 8 (V1 + V13) makes the total indices of x1 and x2 exactly equal.
A fourth input that the function ignores has a total index of zero.
Statistical tests (Sobol estimates), seeded so that they are repeatable.
"""

from __future__ import annotations

import numpy as np
import pytest
from wellwright.optimize.tolerance.analysis import ranking_resolution, sobol_until_resolved

B = 0.1
V1 = 0.5 * (1 + B * np.pi**4 / 5) ** 2
V13 = B**2 * np.pi**8 * (1 / 18 - 1 / 50)
A_EQUAL = float(np.sqrt(8 * (V1 + V13)))  # S_T1 = S_T2


def _ishigami(a: float):
    def evaluate(u: np.ndarray) -> dict[str, np.ndarray]:
        x = -np.pi + 2 * np.pi * u
        f = np.sin(x[:, 0]) + a * np.sin(x[:, 1]) ** 2 + B * x[:, 2] ** 4 * np.sin(x[:, 0])
        return {"f": f}

    return evaluate


NAMES = ["x1", "x2", "x3", "unused"]


def test_equal_leading_indices_are_reported_not_resolved():
    v = V1 + A_EQUAL**2 / 8 + V13
    assert (V1 + V13) / v == pytest.approx((A_EQUAL**2 / 8) / v)  # the construction
    r = sobol_until_resolved(NAMES, _ishigami(A_EQUAL), key="f", max_evaluations=6 * 2048, seed=1)
    res = r["resolution"]
    assert not res["resolved"]
    assert set(res["ranked"][:2]) == {"x1", "x2"}
    assert r["evaluations"] == 6 * 2048  # the whole budget was spent trying
    assert "unused" in res["indistinguishable_from_zero"]


def test_distinct_indices_resolve_within_the_budget():
    r = sobol_until_resolved(NAMES, _ishigami(7.0), key="f", max_evaluations=6 * 4096, seed=1)
    res = r["resolution"]
    assert res["resolved"] and res["leader"] == "x1" and res["runner_up"] == "x2"
    assert res["ranked"] == ["x1", "x2", "x3"]
    assert res["indistinguishable_from_zero"] == ["unused"]
    assert r["evaluations"] < 6 * 4096  # stopped before spending it all


def test_resolution_rule():
    rows = [
        {"parameter": "a", "total_index": 0.6, "total_conf": 0.05},
        {"parameter": "b", "total_index": 0.4, "total_conf": 0.05},
        {"parameter": "c", "total_index": 0.02, "total_conf": 0.03},
    ]
    res = ranking_resolution(rows)
    assert res["resolved"] and res["indistinguishable_from_zero"] == ["c"]
    rows[1]["total_conf"] = 0.2
    assert not ranking_resolution(rows)["resolved"]
