"""Scan: the self-consistent solves' well charges against a brute-force scan of their equation.

Not a timing. Two checks, each against ``well_charge_residual_cm2`` (the well-charge equation
``F(n) = n`` over a grid of charges, each charge its own Poisson solve and state search; no
root search, no start, so no path that could skip a root).

``folds``: the default model's sweep follows the charged branch of a bistable stack above
its peak (``physics.iv._up_branch``) and reports the window up to where that branch ends.
This checks the end on the stacks of ``tests/test_grid_convergence.py``'s four cases (the
218 of ``check_default_metrics.py`` without the six alone and the two examples: 192 stacks
in batches of 16, 61 biases): for each bistable one, the well-charge equation ``F(n) = n``
at the branch's last bias is scanned over 600 charges from 0 to twice the branch start's
charge (each charge its own Poisson solve and state search; no root search, no start, so no
path that could skip a root), and so every 0.25 mV past it until only one stable root is
left. A window whose branch holds 1 mV or more past its reported end is flagged. Measured
on 2026-12-05: 75 of 108 flagged before the continuation kept to the root nearest its start
(up to 11 mV short); 8 after it (1-2 mV short on windows of 28-42 mV, where the fold search's
12 steps ended on a bracket that wide, having stepped past known falls again); none since
the fold search halves its bracket (the farthest, an as-grown InP stack whose charged root
past 0.4718 V is a jump of ``F``, 0.75 mV; none once a continued solve settles on such a
jump).

``folds SEED N``: the same check on ``N`` random stacks (``random_stack``, every system, both
polarities, 61 biases from 0 to 0.3-2 V, as ``scan_grid_independence.py`` draws them), each
alone. A window that reaches the last bias computed, where the search stops, is labelled and
not flagged. Measured on 2026-12-05, seeds 1-8 (40 stacks each): 58 bistable windows, none
flagged; 6 of them end past their valley (4-166 mV), where the search stopped until it went
on past the valley (2 to more than 50 mV short then).

``cold SEED N``: the single (cold) solves of ``N`` random stacks (``tests/test_grid_random_stacks.py``'s
``random_stack``, the default model, 61 biases from 0 to 0.3-2 V of one polarity, as
``scan_grid_independence.py`` draws them): at every bias where the equation has two or more
stable roots, whether the cold solve is the least one (the single solves' convention: the
down sweep's branch; DEVELOPERS.md). Measured on 2026-12-05, seeds 1-3 (140 stacks): 157 of
158 such entries are (the other, a GaAsSb/AlAsSb stack at 6 K, seed 3 stack 59, took a
charge of 4.7e11 where the least is 2.9e11 cm^-2).

Run: ``python benchmarks/scan_charge_roots.py folds`` (about half a minute);
``python benchmarks/scan_charge_roots.py folds 1 40`` (about a minute);
``python benchmarks/scan_charge_roots.py cold 1 60`` (about two minutes).
"""

from __future__ import annotations

import sys
import warnings
from dataclasses import replace
from pathlib import Path

import numpy as np
from wellwright.physics.electrostatics import well_charge_residual_cm2

REPO = Path(__file__).resolve().parents[1]
FLAG_V = 1e-3
STEP_V = 2.5e-4


def stable_roots_cm2(table, bias_v: float, charge_cm2: np.ndarray) -> np.ndarray:
    """The charges of ``charge_cm2`` after which ``F(n) - n`` falls through zero (the stable
    roots, to the grid's spacing), cm^-2."""
    sign = np.sign(well_charge_residual_cm2(table, bias_v, charge_cm2)[0])
    return charge_cm2[np.nonzero((sign[:-1] > 0) & (sign[1:] <= 0))[0]]


def stable_roots(table, bias_v: float, top_cm2: float, n: int = 600) -> int:
    """How many stable roots over ``n`` charges up to ``top_cm2``."""
    return stable_roots_cm2(table, bias_v, np.linspace(0.0, top_cm2, n)).size


def _record_branches(iv) -> list:
    """Make ``iv._up_branch`` append (stacks, starts, windows, start charges, sign, last biases
    computed) of each call to the returned list."""
    branches: list = []
    follow = iv._up_branch

    def recorded(table, model, grid, v_start, v_after, j_after, v_ends, *, peak, sign=1.0):
        out = follow(table, model, grid, v_start, v_after, j_after, v_ends, peak=peak, sign=sign)
        charges = np.abs(peak[1].well_sheet_cm2[:, 0])
        branches.append((table, v_start.copy(), out[2].copy(), charges, sign, v_ends[1].copy()))
        return out

    iv._up_branch = recorded
    return branches


