"""``wellwright calibrate``: fit the model to measured I-V sweeps and infer the as-grown stack."""

from __future__ import annotations

import json
import sys
from pathlib import Path

from wellwright.optimize.shared.outputs import json_ready


def register(sub) -> None:
    p = sub.add_parser(
        "calibrate",
        help="fit the model to measured I-V: as-grown stack, corrections, uncertainties",
        description="Fit the model to one or more measured I-V sweeps (CSV; format in "
        "studies/README.md): as-grown layer thicknesses, growth-rate factors, series resistance "
        "and the chosen model corrections, with 95 % intervals. Writes calibration.json, "
        "calibrated.toml, overlay.png, figures_of_merit.csv and calibration.html.",
    )
    p.add_argument("stack", help="the grown stack: a stack or study file without ranges (TOML)")
    p.add_argument(
        "--measured", action="append", required=True, metavar="FILE",
        help="measured sweep (CSV); repeat for several areas or temperatures",
    )  # fmt: skip
    p.add_argument(
        "--fit", action="append", metavar="NAME",
        help="parameter or group to fit (thickness, rate, x, doping, offset, model, resistance, "
        "default, or a name such as barrier1.thickness_ml); repeat; default: the default set",
    )  # fmt: skip
    p.add_argument(
        "--starts",
        type=int,
        default=2,
        metavar="K",
        help="at most K local fits, from the best whole-monolayer starts (a start far worse than "
        "the best is not fitted; default 2)",
    )
    p.add_argument(
        "--seed",
        type=int,
        default=0,
        metavar="S",
        help="seed of the fit's random starts (default 0; the same seed gives the same record)",
    )
    p.add_argument("--out", metavar="DIR", help="output folder (default: <stack name>_calibration)")
    p.add_argument("--json", action="store_true", help="print the calibration record as JSON")
    p.set_defaults(func=run)


def run(args) -> int:
    from wellwright.optimize.calibrate.run import bound_text, calibrate, write_outputs
    from wellwright.physics import checks
    from wellwright.physics.errors import InputError

    if not 1 <= args.starts <= 50:
        raise InputError(f"{args.starts} outside [1, 50]", key="--starts")
    checks.seed(args.seed, key="--seed")
    out = Path(args.out) if args.out else Path(f"{Path(args.stack).stem}_calibration")

    def say(msg: str) -> None:
        if not args.json:
            print(f"  {msg}", file=sys.stderr, flush=True)

    problem, result, record = calibrate(
        args.stack, args.measured, fit=args.fit, starts=args.starts, seed=args.seed, progress=say
    )
    write_outputs(out, problem, result, record)
    if args.json:
        json.dump(json_ready(record), sys.stdout, indent=2)
        print()
        return 0
    print(
        f"{args.stack}: {len(problem.measurements)} measured sweep(s), {record['residual']['points']} points"
    )
    for p in record["parameters"]:
        print(
            f"  {p['name']:32s} {p['value']:12.5g}  ({p['ci_low']:.5g} to {p['ci_high']:.5g}) {p['unit']}   nominal {p['nominal']:.5g}{bound_text(p)}"
        )
    for note in record["identifiability"]:
        print(f"  note: {note['text']}")
    print(f"  {record['grower']}")
    print(f"  results in {out}/ (calibration.html, calibrated.toml)")
    return 0
