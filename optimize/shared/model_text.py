"""Words for the model that produced a result: figure titles, JSON records, the report.

One place says what each ``[model]`` choice means, so that every output describes the
model that actually ran (:class:`wellwright.physics.stack.ModelOptions`).
"""

from __future__ import annotations

from dataclasses import asdict, fields

from wellwright.physics.stack import ModelOptions, Stack

__all__ = ["model_label", "model_record", "model_from_record", "model_assumptions"]


def model_label(stack: Stack | ModelOptions) -> str:
    """Short description of the transport and electrostatics model, for figure titles."""
    m = stack.model if isinstance(stack, Stack) else stack
    transport = "coherent" if m.transport == "coherent" else "+ scattering-assisted"
    if m.broadening_mev > 0:
        transport += f", {m.broadening_mev:g} meV broadening"
    bias = "linear drop" if m.electrostatics == "linear" else "self-consistent"
    return f"Tsu-Esaki {transport}, {bias}"


def model_record(stack: Stack | ModelOptions) -> dict:
    """The model as a JSON-ready record: its label and every ``[model]`` option."""
    m = stack.model if isinstance(stack, Stack) else stack
    return {"label": model_label(m), **asdict(m)}


def model_from_record(record: dict) -> ModelOptions:
    """The model a :func:`model_record` describes (its label and unknown keys ignored)."""
    names = {f.name for f in fields(ModelOptions)}
    return ModelOptions(**{k: v for k, v in record.items() if k in names})


TSU_ESAKI = "R. Tsu and L. Esaki, Appl. Phys. Lett. 22, 562 (1973)"
BUTTIKER = "M. Buttiker, IBM J. Res. Dev. 32, 63 (1988)"


def model_assumptions(model: ModelOptions) -> list[str]:
    """The model's assumptions and limits, one sentence each, for the model that ran."""
    items = []
    if model.transport == "coherent":
        items.append(
            "Transport is coherent and one-dimensional with the transverse momentum "
            f"conserved; the current is the Tsu-Esaki integral ({TSU_ESAKI}) with "
            "Fermi-Dirac supply in both contacts."
        )
    else:
        items.append(
            f"Current: the coherent Tsu-Esaki integral ({TSU_ESAKI}) plus a "
            "scattering-assisted channel through the well's lowest quasi-bound state: "
            f"Buttiker's virtual reservoir ({BUTTIKER}), with the transverse momentum "
            "relaxed by interface roughness (height "
            f"{model.roughness_height_nm:g} nm, correlation length "
            f"{model.roughness_length_nm:g} nm: literature defaults, no first-principles "
            "value) and LO-phonon emission and absorption (Frohlich coupling), so current "
            "keeps flowing through the state after it has dropped below the emitter band "
            "edge (the valley)."
        )
    items += [
        "Transmission by a transfer-type recursion with BenDaniel-Duke matching (Phys. Rev. "
        "152, 683 (1966)) and an energy-dependent (nonparabolic) mass.",
        "Gamma-valley band edges, masses, nonparabolicity and pseudomorphic strain from "
        "I. Vurgaftman, J. R. Meyer and L. R. Ram-Mohan, J. Appl. Phys. 89, 5815 (2001); X "
        "and L valleys are listed but carry no current.",
    ]
    if model.electrostatics == "linear":
        items.append(
            "The bias drops linearly between the contacts: no accumulation, depletion or "
            "well charge, so simulated peak voltages come out low against measured devices."
        )
    else:
        items.append(
            "Self-consistent electrostatics: Poisson's equation with ionised donors, "
            "Thomas-Fermi electrons in the contacts and a simple estimate of the charge "
            "stored in the well, so accumulation, depletion and well charge shift the peak "
            "to higher bias."
        )
    if model.transport == "coherent":
        items.append(
            "No scattering, phonon-assisted or interface-roughness current and no "
            "self-heating: valley currents come out far below measured ones and the PVCR "
            "far too high."
        )
    else:
        items.append(
            "Not modelled: X- and L-valley current, alloy and impurity scattering, "
            "scattering between well states, self-heating. The roughness sets much of the "
            "valley current: calibrate it against a measured valley current."
        )
    if model.broadening_mev > 0:
        items.append(
            f"A phenomenological broadening of {model.broadening_mev:g} meV is added to "
            "every resonance narrower than kT (area conserved)."
        )
    items.append(
        "Growth spreads (the study's [growth] table, and its source cells where given) are "
        "one-sigma figures; a fractional as-grown thickness is modelled as lateral islands of "
        "the two neighbouring whole monolayers, and a device's I-V as the area-weighted "
        "mixture of the whole-monolayer stacks' I-Vs (a mesa spans many islands)."
    )
    return items
