"""X and L valleys of a stack under bias: their edges, and where the Gamma-only model may miss current.

The transport (:mod:`physics.transmission`, :mod:`physics.current`) follows
the Gamma valley only. In an indirect barrier (AlAs, AlSb, AlGaAs above
x of about 0.4) the X minimum lies below the Gamma edge; once bias pulls the
X edge of a barrier below the emitter's Fermi level, electrons can cross
through X states (Gamma-X mixing at the interfaces, X-valley tunnelling),
which adds valley current the model does not compute. This module gives the
X and L edges on the slices of a band profile (for the band diagram) and
names the barriers whose X edge lies below the emitter Fermi level plus a
few kT at a bias, so a user is told where the model leaves current out.

The X and L edges follow the electrostatic potential of the Gamma profile
(the same potential shifts every valley) and carry no strain shift (see
:func:`physics.materials.material_parameters`).

References
----------
.. [1] I. Vurgaftman, J. R. Meyer and L. R. Ram-Mohan, J. Appl. Phys. 89,
   5815 (2001) (X and L gaps and bowing).
.. [2] H. C. Liu, "Resonant tunneling through single layer heterostructures",
   Appl. Phys. Lett. 51, 1019 (1987) (Gamma-X transfer at GaAs/AlAs
   interfaces; citation from memory).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .bands import Profile
from .constants import BOLTZMANN_EV_K
from .current import contact_fermi_levels_ev
from .electrostatics import BARRIER_EV
from .iv import band_profile
from .stack import Stack

__all__ = [
    "X_VALLEY_MARGIN_KT",
    "XValleyIssue",
    "indirect_edges_ev",
    "x_valley_issues",
    "x_valley_message",
]

#: The X edge of a barrier counts as reachable below the emitter Fermi level plus this many kT.
X_VALLEY_MARGIN_KT = 3.0


@dataclass(frozen=True)
class XValleyIssue:
    """A barrier whose X edge lies within reach of the emitter's electrons at a bias."""

    layer: int  #: layer number counted from 1 (the emitter contact is layer 1)
    name: str
    label: str  #: trade notation of the material
    clearance_ev: float  #: lowest X edge in the layer minus the emitter Fermi level, eV


def indirect_edges_ev(stack: Stack, profile: Profile) -> tuple[np.ndarray, np.ndarray]:
    """X and L edges on the slices of a one-stack, one-bias profile, eV from the emitter's Gamma edge.

    ``profile`` is a :class:`physics.bands.Profile` of ``stack`` with no batch
    axes (e.g. ``band_profile(...).take((0, 0))``). The electrostatic
    potential is the profile's edge minus each layer's own Gamma offset; the
    X and L edges are that potential plus each layer's X and L offsets from
    the emitter's Gamma edge. NaN on custom-material layers (no X or L edge).

    Parameters
    ----------
    stack
        The stack the profile was computed for.
    profile
        Its band profile at one bias, no batch axes.
    """
    gamma = np.array([layer.conduction_band_ev for layer in stack.layers])
    li = profile.layer_index
    potential = np.asarray(profile.edge_ev) - (gamma - gamma[0])[li]

    def edges(attr: str) -> np.ndarray:
        values = [getattr(layer, attr) for layer in stack.layers]
        offset = np.array([np.nan if v is None else v for v in values], float) - gamma[0]
        return potential + offset[li]

    return edges("x_valley_ev"), edges("l_valley_ev")


def x_valley_issues(
    stack: Stack, bias_v: float, *, margin_kt: float = X_VALLEY_MARGIN_KT
) -> list[XValleyIssue]:
    """Barriers whose X edge lies below the emitter Fermi level plus ``margin_kt`` kT at ``bias_v``.

    A barrier is a layer between the contacts whose Gamma edge lies more than
    :data:`physics.electrostatics.BARRIER_EV` above the emitter's. The band
    profile is that of the stack's own electrostatics model.

    Parameters
    ----------
    stack
        One validated stack (its own model options apply).
    bias_v
        Bias, V.
    margin_kt
        How far above the emitter Fermi level an X edge still counts, in kT.
    """
    table = stack.table()
    profile = band_profile(table, [bias_v], model=stack.model).take((0, 0))
    x_edge, _ = indirect_edges_ev(stack, profile)
    mu_emitter = float(contact_fermi_levels_ev(table)[0][0])
    kt = BOLTZMANN_EV_K * stack.temperature_k
    emitter = stack.layers[0].conduction_band_ev
    issues = []
    for index, layer in enumerate(stack.layers[1:-1], start=1):
        if layer.x_valley_ev is None or layer.conduction_band_ev <= emitter + BARRIER_EV:
            continue
        lowest = float(np.min(x_edge[profile.layer_index == index]))
        if lowest < mu_emitter + margin_kt * kt:
            issues.append(XValleyIssue(index + 1, layer.name, layer.label, lowest - mu_emitter))
    return issues


def x_valley_message(issues: list[XValleyIssue], bias_v: float, *, where: str = "") -> str:
    """One plain line naming the barriers of ``issues`` (empty string when there are none).

    Parameters
    ----------
    issues
        The barriers found by :func:`x_valley_issues`.
    bias_v
        The bias they were found at, V (named in the line).
    where
        Prefix naming the stack or design, e.g. a file name.
    """
    if not issues:
        return ""
    names = ", ".join(
        f"layer {i.layer} '{i.name}' ({i.label}, {i.clearance_ev * 1e3:+.0f} meV)" for i in issues
    )
    return (
        f"X-valley edge below the emitter Fermi level + {X_VALLEY_MARGIN_KT:g} kT at "
        f"{bias_v:.3f} V{where} in {names}: current through X states is not modelled, "
        "so the valley current may be underestimated"
    )
