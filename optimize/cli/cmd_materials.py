"""``wellwright materials``: the material parameter table at a temperature."""

from __future__ import annotations

import json
import sys

from wellwright.physics import materials
from wellwright.physics.errors import InputError

COLUMNS = (
    ("material", "{}"),
    ("lattice_nm", "{:.5f}"),
    ("gap_ev", "{:.4f}"),
    ("conduction_band_ev", "{:.4f}"),
    ("x_valley_ev", "{:.4f}"),
    ("l_valley_ev", "{:.4f}"),
    ("lowest_valley", "{}"),
    ("mass_m0", "{:.4f}"),
    ("nonparabolicity_per_ev", "{:.3f}"),
    ("monolayer_nm", "{:.4f}"),
    ("permittivity_r", "{:.2f}"),
)


def register(sub) -> None:
    p = sub.add_parser(
        "materials",
        help="material parameter table",
        description="Print the built-in material parameters (unstrained) at a temperature, with sources.",
    )
    p.add_argument(
        "--temperature-k",
        type=float,
        default=300.0,
        metavar="K",
        help="temperature (default 300 K)",
    )
    p.add_argument("--json", action="store_true", help="print JSON")
    p.set_defaults(func=run)


def run(args) -> int:
    if not 1.0 <= args.temperature_k <= 1000.0:
        raise InputError(f"{args.temperature_k:g} outside [1, 1000] K", key="--temperature-k")
    rows = materials.material_table(args.temperature_k)
    if args.json:
        json.dump(rows, sys.stdout, indent=2)
        print()
        return 0
    names = [c for c, _ in COLUMNS]
    widths = [max(len(n), 12) for n in names]
    print("  ".join(n.rjust(w) for n, w in zip(names, widths)))
    for row in rows:
        print("  ".join(f.format(row[n]).rjust(w) for (n, f), w in zip(COLUMNS, widths)))
    print(
        f"\nconduction_band_ev: Gamma edge on the common valence-band-offset scale at {args.temperature_k:g} K"
        " (with strain in a stack); x_valley_ev, l_valley_ev: X and L edges on the same scale, unstrained."
        "\nThe current is computed in the Gamma valley only: X and L valleys carry none in the model."
    )
    for row in rows:  # the same rule refuses a stack at this temperature
        if row["gap_ev"] <= 0.0:
            print(
                f"{row['material']}: no band gap at {args.temperature_k:g} K (its Varshni fit "
                "extrapolated past its use): a stack with it is refused at this temperature"
            )
    sources = sorted({row.get("source", "") for row in rows} - {""})
    for s in sources:
        print(f"source: {s}")
    return 0
