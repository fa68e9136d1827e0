"""Scan: the default model's figures of merit on a coarse and a fine bias grid, random stacks.

Not a timing. Draws stacks with ``tests/test_grid_random_stacks.py``'s ``random_stack``
(every material system, 4-400 K, both polarities; invented scenarios), sweeps each with the
default model over 0 to 0.3-2 V of one polarity on 61 and on 241 biases, and prints the
stacks whose figures differ beyond the issue's tolerances (Jp 1 % or Vp 5 mV; where the
peaks agree, Jv 1 % or Vv 5 mV), with their layers. DEVELOPERS.md (known gaps) says what
the flagged kinds are; the scans of 2026-12-04 used seeds 110-115, 60 stacks each.

Run: ``python benchmarks/scan_grid_independence.py SEED [N_STACKS]`` (about a minute per 60
stacks on one core).
"""

from __future__ import annotations

import argparse
import sys
import warnings
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[1]
KEYS = (
    "peak_current_density_a_cm2",
    "peak_voltage_v",
    "valley_current_density_a_cm2",
    "valley_voltage_v",
)
J_RTOL, V_ATOL = 0.01, 5e-3


def _figures(stack, bias) -> np.ndarray:
    from wellwright.physics.iv import sweep

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # grid-accuracy and X-valley warnings: not scanned here
        m = sweep(stack.table(), bias, model=stack.model).metrics_of(0)
    return np.array([np.nan if m.get(k) is None else m[k] for k in KEYS])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("seed", type=int)
    parser.add_argument("n_stacks", type=int, nargs="?", default=60)
    args = parser.parse_args()
    sys.path.insert(0, str(REPO / "tests"))
    from test_default_model_scan import _default_model, _describe
    from test_grid_random_stacks import random_stack

    rng = np.random.default_rng(args.seed)
    flagged = 0
    for i in range(args.n_stacks):
        stack = _default_model(random_stack(rng))
        top = rng.uniform(0.3, 2.0)
        sign = -1.0 if rng.random() < 0.5 else 1.0
        coarse, fine = (
            _figures(stack, np.sort(sign * np.linspace(0.0, top, n))) for n in (61, 241)
        )
        if not np.all(np.isfinite(np.concatenate([coarse, fine]))) or abs(fine[0]) <= 1.0:
            continue  # no NDR on one grid, or currents below 1 A/cm^2
        peak_off = abs(coarse[0] / fine[0] - 1) > J_RTOL or abs(coarse[1] - fine[1]) > V_ATOL
        valley_off = abs(coarse[2] / fine[2] - 1) > J_RTOL or abs(coarse[3] - fine[3]) > V_ATOL
        if peak_off or valley_off:
            flagged += 1
            print(
                f"seed {args.seed} stack {i}: {_describe(stack)}, {sign * top:+.2f} V: "
                f"Jp {coarse[0]:.4g}/{fine[0]:.4g} A/cm^2, Vp {coarse[1]:.4f}/{fine[1]:.4f} V, "
                f"Jv {coarse[2]:.4g}/{fine[2]:.4g}, Vv {coarse[3]:.4f}/{fine[3]:.4f} "
                f"(61/241 biases)",
                flush=True,
            )
    print(f"seed {args.seed}: {flagged} of {args.n_stacks} stacks flagged")


if __name__ == "__main__":
    main()
