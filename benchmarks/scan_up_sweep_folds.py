"""Scan: where the up sweep's charged branch ends, against a brute-force scan of its equation.

Not a timing. The default model's sweep follows the charged branch of a bistable stack above
its peak (``physics.iv._up_branch``) and reports the window up to where that branch ends.
This checks the end on the stacks of ``tests/test_grid_convergence.py``'s four cases (the
218 of ``check_default_metrics.py`` without the six alone and the two examples: 192 stacks
in batches of 16, 61 biases): for each bistable one, the well-charge equation ``F(n) = n``
at the branch's last bias is scanned over 600 charges from 0 to twice the branch start's
charge (each charge its own Poisson solve and state search; no root search, no start, so no
path that could skip a root), and so every 0.25 mV past it until only one stable root is
left. A window whose branch holds 1 mV or more past its reported end is flagged. Measured
on 2026-12-05: 75 of 108 flagged before the continuation kept to the root nearest its start
(up to 11 mV short), 8 after, all 1-2 mV short on windows of 28-42 mV, where the fold
search's 12 steps end on a bracket that wide (three more end at the fold within the scan's
grid).

Run: ``python benchmarks/scan_up_sweep_folds.py`` (about half a minute).
"""

from __future__ import annotations

import sys
import warnings
from dataclasses import replace
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[1]
FLAG_V = 1e-3
STEP_V = 2.5e-4


def stable_roots(table, bias_v: float, top_cm2: float, n: int = 600) -> int:
    """How many times ``F(n) - n`` falls through zero over ``n`` charges up to ``top_cm2``."""
    from wellwright.physics.electrostatics import well_charge_residual_cm2

    sign = np.sign(well_charge_residual_cm2(table, bias_v, np.linspace(0.0, top_cm2, n))[0])
    return int(np.count_nonzero((sign[:-1] > 0) & (sign[1:] <= 0)))


def main() -> None:
    sys.path.insert(0, str(REPO / "tests"))
    from test_grid_convergence import CASES
    from wellwright.physics import iv

    branches: list = []  # (stacks, starts, windows, start charges) of each up-branch call
    follow = iv._up_branch

    def recorded(table, model, grid, v_start, v_after, j_after, v_end, *, peak, sign=1.0):
        out = follow(table, model, grid, v_start, v_after, j_after, v_end, peak=peak, sign=sign)
        branches.append((table, v_start.copy(), out[2].copy(), peak[1].well_sheet_cm2[:, 0]))
        return out

    iv._up_branch = recorded
    flagged = seen = 0
    warnings.simplefilter("ignore")  # grid-accuracy and X-valley warnings: not scanned here
    for case in sorted(CASES):
        table, bias, model = CASES[case]()
        model = replace(model, electrostatics="self-consistent", transport="scattering-assisted")
        bias = np.linspace(bias[0], bias[-1], 61)
        for first in range(0, table.n_stacks, 16):
            branches.clear()
            iv.sweep(table.take(slice(first, first + 16)), bias, model=model)
            for stacks, starts, windows, charges in branches:
                for k in np.nonzero(windows > 0)[0]:
                    seen += 1
                    one, end, top = (
                        stacks.take(slice(k, k + 1)),
                        starts[k] + windows[k],
                        2 * charges[k],
                    )
                    past = 0.0
                    while stable_roots(one, end + past + STEP_V, top) >= 2 and past < 0.05:
                        past += STEP_V
                    bad = stable_roots(one, end, top) < 2 and past == 0.0
                    flag = past >= FLAG_V
                    flagged += flag
                    print(
                        f"{case} batch {first}: start {starts[k]:.4f} V, window "
                        f"{1e3 * windows[k]:.2f} mV, the branch holds {1e3 * past:.2f} mV past "
                        f"its end{' (fold at the end within the scan)' if bad else ''}"
                        f"{'  <-- flagged' if flag else ''}"
                    )
    print(f"{flagged} of {seen} windows end {1e3 * FLAG_V:g} mV or more before the branch does")


if __name__ == "__main__":
    main()