def _windows_flagged(label: str, branches: list) -> tuple[int, int]:
    """Check every bistable window of ``branches`` against the scan (module docstring);
    prints one line each. Returns (windows seen, flagged). A window that reaches the last bias
    computed (where the search stops by design) is not flagged."""
    seen = flagged = 0
    for stacks, starts, windows, charges, sign, ends in branches:
        for k in np.nonzero(windows > 0)[0]:
            seen += 1
            one, end, top = stacks.take(slice(k, k + 1)), starts[k] + windows[k], 2 * charges[k]
            past = 0.0
            while stable_roots(one, sign * (end + past + STEP_V), top) >= 2 and past < 0.05:
                past += STEP_V
            bad = stable_roots(one, sign * end, top) < 2 and past == 0.0
            at_end = end >= ends[k] - 1e-9
            flag = past >= FLAG_V and not at_end
            flagged += flag
            print(
                f"{label}: start {sign * starts[k]:+.4f} V, window "
                f"{1e3 * windows[k]:.2f} mV, the branch holds {1e3 * past:.2f} mV past "
                f"its end{' (fold at the end within the scan)' if bad else ''}"
                f"{' (the last bias computed: the search ends there)' if at_end else ''}"
                f"{'  <-- flagged' if flag else ''}",
                flush=True,
            )
    return seen, flagged


def folds() -> None:
    """The ``folds`` check (module docstring)."""
    from test_grid_convergence import CASES
    from wellwright.physics import iv

    branches = _record_branches(iv)
    flagged = seen = 0
    warnings.simplefilter("ignore")  # grid-accuracy and X-valley warnings: not scanned here
    for case in sorted(CASES):
        table, bias, model = CASES[case]()
        model = replace(model, electrostatics="self-consistent", transport="scattering-assisted")
        bias = np.linspace(bias[0], bias[-1], 61)
        for first in range(0, table.n_stacks, 16):
            branches.clear()
            iv.sweep(table.take(slice(first, first + 16)), bias, model=model)
            counts = _windows_flagged(f"{case} batch {first}", branches)
            seen, flagged = seen + counts[0], flagged + counts[1]
    print(f"{flagged} of {seen} windows end {1e3 * FLAG_V:g} mV or more before the branch does")


def folds_random(seed: int, n_stacks: int) -> None:
    """The ``folds SEED N`` check (module docstring): random stacks, each alone."""
    from test_default_model_scan import _default_model
    from test_grid_random_stacks import random_stack
    from wellwright.physics import iv

    branches = _record_branches(iv)
    rng = np.random.default_rng(seed)
    flagged = seen = 0
    warnings.simplefilter("ignore")
    for i in range(n_stacks):
        stack = _default_model(random_stack(rng))
        top, sign = rng.uniform(0.3, 2.0), -1.0 if rng.random() < 0.5 else 1.0
        branches.clear()
        iv.sweep(stack.table(), np.sort(sign * np.linspace(0.0, top, 61)), model=stack.model)
        counts = _windows_flagged(f"seed {seed} stack {i}", branches)
        seen, flagged = seen + counts[0], flagged + counts[1]
    print(f"seed {seed}: {flagged} of {seen} windows end {1e3 * FLAG_V:g} mV or more early")


def cold(seed: int, n_stacks: int) -> None:
    """The ``cold`` check (module docstring)."""
    from test_default_model_scan import _default_model, _describe
    from test_grid_random_stacks import random_stack
    from wellwright.physics.electrostatics import solve_self_consistent

    rng = np.random.default_rng(seed)
    seen = missed = 0
    for i in range(n_stacks):
        stack = _default_model(random_stack(rng))
        top, sign = rng.uniform(0.3, 2.0), -1.0 if rng.random() < 0.5 else 1.0
        table, bias = stack.table(), sign * np.linspace(0.0, top, 61)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            charge = solve_self_consistent(table, bias)[1].well_sheet_cm2[0]
        if np.nanmax(charge) < 1e9:
            continue
        grid = np.linspace(0.0, 2.5 * np.nanmax(charge), 500)
        for v, n in zip(bias, charge, strict=True):
            roots = stable_roots_cm2(table, v, grid)
            if roots.size < 2:
                continue
            seen += 1
            if n > roots[0] + 2 * grid[1] + 1e-3 * n:
                missed += 1
                print(
                    f"stack {i}, {v:.3f} V: cold {n:.3g}, least {roots[0]:.3g} cm^-2; {_describe(stack)}"
                )
    print(f"seed {seed}: {missed} of {seen} entries with two or more stable roots not the least")


def main() -> None:
    sys.path.insert(0, str(REPO / "tests"))
    args = sys.argv[1:]
    if args == ["folds"]:
        folds()
    elif args[:1] == ["folds"] and len(args) == 3:
        folds_random(int(args[1]), int(args[2]))
    elif args[:1] == ["cold"] and len(args) == 3:
        cold(int(args[1]), int(args[2]))
    else:
        raise SystemExit("usage: scan_charge_roots.py folds [SEED N_STACKS] | cold SEED N_STACKS")


if __name__ == "__main__":
    main()
