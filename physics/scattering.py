"""Scattering-assisted (sequential) current through the well's quasi-bound states.

Beside the coherent Tsu-Esaki current (:mod:`physics.current`), electrons
reach the collector through a quasi-bound state of the well after being
scattered there. This module adds that channel; with no scattering it adds
nothing and the coherent current is returned unchanged.

Model
-----
Each quasi-bound state ``n`` (a line of the coherent ``T(E)``) is a single
level in the Breit-Wigner picture [1]_ with tunnelling widths ``Gamma_L(E)``
to the emitter and ``Gamma_R`` to the collector. Scattering in the well is
represented by Buttiker's virtual reservoir attached to the state [2]_: the
state gains a scattering width ``Gamma_s`` beside ``Gamma = Gamma_L + Gamma_R``,
the coherent part of the transmission through it becomes

    T_coh(E) = Gamma_L Gamma_R / ((E - E_n)^2 + (Gamma_t / 2)^2),
    Gamma_t = Gamma + Gamma_s,

and electrons scattered into the reservoir leave it to either contact. The
reservoir draws no net current at any energy (particle conservation), which
fixes its occupation ``f_w``; for constant widths the total (coherent plus
sequential) current is the coherent one with its area conserved [2]_, [3]_.

Departures from [2]_, each stated:

1. *Transverse momentum.* In [2]_ the reservoir re-emits at the same
   longitudinal energy. Here, as in the sequential-tunnelling picture [4]_,
   [5]_, interface roughness breaks the conservation of transverse momentum:
   an emitter electron of total energy ``E`` and any longitudinal energy
   ``z <= E`` can enter the state, giving ``E - z`` to lateral motion. The
   emitter's coupling to the reservoir at total energy ``E`` is then
   ``g_L(E) = int_0^E Gamma_L(z) Gamma_s K(z) dz`` and the collector's
   ``g_R(E) = int_{E_C}^E Gamma_R Gamma_s K(z) dz``, where ``K`` is the
   state's spectral weight (below). The current at total energy ``E`` is
   ``g_L g_R / (g_L + g_R) (f_L - f_R)`` when only elastic scattering acts:
   Buttiker's series form [2]_ with cumulative couplings. This is what
   carries current after the state has dropped below the emitter band edge
   (the valley): ``Gamma_L(z)`` at the emitter's energies ``z >= 0`` stays
   finite although the state sits below them.
2. *Spectral weight.* ``K(z) = 1/((z - E_n)^2 + (Gamma_t/2)^2) + 1/eps_n^2``:
   the Lorentzian of the single-level model plus a non-resonant floor. Far
   from resonance the emitter state's amplitude at the barrier's inner
   interface does not keep falling like the Lorentzian tail; it is its
   evanescent tail through the barrier (Fabry-Perot factor of order one).
   Fermi's golden rule for a Gaussian-correlated roughness [6]_ between that
   amplitude and the well state, compared with ``Gamma_L`` through the same
   barrier (thick rectangular barrier, ground state of a deep well, equal
   masses; derived for this module, not from a publication), gives
   ``eps_n^2 = 16 e_k e_w^3 / (pi^2 (e_w + e_k)^2)`` with ``e_w`` the state's
   kinetic energy in the well, ``<E_n - U>`` over its ``|psi|^2`` there (the band edge
   of a flat well's bottom below ``E_n``; until 2026-12-05 the width-weighted mean edge
   of the slices where the state is classically allowed, which stepped with the bias,
   :func:`_kinetic_ev`) and ``e_k`` the emitter barrier's height above
   it (tens of meV). The floor is applied with half the roughness width (the
   source-side interface only; the phonon term below takes a floor of its own,
   note 3) and only where the state exists at the electron's total
   energy (weight ``1/2 + atan(2 (E - E_n)/Gamma_t)/pi``). An emitter electron of
   longitudinal energy ``z`` entering the state by roughness scattering gains
   ``z - E_n`` of lateral energy, a momentum ``q`` with
   ``hbar^2 q^2 / 2 m_w = z - E_n`` (small initial lateral momentum), weighted by
   the Gaussian correlation's ``exp(-q^2 Lambda^2 / 4)`` [6]_.
3. *Polar-optical phonons.* A second reservoir coupling with energy loss
   ``hbar w_LO`` (Buttiker's energy-relaxing reservoir [2]_, [7]_): an
   electron of total energy ``E + hbar w`` enters the state at ``E`` by
   emitting a phonon (rate ``(N + 1) Gamma_LO``), the reverse by absorption
   (``N Gamma_LO``), with ``N`` the Bose occupation. These are off-resonant
   transitions between the emitter's states and the well's (the sequential
   picture of [4]_, [5]_): the emitter electron of longitudinal
   energy ``z`` is in the well through its non-resonant amplitude (a floor
   ``1/eps_b^2``, :func:`bulk_floor2_ev2`, applied with the full rate) and lands at longitudinal
   ``z - hbar w``, taking the lateral momentum ``q`` with
   ``hbar^2 q^2 / 2 m_w = |z - hbar w - E_n|`` (small initial lateral momentum, as
   for roughness). Frohlich's ``1/(q^2 + q_z^2)`` summed over the phonon's ``q_z``
   with the form factor of the state's ``|psi|^2``, whose cut-off is about ``q_w``
   (``hbar^2 q_w^2 / 2 m_w = e_w``), is ``pi/q`` for ``q << q_w`` (the 2-D final
   states' ``1/q``) and ``2 pi int |psi|^4 / q^2`` beyond (``3 pi / (w q^2)`` in a deep
   well, ``q_w = pi/w``); the landing weight :func:`lo_landing_weight` is the
   interpolation ``(pi/2) / (r (1 + pi r / 3))`` of those limits, ``r = q/q_w``
   (``r^2`` takes ``Gamma_t/2`` beside the mismatch, the state's own spread); with
   note 5's rate it is within 16 % of the golden rule computed by quadrature on finite
   wells of 3 to 20 nm (tested). Until 2026-12-04 it was ``(pi/2) / (r (1 + pi r / 2))``
   with the bulk rate (note 5). Emission is strongest where ``z = E_n + hbar w``: the phonon
   replica [8]_, a second cliff of the current one phonon energy of the state's
   descent after the main one (tested). Electrons within the state's line are
   the coherent current's: a phonon they emit or absorb there relaxes them
   within the state and leaves where they exit unchanged to first order, so the
   line enters neither these couplings nor the coherent reduction (note 5).
   The Frohlich coupling acts over the whole well, so the floor is the bulk one:
   the lowest density in the well of an off-resonant scattering state against its
   peak, ``T^2 / 16`` in a Fabry-Perot resonator of weak mirrors whose line is
   ``Gamma = T e_w / pi`` wide, so ``eps_b = 2 e_w / pi`` (derived for this module).
   With the Lorentzian it is within x3 of the exact weight (``int |psi_n|^2 |chi|^2``
   of an emitter scattering state ``chi``, over the emitter barrier's own
   transmission) 20-60 meV above the state on flat double barriers of 3-16 nm wells
   (tested). Until 2026-12-04 the entry took note 2's interface floor, whose
   ``e_w^3 / e_k`` overstates that weight 3-20 times on wells of 12 nm and more
   (the interface is where roughness acts, and where the state's own density is
   small): the replica of a 12.3 nm In0.53Ga0.47As well at 37 K was as high as the
   main peak (now 0.14 of it, tested). The change lowered the default model's
   valley current by 31 % and raised its PVCR by 41 % (medians over the 218 stacks
   of ``benchmarks/check_default_metrics.py``; Jp -2 %). Still left out: the
   Lorentzian's own tail, which is the exact weight one phonon energy above a narrow
   well's state (several times the floor there); counting it beside the coherent
   line needs the line's width to take ``Gamma_LO`` where emission is possible
   (Buttiker's sum rule), not done.
   Until 2026-12-03 the entry also took the line (``K`` about ``E_n`` at ``z``),
   the absorption width narrowed the coherent line with no matching entry and
   the weight was ``1/(1 + |z - hbar w - E_n| / e_w)``: the first two partly
   cancelled on the examples (phonons raised Jp by 5.6 % on the InP one and
   10.8 % on the GaAs one), not where the line is narrow: lowering the roughness
   of an InGaAs/AlAs stack from 0.3 to 0.05 nm raised its Jp by 61 % at 4.2 K
   (now 30 %) and at 300 K gave a PVCR of 1.2 (now 24); and the replica showed
   three times fainter. Pauli
   blocking of the state is kept for these terms, so the equilibrium
   occupation is a Fermi function (detailed balance, tested). Exits from the
   well by phonon emission are not modelled (in the valley the elastic exit
   to the collector dominates).
4. *Widths.* ``Gamma_R`` and ``Gamma_L`` at ``E_n`` come from the line's
   peak and width: ``T_p = 4 Gamma_L Gamma_R / Gamma^2`` has two roots. On the probe's
   line (below) the larger goes to the lead whose barrier is the more transparent by a WKB
   estimate [9]_, with a share ``1 / (1 + (tau_R / tau_L)^6)`` of the larger-to-the-emitter
   assignment, the two mixed geometrically (the product ``Gamma_L Gamma_R``, so ``T_p``, kept;
   this project's choice: where the two estimates are within about 30 % of each other they do
   not decide; until 2026-12-04 they decided outright, and where they crossed while the roots
   differed 4.4 times the current fell 3.2 times in one 5 mV step, an InGaAs/AlAs stack,
   tested). On a device line matched to a probe state the root nearer the probe's
   ``Gamma_R`` goes to the collector (the two profiles differ on the source side only),
   the two assignments mixed as sharply as the WKB share where that width lies near the
   roots' geometric mean (chosen outright until 2026-12-04: the current fell 13 % in 0.5 mV
   where it passed between roots of 5.9 and 10 meV, an InP/InAlAs stack, tested).
   A matched line's width and peak are the device's ``T`` at its centre and at its
   half-maximum points, as the probe's are; until 2026-12-04 they were the coherent line
   search's fit, whose width on lines 15-25 meV wide moved 10 % (and whose peak went to
   its clipped 1.0) where the fit's start crossed a coarse node, and the current stepped
   8-15 % in 0.2 mV (two stacks, tested). Until 2026-12-04 the WKB rule decided on device lines
   too: as a state behind the thinner barrier neared the emitter edge, where its
   ``Gamma_L`` vanishes, the larger root went to the emitter, ``Gamma_R`` fell 30 times
   and the current dipped 3 times (an InGaAs/AlAsSb stack, tested). A state below the
   emitter band edge does not show in the device's ``T(E)``; it is found in a copy of the
   profile whose emitter side (every slice before the first barrier) is
   lowered to the collector's band edge. ``Gamma_L(z)`` away from ``E_n``
   follows the emitter barrier's WKB transparency with the interface factor
   ``4 (k/m)(kappa/m_b) / ((k/m)^2 + (kappa/m_b)^2)`` of the wave number ``k``
   next to the barrier, where an accumulation layer lowers the band edge below the
   emitter's (WKB through the layer), times the step factor ``4 k_0 k / (k_0 + k)^2``
   of the emitter's own wave number ``k_0`` (a sharp step's transmission, a textbook
   result, from memory: it keeps ``Gamma_L`` vanishing at the emitter band edge and is
   1 without a layer). Until 2026-12-03 ``k`` was the emitter's ``k_0``; the scale that
   the device's own line then gave rose 2.5 to 6 times as a state neared the emitter
   edge, against the probe's, and inflated the peak current there (a test compares the
   two scales). Near the edge the device line's width no longer follows ``tau_L``'s wave
   number: the scale ``Gamma_L / tau_L`` a matched line gives is mixed geometrically with
   the probe line's, with the weight ``1 - exp(-(E_n - w) / (kT + Gamma_t / 2))`` on the
   device's (0 below ``w``, the larger of the probe's and the line's widths, the matching
   threshold: so the weight is 0 where the line stops being matched): the line's own scale
   counts where the energies the channel samples about the state (the supply's ``kT``, the
   line's half width) lie above the edge (this project's choice; the probe's scale is set
   where the lowered emitter's ``k`` is large). Until
   2026-12-04 the device line's scale was taken alone wherever the line was matched: on an
   InAs/AlSb stack (12.4 nm well, 361 K) it rose from 0.71 at 13 meV above the edge to 3.22
   at 0.42 meV, against the probe's 0.66 just below, and the current spiked to 3.8 times
   the coherent one at one bias between 2.3 and 10 times (tested); then, the same day,
   the weight took ``kT`` alone: on a GaAs/AlAs stack (2.7 nm well, 53 K, a roughness
   width of 0.14 eV) the line's scale, 0.02 against the probe's 0.33 8 meV above the edge,
   held until a few meV from it and the current rose 14 times in 15 mV (tested). The
   matched line's drain width is mixed with the probe's by the same weight (until
   2026-12-04 the line's own: 2.4 meV above the edge of a GaAs/AlGaAs stack neither of its
   roots was near the probe's drain width, the nearer one flipped between neighbouring
   biases and the current spiked 1.24 times; tested). Until later that day the weight
   counted ``E_n`` from the edge, not from the matching threshold: it was 0.29 where a 15 meV
   wide line stopped being matched, and the current stepped 1.58 times (an InGaAs/AlAs
   stack with 3 ML barriers; tested; 1.13 now, from the line's own width in the coherent
   part). ``Gamma_R`` is held constant across the line.
5. *Rates.* ``Gamma_s = Gamma_IFR``: the state's width in the coherent
   reduction and the Lorentzian of the elastic couplings is the roughness
   width alone, the one whose entries match it (note 3). Interface roughness, both
   interfaces, Gaussian correlation [6]_:
   ``Gamma_IFR = pi m_w Delta^2 Lambda^2 F sum_i (dE_n/dz_i)^2 / hbar^2``
   with ``F = exp(-x) I0(x)``, ``x = m_w k_B T Lambda^2 / hbar^2`` (angle average at a
   thermal lateral energy). ``dE_n/dz_i`` is the level's shift per displacement of
   interface ``i`` (a roughness of height ``Delta`` moves the level locally by
   ``Delta dE_n/dz_i``, the matrix element of [6]_, which takes it as ``dE_n/dw``): by the
   Hellmann-Feynman theorem for the BenDaniel-Duke Hamiltonian
   ``|psi_n(z_i)|^2 [(E_n - U_w) + (m_w/m_b)(U_b - E_n)]`` (``U``, ``m`` of the well's
   and the barrier's slices at the interface; ``V_i |psi_n(z_i)|^2`` for equal masses),
   with ``psi_n`` shot through the well's slices at ``E_n``; checked against the
   derivative of a finite well's exact level and of a well with an insert (tests). Until
   2026-12-04 ``2 e_w / w_eff`` (``w_eff = w + 1/kappa_1 + 1/kappa_2``), a box's
   ``dE/dw`` that ignores the mass step and the well's shape: at zero bias on the
   reference devices it overstated the width 1.1 (GaAs/AlGaAs) to 2.8 times
   (In0.53Ga0.47As/AlAs with an InAs insert), and their PVCR by up to 2 times.
   Phonons: ``Gamma_LO = 2 alpha hbar w_LO sqrt(hbar w_LO / e_w)``
   (:func:`lo_emission_width_ev`) with the Frohlich constant
   ``alpha = (e^2 / 4 pi eps0 hbar) sqrt(m_w / 2 hbar w_LO) (1/eps_inf - 1/eps_s)`` of the
   well material [10]_: times the landing weight (note 3), the golden-rule rate of
   emission by an electron in the well into the state with lateral momentum ``q``,
   ``pi alpha hbar w q_LO / q`` for ``q << q_w`` (``hbar^2 q_LO^2 / 2 m_w = hbar w_LO``;
   Frohlich's coupling [10]_ with the 2-D final states, derived for this module and
   checked by quadrature, tests/test_scattering.py). Until 2026-12-04 it was the bulk
   rate ``2 alpha hbar w_LO`` (from memory), which puts ``q_w`` where the golden rule
   has ``q_LO``: 2.2-3.2 times the golden rule on a 3 nm InGaAs well, 0.4-0.65 times on
   a 20 nm one; the change lowered the default model's valley current by 18 % (median
   over the 218 stacks of ``benchmarks/check_default_metrics.py``), its Jp by 3.7 % and
   raised its PVCR by 17 %. Alloy disorder (about 0.5 meV in an In0.53Ga0.47As well, estimate
   from [11]_) and ionised impurities (the well is undoped) are neglected.
6. Only the lowest quasi-bound state is carried by default
   (``n_states = 1``): it is the one that crosses the emitter band edge at
   the first peak and carries the valley current. Higher states keep their
   coherent current (their roughness width from note 5 grows about as ``e_w^2``,
   to a large fraction of their energy, beyond a Born estimate). A line of the
   probe counts as a state where it lies below the lower barrier's inner edge
   by more than its width (until 2026-12-03 also where it was narrower than
   ``kT``: the channel switched off below about 8 K in a GaAs/AlGaAs stack
   whose state is 0.6 meV wide, and its valley current fell 4.5 times) and where its
   kinetic energy in the well ``e_w`` is at least a quarter of the box energy
   ``hbar^2 pi^2 / (2 m_w w_eff^2)`` of the effective width (note 5): a state confined
   to the well has about that much or more (uncertainty principle; measured 0.32-0.93
   of it on the example stacks and the reference devices with the state's own kinetic
   energy, 0.34-0.93 with the earlier one). Lower lines are small
   maxima of the probe's ``T`` that no state of the well makes (a wide scan of random
   stacks found them 0.01-0.03 of it above a tilted or narrow well's bottom); taken as
   the lowest state, they switched the channel off and on between neighbouring biases,
   and their ``e_w^3`` (note 2) grew the floor without bound (24 times the coherent
   current on an InP/InAlAs stack with 1-ML barriers). The probe's coarse search
   grid is quadratic in energy from the bottom of its window (until 2026-12-03
   uniform, 30 meV apart on a GaAs/AlAs stack, where a 12.5 nm well's 0.2 meV wide
   lowest state made no local maximum at some biases and the channel switched to
   the next state; tested), and 8 more points run on from the window's top to the lower
   barrier's inner edge, their steps growing geometrically from the window grid's last one
   (until 2026-12-05 uniform, 170 meV apart on a GaAsSb/AlAsSb stack at 5 K, where a 3 meV
   line 6 meV above the top was a maximum at some biases only, the state carried switched
   between it and one 0.5 eV up, and the current stepped 35 % in 0.5 mV; tested): a broad
   state above the window reaches into it with its line's tail (until 2026-12-04 the
   search stopped at the window's top, 30 kT above the Fermi
   level, and such a state set in at full strength as it entered: the current rose 11.6
   times in one 5.5 mV step on a GaAs/AlAs stack at 70 K; tested). A state takes the
   scattering rates of note 5 in full from two widths below the lower barrier's inner edge,
   none within one, a smoothstep between (this project's choice: a state that far up is
   hardly bound; until 2026-12-04 it took them in full from one width below, and the
   channel switched on at full strength between neighbouring biases, 7.1 times the current
   on a GaAs/AlGaAs stack; tested). Where the window reaches above the lower barrier's
   inner edge the 32 points end there, no state lying higher (until 2026-12-05 they ran
   to the window's top: 1 eV on a GaAs/Al0.22Ga0.78As stack with 0.2 eV barriers, 14 meV
   apart near a 21 meV line, a maximum at some biases only; tested). A state takes its
   rates only as far as its line is resolved: on each side the lowest ``T`` of the probe
   at 1/4 to 4 widths from the centre, the higher side's against the peak, in full where
   it lies below half the peak (a Lorentzian alone dips to 1/5 of it one width away),
   none where it reaches the peak, a smoothstep between (:func:`_resolved_share`; this
   project's choice: a line that no longer dips towards its neighbour is no quasi-bound
   state, and the sequential picture's premise, a state narrower than its spacing, fails;
   until 2026-12-05 such a line kept its full rates until the coarse search lost it, and
   the channel's share of that stack's current stepped between 0.31 and 0.02; tested).
   A state is treated alone: no scattering between states, no coherence between them.
   Stacks with more than two barriers take the region between the outer
   barriers as the well.
7. *A hump before the emitter barrier.* A thick undoped spacer on the injecting side
   fills with electrons that raise a space-charge hump above the contact's band edge
   (0.17 eV, a WKB action of 50 at the edge, on a GaAs/AlAs stack at 400 K with a 100 nm
   spacer). An emitter electron reaches the barrier through the hump, and a well state
   leaks out through the barrier, the pocket between barrier and hump and the hump. The
   pocket's phase averaged, the two are scatterers in series [12]_:
   ``T = T_b T_h / (T_b + T_h - T_b T_h)`` with ``T_b``, ``T_h`` the WKB transparencies of
   the barrier and the hump [9]_ at the longitudinal energy ``z``; so behind a hump
   ``Gamma_L(z)`` takes the factor ``H(z) = T_h / (T_b + T_h - T_b T_h)`` (1 above the hump's
   top, ``T_h / T_b`` where the hump is the more opaque), and the state's own width at
   ``E_n`` the same factor. The state is the probe's (whose source side is lowered: no hump,
   no pocket) and no coherent line is matched to it: below the hump's top the device's lines
   are the well's and the pocket's states mixed, 1e-9 to 1e-4 eV wide and some 10 meV
   apart, and which one lay within a width of the state changed from one bias to the next
   (with it ``Gamma_L``: the current stepped between -56 and -211 A/cm^2 on biases 1 mV
   apart, and between -25462 and -92 on an 18 ML well; measured 2026-12-05). Where the
   action at the contact's edge is below 6 (:data:`HUMP_ACTION`, the well-charge search's
   gate; the 218 stacks of ``benchmarks/check_default_metrics.py`` reach 3.2) nothing
   changes (the hump's effect on a matched state is in its line's width, and an unmatched
   state is coupled as if the hump were absent, as before); from 6 to 12 the factor is
   ``H^w`` and the matched line's weight (note 4) is ``(1 - w)`` of what it was, ``w`` a
   smoothstep of the action, so that the current is continuous where a bias or a spacer
   carries the action across the gate (this project's choice). Departures: the pocket's
   resonances (its states mixed with the well's) are averaged out, the WKB ``T_h`` is 1 at
   the hump's top (a parabolic top gives 1/2 there), and the pocket's own electrons (the
   spacer's Thomas-Fermi charge) are not taken as an emitter of their own.

Defaults (no first-principles value exists): roughness height ``Delta`` =
0.3 nm (one monolayer) and correlation length ``Lambda`` = 5 nm, the values
found for GaAs/AlAs wells from their mobility [6]_ (from memory); the
literature range is about 0.2-0.6 nm and 2-10 nm. ``Gamma_IFR`` scales as
``Delta^2 Lambda^2`` at short ``Lambda``.

References
----------
.. [1] B. Ricco and M. Ya. Azbel, Phys. Rev. B 29, 1970 (1984).
.. [2] M. Buttiker, IBM J. Res. Dev. 32, 63 (1988) (from memory).
.. [3] M. Jonson and A. Grincwajg, Appl. Phys. Lett. 51, 1729 (1987).
.. [4] S. Luryi, Appl. Phys. Lett. 47, 490 (1985).
.. [5] F. Chevoir and B. Vinter, Phys. Rev. B 47, 7260 (1993) (scattering-
   assisted tunnelling and the valley current; from memory).
.. [6] H. Sakaki, T. Noda, K. Hirakawa, M. Tanaka and T. Matsusue,
   Appl. Phys. Lett. 51, 1934 (1987) (interface roughness scattering in
   GaAs/AlAs wells; from memory).
.. [7] N. S. Wingreen, K. W. Jacobsen and J. W. Wilkins, Phys. Rev. Lett. 61,
   1396 (1988) (phonon-assisted resonant tunnelling; from memory).
.. [8] V. J. Goldman, D. C. Tsui and J. E. Cunningham, Phys. Rev. B 36, 7635
   (1987) (LO-phonon replica measured in the valley; from memory).
.. [9] L. D. Landau and E. M. Lifshitz, Quantum Mechanics (WKB transparency).
.. [10] H. Frohlich, Adv. Phys. 3, 325 (1954); coupling as in B. K. Ridley,
   Quantum Processes in Semiconductors (Oxford) (from memory).
.. [11] G. Bastard, Appl. Phys. Lett. 43, 591 (1983) (alloy scattering in
   quantum wells; from memory).
.. [12] S. Datta, Electronic Transport in Mesoscopic Systems (Cambridge, 1995), ch. 2:
   the transmission of two scatterers in series with phase randomisation between them
   (from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache
from typing import NamedTuple

import numpy as np

from .bands import Profile
from .constants import ELEMENTARY_CHARGE_C, HBAR2_2M0_EV_NM2, VACUUM_PERMITTIVITY_F_M
from .electrostatics import WELL_SEARCH_HUMP_ACTION
from .fermi import occupation
from .resonances import grid_maxima
from .transmission import compiled_kernel, transmission_rows

__all__ = [
    "ScatteringParameters",
    "scattering_widths_ev",
    "coherent_factor",
    "sequential_fluxes_ev2",
    "sequential_integral_ev2",
    "BARRIER_MIN_EV",
    "injecting_hump",
    "hump_weight",
]

#: A layer whose band edge lies this far above the emitter's (at zero bias) is a barrier.
BARRIER_MIN_EV = 0.05
#: A line counts as a state of the well only where its kinetic energy in the well is at
#: least this share of the box energy of ``w_eff`` (module note 6; measured 0.32-0.93 on
#: the example stacks and the reference devices)
CONFINED_SHARE = 0.25
#: A state takes its rates in full where ``T`` dips below this share of its line's peak on
#: both sides (a Lorentzian alone: to 1/5 one width from its centre), none where it does not
#: dip below the peak on one side (module note 6)
RESOLVED_BELOW = 0.5
#: A coherent line is a state's own (:func:`_match_lines`) only where its peak is at least
#: MATCH_PEAK_SHARE of the state's probe line's, or the state lies within MATCH_EDGE_WIDTHS of
#: its widths above the emitter's band edge. A GaAs/AlAs stack at 400 K with 40 and 100 nm
#: spacers had a device line of peak 8e-9 within a width of a state 1300 widths above the
#: edge whose probe line peaks at 0.99, at one bias of a batch only; matched, its Gamma_L
#: took the channel from 870 to 0.8 A/cm^2 there (found by a fuzz run, 2026-12-05). Near the
#: edge a state's own line is that faint: the emitter's coupling vanishes at its edge, and
#: matched lines peaked at 1e-4 to 1e-3 of the probe's within 25 widths of it (seed 113, draw
#: 24 of the grid scan, whose Jp a bare share rule moved by 20 %)
MATCH_PEAK_SHARE = 1e-6
MATCH_EDGE_WIDTHS = 100.0
#: A hump of the injecting side (the space-charge hump of a thick undoped spacer) whose WKB
#: action ``int kappa dz`` at the injecting contact's band edge exceeds HUMP_ACTION (the
#: well-charge search's gate, ``electrostatics.WELL_SEARCH_HUMP_ACTION``: 6; the 218 stacks of
#: ``benchmarks/check_default_metrics.py`` reach 3.2) couples the well's states to the
#: emitter through its own transmission (module note 7); in full from HUMP_FULL_ACTION, a
#: smoothstep of the action between (:func:`hump_weight`)
HUMP_ACTION = WELL_SEARCH_HUMP_ACTION
HUMP_FULL_ACTION = 2.0 * WELL_SEARCH_HUMP_ACTION
#: Where ``T`` is looked at for the dip beside a line, in its widths from its centre
DIP_OFFSETS = 2.0 ** np.arange(-2.0, 2.01, 0.5)
#: e^2 / (4 pi eps0), eV nm
COULOMB_EV_NM = ELEMENTARY_CHARGE_C / (4.0 * np.pi * VACUUM_PERMITTIVITY_F_M) * 1e9
#: GaAs values where a table carries no phonon data (module notes)
DEFAULT_LO_PHONON_EV = 0.0362
DEFAULT_PERMITTIVITY_HIGH_R = 10.89
_HALF_PI = 0.5 * np.pi  # (M_PI_2 in _slices.c, the same double)
_THIRD_PI = np.pi / 3.0  # (M_PI / 3.0 in _slices.c, the same double)


@dataclass(frozen=True)
class ScatteringParameters:
    """Settings of the scattering-assisted channel (module notes for sources and ranges)."""

    roughness_height_nm: float = 0.3  #: Delta, rms interface roughness height
    roughness_length_nm: float = 5.0  #: Lambda, lateral correlation length
    phonon_scale: float = 1.0  #: multiplies the Frohlich rate (0: no phonon channel)
    n_states: int = 1  #: quasi-bound states carried per (stack, bias), lowest first (notes)
    n_search: int = 32  #: coarse points of the search for states below the emitter edge
    n_above: int = 8  #: and from the energy window's top to the barrier's inner edge
    n_uniform: int = 48  #: uniform points of the total-energy integral
    #: points about each state (sinh map) of that integral (32 until 2026-12-04: the GaAs
    #: example's current 1.3-1.9 % off its converged value, now within 0.7 %, tested)
    n_line: int = 64

    @property
    def active(self) -> bool:
        return self.roughness_height_nm > 0.0 or self.phonon_scale > 0.0


def _kappa(mass_m0, height_ev):
    """Decay constant, 1/nm, under a barrier ``height_ev`` (floored at 1 meV)."""
    return np.sqrt(mass_m0 * np.maximum(height_ev, 1e-3) / HBAR2_2M0_EV_NM2)


def _box_energy_ev(energy_ev, geo, well_nm):
    """The box energy ``hbar^2 pi^2 / (2 m_w w_eff^2)`` (eV) of the effective width
    ``w_eff = w + 1/kappa_1 + 1/kappa_2`` of states at ``energy_ev`` ``(..., L)`` (note 6)."""
    ex = lambda a: np.asarray(a)[..., None]  # noqa: E731
    k1 = _kappa(ex(geo.mass_at[..., 1]), ex(geo.edge_at[..., 1]) - energy_ev)
    k2 = _kappa(ex(geo.mass_at[..., 2]), ex(geo.edge_at[..., 2]) - energy_ev)
    w_eff = well_nm + 1.0 / k1 + 1.0 / k2
    m_w = np.maximum(ex(geo.well_mass_m0), 1e-6)  # (0 where the stack has no well)
    return HBAR2_2M0_EV_NM2 / m_w * (np.pi / w_eff) ** 2


def _well_shots(energy_ev, geo, *, edge, mass, width, compiled=True):
    """``psi`` of states at ``energy_ev`` ``(..., L)`` shot through the well's slices: the
    slopes ``-dE_n/dz_i`` (eV/nm) at the well's two interfaces (inner edges of the
    barriers), ``(..., L, 2)`` (note 5), and the kinetic energy in the well
    ``<E_n - U>`` over ``|psi|^2`` (eV, ``(..., L)``; :func:`_kinetic_ev`).

    Moving the interface ``z_i`` by ``dz`` into the barrier shifts the state by
    ``dE_n = -dz |psi(z_i)|^2 [(E_n - U_w) + (m_w / m_b)(U_b - E_n)]`` (first order,
    the Hellmann-Feynman theorem for the BenDaniel-Duke Hamiltonian, ``psi`` and
    ``psi'/m`` continuous; ``U``, ``m`` of the well's and the barrier's slices next to the
    interface; for equal masses ``Delta U |psi(z_i)|^2``). ``psi`` is shot through the
    well's slices at ``E_n`` (``cos``/``sin`` or ``cosh``/``sinh`` in each) from each
    interface in turn, starting from that barrier's decaying tail, and normalised over the
    well and both tails (``|psi(z_i)|^2 / (2 kappa_i)``, barriers thick against ``1/kappa``).
    The kinetic energy is the shot's from the interface whose well slice lies higher (a shot
    into a classically forbidden part grows the error of ``E_n``; from there it shrinks).
    The numpy statement, or the same arithmetic compiled (``_slices.c``: ``well_shots``).
    Checked against the derivative of the finite well's level, of a well with an insert and
    the virial theorem of a triangular well (tests)."""
    n = edge.shape[-1]
    edge, mass, width = np.broadcast_arrays(edge, mass, width)
    par = np.broadcast_to(geo.shot_par, edge.shape[:-1] + (7,))
    energy = np.ascontiguousarray(np.broadcast_to(energy_ev, par.shape[:-1] + energy_ev.shape[-1:]))
    routine = compiled_kernel("well_shots") if compiled else None
    if routine is None:
        return _shoot_through_well(energy, par, edge, mass, width)
    out = np.empty(energy.shape + (3,))
    flat = (-1, n)
    routine(
        n,
        energy.shape[-1],
        HBAR2_2M0_EV_NM2,
        energy,
        np.ascontiguousarray(par),
        np.ascontiguousarray(edge, dtype=float).reshape(flat),
        np.ascontiguousarray(mass, dtype=float).reshape(flat),
        np.ascontiguousarray(width, dtype=float).reshape(flat),
        out,
    )
    return out[..., :2], out[..., 2]


def _shoot_through_well(energy, par, edge, mass, width):
    """:func:`_well_shots`'s numpy statement: ``par`` ``(..., 7)`` per entry holds
    the well's first and last slice, whether it has a well, and the band edge and mass of
    the two barriers' slices next to it; ``energy`` ``(..., L)``. Each interface's value
    comes from ``psi`` shot from that interface (from the other one, an error of ``E_n``
    against the thick-barrier level grows across the well: 15 % on a 14 nm well whose level
    is known to 1e-5 eV)."""
    n = edge.shape[-1]
    first, last = par[..., 0].astype(int), par[..., 1].astype(int)
    mirror = par[..., [0, 1, 2, 5, 6, 3, 4]].copy()  # the other side's barrier first
    mirror[..., 0], mirror[..., 1] = n - 1 - last, n - 1 - first
    flip = lambda a: a[..., ::-1]  # noqa: E731
    slope_a, kinetic_a = _shoot_from_first(energy, par, edge, mass, width)
    slope_b, kinetic_b = _shoot_from_first(energy, mirror, flip(edge), flip(mass), flip(width))
    (u_ends,) = _take_last(np.stack([first, last], axis=-1), edge)
    higher_first = (u_ends[..., 0] >= u_ends[..., 1])[..., None]
    return np.stack([slope_a, slope_b], axis=-1), np.where(higher_first, kinetic_a, kinetic_b)


def _shoot_from_first(energy, par, edge, mass, width):
    """``-dE_n/dz`` at the interface before the well's first slice (``par`` as
    :func:`_shoot_through_well`'s), ``psi`` shot from there through the well, and that
    ``psi``'s ``<E_n - U>`` over the well (eV)."""
    n = edge.shape[-1]
    first, last = par[..., 0].astype(int), par[..., 1].astype(int)
    has = par[..., 2] != 0.0
    u_b1, m_b1, u_b2, m_b2 = (par[..., i, None] for i in range(3, 7))
    count = int(np.max(np.where(has, last - first + 1, 0), initial=0))
    idx = first[..., None] + np.arange(max(count, 1))
    inside = (idx <= last[..., None]) & has[..., None]
    e_s, m_s, d_s = _take_last(np.minimum(idx, n - 1), edge, mass, width)
    d_s = np.where(inside, d_s, 0.0)  # beyond the well: no width, no change
    u_w, m_w = _take_last(first[..., None], edge, mass)
    k1 = _kappa(m_b1, u_b1 - energy)
    k2 = _kappa(m_b2, u_b2 - energy)
    psi = np.ones(energy.shape)
    flux = k1 / m_b1  # psi' / m, continuous across each interface
    norm = 0.5 / k1
    in_well = kinetic = np.zeros(energy.shape)  # int |psi|^2 and int |psi|^2 (E - U), well
    for s in range(count):
        m, d = m_s[..., s, None], d_s[..., s, None]
        k2s = m * (energy - e_s[..., s, None]) / HBAR2_2M0_EV_NM2  # k^2, 1/nm^2
        q = np.sqrt(np.abs(k2s))
        up = k2s >= 0.0
        c = np.where(up, np.cos(q * d), np.cosh(q * d))
        sn = np.where(
            q * d > 1e-8, np.where(up, np.sin(q * d), np.sinh(q * d)) / np.maximum(q, 1e-300), d
        )
        x2 = k2s * d * d
        small = np.abs(x2) < 1e-3
        # (d - sin(kd) cos(kd) / k) / (2 k^2); its series d^3 (1/3 - x^2/15) near k = 0
        odd = np.where(
            small,
            d * d * d * (1.0 / 3.0 - x2 / 15.0),
            (d - sn * c) / (2.0 * np.where(small, 1.0, k2s)),
        )
        slope = m * flux
        piece = psi * psi * 0.5 * (d + sn * c) + slope * slope * odd + psi * slope * sn * sn
        norm = norm + piece
        in_well = in_well + piece
        kinetic = kinetic + piece * (energy - e_s[..., s, None])
        psi, slope = c * psi + sn * slope, -k2s * sn * psi + c * slope
        flux = np.where(d > 0.0, slope / m, flux)
    norm = norm + psi * psi * 0.5 / k2
    slope_out = ((energy - u_w) + m_w / m_b1 * (u_b1 - energy)) / norm
    return slope_out, kinetic / np.where(in_well > 0.0, in_well, 1.0)


def _interface_factor(k_over_m, kappa_over_m):
    """``4 (k/m)(kappa/m_b) / ((k/m)^2 + (kappa/m_b)^2)``: a lead's entry into a barrier."""
    return 4.0 * k_over_m * kappa_over_m / (k_over_m**2 + kappa_over_m**2 + 1e-300)


@dataclass(frozen=True)
class _Geometry:
    """Where the barriers and the well are, per (stack, bias), in an oriented profile."""

    run1: np.ndarray  #: (..., n) slices of the source-side barrier
    run2: np.ndarray  #: (..., n) slices of the drain-side barrier
    source: np.ndarray  #: (..., n) slices before the first barrier
    has: np.ndarray  #: (...) a well between two barriers exists
    outer1: np.ndarray  #: index of the first barrier's first slice
    inner1: np.ndarray  #: index of the first barrier's last slice
    inner2: np.ndarray  #: index of the second barrier's first slice
    outer2: np.ndarray  #: index of the second barrier's last slice
    well: np.ndarray  #: (..., n) slices of the well
    well_bottom_ev: np.ndarray
    well_nm: np.ndarray
    well_mass_m0: np.ndarray
    lo_phonon_ev: np.ndarray
    permittivity_high_r: np.ndarray
    permittivity_r: np.ndarray
    #: (..., 7) band edge and mass at outer1, inner1, inner2, outer2, the well's bottom and
    #: the real slices just outside the barriers (before outer1, after outer2)
    edge_at: np.ndarray
    mass_at: np.ndarray
    #: (..., 7) the rows of the well shots (_well_shots): the well's first and last slice,
    #: whether it has one, band edge and mass of the barrier slices next to it
    shot_par: np.ndarray


def _take_last(index, *arrays):
    """``np.take_along_axis(a, index, axis=-1)`` of each of ``arrays``, whose leading axes
    broadcast to ``index``'s, by one flat index per array (the same numbers)."""
    flat: dict[tuple[int, ...], np.ndarray] = {}  # per shape of the arrays
    out = []
    for a in arrays:
        batch, m = a.shape[:-1], a.shape[-1]
        if len(batch) != index.ndim - 1:
            out.append(np.take_along_axis(a, index, axis=-1))
            continue
        if a.shape not in flat:
            flat[a.shape] = index + np.arange(0, math.prod(batch) * m, m).reshape(batch + (1,))
        out.append(a.reshape(-1)[flat[a.shape]])
    return out


#: :func:`_layout` of the slice arrays met last, found by their values (a sweep's channel
#: calls meet the same stack many times: the sweep, the refinement rounds, the up branch)
_LAYOUTS: list = []
_LAYOUTS_KEPT = 8


def _layout(mass, width, barrier, shape, per_stack) -> dict:
    """The part of :func:`_geometry` that does not depend on the band edge: the barriers,
    the well and the slices next to them of ``mass``, ``width``, ``barrier`` (already cut to
    one bias per stack with ``per_stack``), the per-stack ones repeated to the batch
    ``shape``; made once per values and kept in :data:`_LAYOUTS` (read-only arrays)."""
    key = (shape, per_stack)
    for entry in _LAYOUTS:
        if entry[0] == key and all(
            x.shape == y.shape and bool((x == y).all())
            for x, y in zip(entry[1], (mass, width, barrier), strict=True)
        ):
            return entry[2]

    def full(a):  # a per-stack array repeated to the batch's shape (cheaper than a view here)
        return a.repeat(shape[-1], axis=len(shape) - 1) if per_stack else a

    n = barrier.shape[-1]
    idx = np.arange(n)
    has = barrier.any(axis=-1)
    i1 = np.argmax(barrier, axis=-1)
    after = ~barrier & (idx > i1[..., None])
    j1 = np.where(after.any(axis=-1), np.argmax(after, axis=-1), n)
    i2 = n - 1 - np.argmax(barrier[..., ::-1], axis=-1)
    before = ~barrier & (idx < i2[..., None])
    j2 = n - 1 - np.argmax(before[..., ::-1], axis=-1)
    well = (idx >= j1[..., None]) & (idx <= j2[..., None]) & (width > 0)
    has &= well.any(axis=-1) & (j1 <= j2)
    w = np.where(well, width, 0.0)
    well_nm = w.sum(axis=-1)
    safe = np.maximum(well_nm, 1e-12)
    inner1, inner2 = np.maximum(j1 - 1, 0), np.minimum(j2 + 1, n - 1)
    # the real slices (not a batch's zero-width padding) just outside the two barriers
    real = width > 0
    near1 = np.max(np.where(real & (idx < i1[..., None]), idx, 0), axis=-1)
    near2 = np.min(np.where(real & (idx > i2[..., None]), idx, n - 1), axis=-1)
    out = {
        "well": well,
        "inner_ends": [full(i) for i in (i1, inner1, inner2, i2)],
        "outer_ends": [full(near1), full(near2)],
        "run1": full((idx >= i1[..., None]) & (idx < j1[..., None])),
        "run2": full((idx > j2[..., None]) & (idx <= i2[..., None])),
        "source": full(idx < i1[..., None]),
        "has": full(has),
        "well_full": full(well),
        "outer1": full(i1),
        "inner1": full(inner1),
        "inner2": full(inner2),
        "outer2": full(i2),
        "well_nm": full(well_nm),
        "well_mass_m0": full((w * mass).sum(axis=-1) / safe),
        # the well's first and last slice and whether there is one, as _well_shots reads them
        "shot_ends": [
            full(a.astype(float))
            for a in (
                np.argmax(well, axis=-1),
                n - 1 - np.argmax(well[..., ::-1], axis=-1),
                has & well.any(axis=-1),
            )
        ],
    }
    for value in out.values():
        for a in value if isinstance(value, list) else [value]:
            a.flags.writeable = False
    kept = tuple(np.array(a, copy=True) for a in (mass, width, barrier))
    _LAYOUTS.insert(0, (key, kept, out))
    del _LAYOUTS[_LAYOUTS_KEPT:]
    return out


def _geometry(
    edge, mass, width, barrier, phonon_ev, eps_high, eps_s, *, per_stack=False
) -> _Geometry:
    """Barriers, well and source side of oriented slice arrays ``(..., n)``.

    With ``per_stack`` every slice array but ``edge`` is the same at every bias (axis -2):
    the layout is found on the first bias of each stack and broadcast (the same numbers).
    The layout (:func:`_layout`) is made once per stack's values."""
    shape = edge.shape[:-1]
    if per_stack:
        mass, width, barrier, phonon_ev, eps_high, eps_s = (
            a[..., :1, :] for a in (mass, width, barrier, phonon_ev, eps_high, eps_s)
        )
    lay = _layout(mass, width, barrier, shape, per_stack)
    well = lay["well"]
    bottom = np.argmin(np.where(well, edge, np.inf), axis=-1)  # the bias's own
    ends = lay["inner_ends"] + [bottom] + lay["outer_ends"]
    edge_at, mass_at = _take_last(np.stack(ends, axis=-1), edge, mass)
    phonon_at = _take_last(bottom[..., None], phonon_ev, eps_high, eps_s)
    return _Geometry(
        run1=lay["run1"],
        run2=lay["run2"],
        source=lay["source"],
        has=lay["has"],
        well=lay["well_full"],
        outer1=lay["outer1"],
        inner1=lay["inner1"],
        inner2=lay["inner2"],
        outer2=lay["outer2"],
        well_bottom_ev=edge_at[..., 4],
        well_nm=lay["well_nm"],
        well_mass_m0=lay["well_mass_m0"],
        lo_phonon_ev=phonon_at[0][..., 0],
        permittivity_high_r=phonon_at[1][..., 0],
        permittivity_r=phonon_at[2][..., 0],
        edge_at=edge_at,
        mass_at=mass_at,
        shot_par=np.stack(
            np.broadcast_arrays(
                *lay["shot_ends"],
                edge_at[..., 1],
                mass_at[..., 1],
                edge_at[..., 2],
                mass_at[..., 2],
            ),
            axis=-1,
        ),
    )


def _i0e(x):
    """``exp(-x) I0(x)`` for ``x >= 0`` (numpy's ``i0``, Cephes' Chebyshev expansions; beyond
    700, where ``I0`` overflows, its asymptotic series to ``x^-2``, DLMF 10.40.1); equal to
    ``scipy.special.i0e`` to 4e-16 over 0-700 and 3e-10 beyond (checked), without scipy's
    import at a command's start."""
    x = np.asarray(x, float)
    inside = np.minimum(x, 700.0)
    big = np.maximum(x, 700.0)
    beyond = (1.0 + 1.0 / (8.0 * big) + 9.0 / (128.0 * big**2)) / np.sqrt(2.0 * np.pi * big)
    return np.where(x < 700.0, np.exp(-inside) * np.i0(inside), beyond)


#: :func:`_i0e` of the values met so far: its argument depends on the well's mass, the
#: temperature and the roughness length only, so a sweep meets a few values many times
_I0E_VALUES: dict[float, float] = {}


def _i0e_of_values(x):
    """:func:`_i0e` elementwise through :data:`_I0E_VALUES` (the same numbers)."""
    x = np.asarray(x, float)
    if x.size and (x == x.flat[0]).all() and x.flat[0] in _I0E_VALUES:  # one value met before
        return np.full(x.shape, _I0E_VALUES[x.flat[0]])
    if not np.all(np.isfinite(x)):  # NaN is no key
        return _i0e(x)
    values, where = np.unique(x, return_inverse=True)
    missing = [v for v in values.tolist() if v not in _I0E_VALUES]
    if missing:
        if len(_I0E_VALUES) > 4096:
            _I0E_VALUES.clear()
        _I0E_VALUES.update(zip(missing, _i0e(np.array(missing)).tolist(), strict=True))
    return np.array([_I0E_VALUES[v] for v in values.tolist()])[where.reshape(-1)].reshape(x.shape)


class _InWell(NamedTuple):
    """What :func:`_kinetic_ev` returns per state, ``(..., L)``."""

    e_w_ev: np.ndarray  #: kinetic energy in the well, eV (floored at 5 meV)
    allowed_nm: np.ndarray  #: the well's width the state spreads over, nm
    slopes: np.ndarray  #: ``-dE_n/dz_i`` at the well's two interfaces, :func:`_well_shots`


def _kinetic_ev(energy_ev, geo: _Geometry, *, edge, mass, width) -> _InWell:
    """A state's kinetic energy in the well ``e_w`` (eV, floored at 5 meV), the well's width
    it spreads over (nm) and the slopes of :func:`_well_shots` (:class:`_InWell`).

    ``e_w`` is ``<E_n - U>`` over the state's ``|psi|^2`` in the well (:func:`_well_shots`),
    continuous in the bias. Until 2026-12-05 it was ``E_n`` less the width-weighted mean
    edge of the slices where the state is classically allowed, which stepped as a tilted
    well's slices crossed ``E_n``: 2 % steps of the current every 4-5 mV on a 14 nm
    GaAs/AlAs well at 309 K (seed 154, stack 35 of the grid scan; tested) and the channel's
    current +47 % within 3 mV where a self-consistent well's flat hump took ten slices at
    once (seed 128, stack 48; DEVELOPERS.md). The
    width is that of the classically allowed slices (where none is, the whole well's)."""
    allowed = geo.well[..., None, :] & (edge[..., None, :] < energy_ev[..., :, None])
    nm = np.where(allowed, width[..., None, :], 0.0).sum(axis=-1)
    slopes, kinetic = _well_shots(energy_ev, geo, edge=edge, mass=mass, width=width)
    return _InWell(
        np.maximum(kinetic, 5e-3), np.where(nm > 0, nm, np.asarray(geo.well_nm)[..., None]), slopes
    )


def non_resonant_floor2_ev2(e_k, e_w):
    """``eps_n^2`` (eV^2) of the spectral weight's non-resonant floor ``1/eps_n^2`` (note 2;
    checked against the exact density of a scattering state: tests/test_scattering.py).

    Parameters
    ----------
    e_k
        The emitter barrier's height above the state, eV.
    e_w
        The state's kinetic energy in the well, eV.
    """
    return 16.0 * e_k * e_w**3 / (np.pi**2 * (e_w + e_k) ** 2)


def bulk_floor2_ev2(e_w):
    """``eps_b^2`` (eV^2) of the phonon entry's non-resonant floor ``1/eps_b^2`` (note 3),
    ``(2 e_w / pi)^2``: the lowest density in the well of an emitter scattering state off
    resonance, relative to its peak, in a Fabry-Perot resonator with weak mirrors (the
    off-resonant ``T^2 / 16`` against ``Gamma = T e_w / pi``; derived for this module). The
    Frohlich coupling acts over the whole well, so its floor is this bulk one, not the
    interface floor of roughness (:func:`non_resonant_floor2_ev2`; checked against the exact
    density of a scattering state weighted by the state's ``|psi|^2``: tests/test_scattering.py).

    Parameters
    ----------
    e_w
        The state's kinetic energy in the well, eV.
    """
    return (2.0 * e_w / np.pi) ** 2


def lo_emission_width_ev(alpha, hw_ev, e_w_ev):
    """``Gamma_LO`` (eV) of note 5: the state's width for entering it by polar-optical-phonon
    emission, per unit of :func:`lo_landing_weight`, ``2 alpha hbar w sqrt(hbar w / e_w)``.

    Parameters
    ----------
    alpha
        The Frohlich constant of the well material.
    hw_ev
        The LO-phonon energy, eV.
    e_w_ev
        The state's kinetic energy in the well, eV.
    """
    return 2.0 * alpha * hw_ev * np.sqrt(hw_ev / e_w_ev)


def lo_landing_weight(reach):
    """The landing weight of phonon emission into a state (note 3) at ``reach`` ``= q / q_w``:
    ``(pi/2) / (r (1 + pi r / 3))``, the golden rule's ``1/q`` below the well's form-factor
    cut-off and ``3/(2 r^2)`` beyond (within 16 % of it, tested)."""
    return _HALF_PI / (reach * (1.0 + _THIRD_PI * reach))


def scattering_widths_ev(energy_ev, geo: _Geometry, *, edge, mass, width, kinetic, kt_ev, params):
    """Roughness width, phonon width (no occupation factor), floor energy^2 and Bose factor.

    ``energy_ev`` is ``(..., L)`` state energies on the oriented profile; the
    rest broadcast over ``(...)``. Formulas in the module notes ([6]_, [10]_).

    Parameters
    ----------
    energy_ev
        State energies, eV, ``(..., L)``, on the oriented profile.
    geo
        Where the barriers and the well are (oriented profile).
    edge, mass, width
        Band edge (eV), mass (m0) and width (nm) of the oriented profile's slices, ``(..., n)``.
    kinetic
        The states' ``e_w``, well width and interface slopes (:func:`_kinetic_ev`).
    kt_ev
        Thermal energy kT, eV, ``(...)``.
    params
        Channel settings.
    """
    ex = lambda a: np.asarray(a)[..., None]  # noqa: E731
    e_w = kinetic.e_w_ev
    top1 = ex(geo.edge_at[..., 1]) - energy_ev
    m_w = ex(geo.well_mass_m0)
    kt = ex(kt_ev)
    lam, delta = params.roughness_length_nm, params.roughness_height_nm
    m_over_hbar2 = m_w / (2.0 * HBAR2_2M0_EV_NM2)  # m / hbar^2, 1/(eV nm^2)
    angle = _i0e_of_values(m_over_hbar2 * kt * lam**2)
    slopes = kinetic.slopes
    gamma_ifr = np.pi * m_over_hbar2 * delta**2 * lam**2 * angle * (slopes**2).sum(axis=-1)
    floor2 = non_resonant_floor2_ev2(np.maximum(top1, 1e-3), e_w)
    hw = ex(geo.lo_phonon_ev)
    polar = 1.0 / ex(geo.permittivity_high_r) - 1.0 / ex(geo.permittivity_r)
    alpha = COULOMB_EV_NM * np.sqrt(m_over_hbar2 / (2.0 * hw)) * polar
    gamma_lo = params.phonon_scale * lo_emission_width_ev(alpha, hw, e_w)
    bose = 1.0 / np.expm1(hw / kt)
    return gamma_ifr, gamma_lo, floor2, bose


def coherent_factor(energy_ev, *, center_ev, width_ev, valid, gamma_s_ev):
    """Factor taking the coherent ``T`` of each line from width ``Gamma`` to ``Gamma + Gamma_s`` [2]_.

    ``energy_ev`` is ``batch + (n,)``; the line arrays ``batch + (L,)``.
    Returns ``prod_l ((E - E_l)^2 + (G_l/2)^2) / ((E - E_l)^2 + ((G_l + Gs_l)/2)^2)``.

    Parameters
    ----------
    energy_ev
        Energies, eV, ``batch + (n,)``.
    center_ev, width_ev
        Centre and coherent width ``G_l`` of each line, eV, ``batch + (L,)``.
    valid
        Which line slots hold a line, ``batch + (L,)``; the others give a factor 1.
    gamma_s_ev
        Scattering width ``Gs_l`` of each line, eV, ``batch + (L,)``.
    """
    d2 = (energy_ev[..., None, :] - center_ev[..., :, None]) ** 2
    g = np.where(valid, width_ev, 0.0)[..., None]
    gs = np.where(valid, gamma_s_ev, 0.0)[..., None]
    return np.prod((d2 + 0.25 * g**2) / (d2 + 0.25 * (g + gs) ** 2 + 1e-300), axis=-2)


def _barrier_action(z, edge, mass, width, run, lo, hi, *, compiled=True):
    """``int kappa dz`` over the barrier ``run`` (slices ``lo:hi``) at energies ``z``
    ``(..., L, K)``: the numpy statement, or the same sum compiled (``_slices.c``:
    ``barrier_action``, bit for bit: the slices added in order, as numpy adds along an outer
    axis; with one energy per entry numpy sums the slices pairwise, so that case stays here)."""
    routine = compiled_kernel("barrier_action") if compiled else None
    if routine is not None and z.shape[-2] * z.shape[-1] > 1 and z.shape[:-2] == edge.shape[:-1]:
        n = edge.shape[-1]
        zz = np.ascontiguousarray(z, dtype=float)
        out = np.empty(z.shape)
        flat = (-1, n)
        routine(
            n,
            lo,
            hi,
            HBAR2_2M0_EV_NM2,
            zz,
            np.ascontiguousarray(edge, dtype=float).reshape(flat),
            np.ascontiguousarray(mass, dtype=float).reshape(flat),
            np.ascontiguousarray(width, dtype=float).reshape(flat),
            np.ascontiguousarray(run, dtype=bool).reshape(flat),
            out,
        )
        return out
    # every slice of the barrier at once (axis -3 of the slices; z gets that axis too)
    h = edge[..., lo:hi, None, None] - z[..., None, :, :]
    kap = np.sqrt(mass[..., lo:hi, None, None] * np.maximum(h, 0.0) / HBAR2_2M0_EV_NM2)
    acc = np.where(run[..., lo:hi, None, None], kap * width[..., lo:hi, None, None], 0.0)
    return np.sum(acc, axis=-3)


def _theta(z, edge, mass, width, run, lo, hi):
    """WKB transparency ``exp(-2 int kappa dz)`` of the barrier ``run`` at energies ``z`` ``(..., L, K)``."""
    if hi <= lo:
        return np.ones(z.shape)
    return np.exp(-2.0 * _barrier_action(z, edge, mass, width, run, lo, hi))


@dataclass(frozen=True)
class _Barrier:
    """One barrier of an oriented profile as :func:`_lead_coupling` reads it."""

    run: np.ndarray  #: (..., n) its slices
    lo: int  #: the slices ``lo:hi`` hold every entry's run
    hi: int
    outer_mass: np.ndarray  #: (..., 1, 1) mass of the slice next to the lead, m0
    outer_edge: np.ndarray  #: (..., 1, 1) its band edge, eV
    near_edge: np.ndarray  #: (...) band edge of the lead's slice next to the barrier, eV


def _barriers(geo: _Geometry) -> tuple[_Barrier, _Barrier]:
    """The source-side and the drain-side barrier of ``geo``."""
    ex = lambda a: a[..., None, None]  # noqa: E731
    return (
        _Barrier(
            geo.run1,
            int(geo.outer1.min()),
            int(geo.inner1.max()) + 1,
            ex(geo.mass_at[..., 0]),
            ex(geo.edge_at[..., 0]),
            geo.edge_at[..., 5],
        ),
        _Barrier(
            geo.run2,
            int(geo.inner2.min()),
            int(geo.outer2.max()) + 1,
            ex(geo.mass_at[..., 3]),
            ex(geo.edge_at[..., 3]),
            geo.edge_at[..., 6],
        ),
    )


def _lead_coupling(z, lead_edges, lead_mass, barrier: _Barrier, edge, mass, width):
    """WKB coupling ``tau(z)`` of a lead through one barrier (module note 4): the step from
    the lead's band edge to the one next to the barrier, the interface factor there and the
    barrier's transparency; zero below the lead's band edge. One array per band edge of the
    lead in ``lead_edges`` (the same energies and barrier)."""
    ex = lambda a: np.asarray(a)[..., None, None]  # noqa: E731
    m_b = barrier.outer_mass
    kap = _kappa(m_b, barrier.outer_edge - z)
    theta = _theta(z, edge, mass, width, barrier.run, barrier.lo, barrier.hi)
    per_ev = ex(lead_mass) / HBAR2_2M0_EV_NM2
    out = []
    for lead_edge in lead_edges:
        kin = z - ex(lead_edge)
        # an accumulation layer lowers the edge next to the barrier below the lead's: the
        # electron meets the barrier with that larger kinetic energy (a depletion layer is
        # left out: its hump is not part of the barrier here, as before)
        local = np.minimum(lead_edge, barrier.near_edge)
        k_lead = np.sqrt(np.maximum(kin, 0.0) * per_ev)
        k = np.sqrt(np.maximum(z - ex(local), 0.0) * per_ev)
        step = 4.0 * k_lead * k / np.maximum((k_lead + k) ** 2, 1e-300)  # 1 where no layer
        tau = step * _interface_factor(k / ex(lead_mass), kap / m_b) * theta
        out.append(np.where(kin > 0.0, tau, 0.0))
    return out


def injecting_hump(profile: Profile, *, table, bias_v) -> tuple[np.ndarray, np.ndarray]:
    """The hump of the injecting side (module note 7): its WKB action and its top.

    The injecting side is every slice before the first barrier in forward bias, after the
    last in reverse (barriers as in :func:`sequential_integral_ev2`); the action is
    ``int kappa dz`` over its slices at the injecting contact's band edge (Landau and
    Lifshitz [9]_), the same sum as the well-charge search's gate
    (``electrostatics._hump_action``), 0 without a hump.

    Parameters
    ----------
    profile
        Band profiles, batch ``(n_stacks, n_biases)``, emitter edge at 0.
    table
        The :class:`~physics.stack.LayerTable` the profiles come from.
    bias_v
        Biases, V, batch-shaped.

    Returns
    -------
    action, top_ev
        Batch-shaped: the action, and the highest band edge of the injecting side (eV, on
        the profile's scale) where the action exceeds :data:`HUMP_ACTION` (``-inf``
        elsewhere).
    """
    edge, mass, _, width = profile.slice_arrays
    rel = table.edge_ev - table.edge_ev[:, :1]
    is_barrier = rel > BARRIER_MIN_EV
    is_barrier[:, [0, -1]] = False
    barrier = is_barrier[:, profile.layer_index]  # (stacks, n)
    n = barrier.shape[-1]
    has = barrier.any(axis=-1)
    first = np.where(has, np.argmax(barrier, axis=-1), 0)  # no side without a barrier
    last = np.where(has, n - 1 - np.argmax(barrier[:, ::-1], axis=-1), n - 1)
    rev = np.broadcast_to(np.asarray(bias_v, float), edge.shape[:-1]) < 0
    per_stack = (-1,) + (1,) * (edge.ndim - 1)  # (stacks, 1, ..., 1)
    # the columns some entry's side holds (a sweep of one polarity: one side per stack)
    if rev.any():
        lo, hi = (0 if (~rev).any() else int(last.min()) + 1), n
        col = np.arange(lo, hi)
        side = np.where(
            rev[..., None], col > last.reshape(per_stack), col < first.reshape(per_stack)
        )
        injecting = np.where(rev, edge[..., -1], 0.0)[..., None]
        height = np.where(side, edge[..., lo:hi] - injecting, 0.0)
    else:  # forward only: the emitter's edge is 0
        lo, hi = 0, int(first.max())
        side = np.arange(hi) < first.reshape(per_stack)
        height = np.where(side, edge[..., :hi], 0.0)
    action = np.zeros(rev.shape)
    top = np.full(rev.shape, -np.inf)
    np.maximum(height, 0.0, out=height)
    if not height.any():
        return action, top
    height *= mass[..., lo:hi]
    height /= HBAR2_2M0_EV_NM2
    kappa = np.sqrt(height, out=height)
    action = np.sum(kappa * width[..., lo:hi], axis=-1)
    behind = np.nonzero(action > HUMP_ACTION)  # the top where the gate is open
    side = np.broadcast_to(side, kappa.shape)[behind]
    top[behind] = np.max(np.where(side, edge[..., lo:hi][behind], -np.inf), axis=-1)
    return action, top


def hump_weight(action):
    """The weight ``w`` of module note 7 at a hump's ``action``: 0 up to :data:`HUMP_ACTION`,
    1 from :data:`HUMP_FULL_ACTION`, a smoothstep between."""
    action = np.asarray(action, float)
    if not (action > HUMP_ACTION).any():
        return np.zeros(action.shape)
    x = np.clip((action - HUMP_ACTION) / (HUMP_FULL_ACTION - HUMP_ACTION), 0.0, 1.0)
    return x * x * (3.0 - 2.0 * x)


def _hump_factor(z, edge, mass, width, geo: _Geometry, barrier: _Barrier, weight):
    """``H(z)^w`` of module note 7 at energies ``z`` ``(..., L, K)`` of an oriented profile:
    the hump's (the source side's) transparency in series with the source barrier's,
    against the barrier's alone; exactly 1 where ``weight`` (``(...)``) is 0."""
    out = np.ones(z.shape)
    rows = np.nonzero(weight > 0.0)
    if not rows[0].size:
        return out
    e, m, d, zz = edge[rows], mass[rows], width[rows], z[rows]
    t_b = _theta(zz, e, m, d, barrier.run[rows], barrier.lo, barrier.hi)
    t_h = _theta(zz, e, m, d, geo.source[rows], 0, int(geo.outer1.max()))
    series = t_h / np.maximum(t_b + t_h - t_b * t_h, 1e-300)
    out[rows] = series ** weight[rows][..., None, None]
    return out


#: How sharply the WKB couplings' ratio assigns the larger root to a lead (note 4)
WKB_SHARPNESS = 6.0


def _split_widths(peak, width, tau_l, tau_r, drain_ev=None):
    """``(Gamma_L, Gamma_R)`` from ``T_p = 4 G_L G_R / G^2``, ``G = G_L + G_R``; the larger to
    the lead whose WKB coupling ``tau`` is larger (the two assignments mixed geometrically
    where the couplings are close, note 4) or, where ``drain_ev`` (a known ``Gamma_R``) is
    given and finite, the root nearer it (by ratio) to the drain."""
    root = np.sqrt(np.clip(1.0 - peak, 0.0, 1.0))
    big, small = 0.5 * width * (1.0 + root), 0.5 * width * (1.0 - root)
    left_big = _larger_share(tau_l, tau_r)
    if drain_ev is not None:  # small * big >= drain^2: the small root is the nearer one
        known = np.isfinite(drain_ev) & (drain_ev > 0)
        # by ratio: the two assignments mixed where the drain width lies near the roots'
        # geometric mean (the share rule on squared widths, so twice as sharp in the drain
        # width's ratio to that mean as the WKB share is in tau_R / tau_L)
        left_big = np.where(known, _larger_share(small * big, drain_ev**2), left_big)
    big, small = np.maximum(big, 1e-300), np.maximum(small, 1e-300)
    return _geometric_mix(left_big, big, small), _geometric_mix(left_big, small, big)


def _larger_share(a, b):
    """``1 / (1 + (b / a)^WKB_SHARPNESS)`` of positive ``a``, ``b``: near 1 where ``a`` is the
    larger by some 30 % or more, near 0 where ``b`` is, 1/2 where they are equal; ``a >= b``
    (1 or 0) where the ratio is not finite (note 4)."""
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        share = 1.0 / (1.0 + (b / a) ** WKB_SHARPNESS)
    return np.where(np.isfinite(share), share, (a >= b).astype(float))


def _geometric_mix(weight, a, b):
    """``a^weight b^(1 - weight)`` of positive ``a``, ``b``."""
    mixed = weight * np.log(a)
    mixed += (1.0 - weight) * np.log(b)
    return np.exp(mixed)


def _slices_profile(edge, mass, alpha, width) -> Profile:
    """The :class:`Profile` of an oriented profile's slices (``(..., n)`` each), one layer a
    slice."""
    return Profile(
        edge_ev=edge,
        mass_m0=mass,
        nonparabolicity_per_ev=alpha,
        width_nm=width,
        layer_index=np.arange(edge.shape[-1]),
    )


def _find_states(edge, mass, alpha, width, geo, top, high, params):
    """Quasi-bound states of the profile with its source side lowered to the drain's edge:
    lines below ``top`` (the lower barrier's inner edge) by more than their width. Returns
    their centre, width, peak, ``valid`` and how far each line is resolved
    (:func:`_resolved_share`)."""
    e_r = edge[..., -1]
    lowered = np.where(geo.source, np.minimum(edge, e_r[..., None]), edge)
    probe = _slices_profile(lowered, mass, alpha, width)
    lo = np.maximum(e_r, geo.well_bottom_ev) + 1e-4
    hi = np.maximum(high, lo + 1e-3)
    # quadratic from the bottom, where the lowest state lies: a narrow line (tens of ueV) on a
    # rising background is a local maximum of T only on a grid finer than some 15 meV near it;
    # up to the barrier's inner edge where the window reaches above it (no state lies higher:
    # a 0.2 eV barrier under a window to 1 eV left 14 of the 32 nodes to the states, 14 meV
    # apart, and a 21 meV line was a maximum at some biases only)
    end = np.minimum(hi, np.maximum(top, lo + 1e-3))
    grid = lo[..., None] + (end - lo)[..., None] * _spaced(0.0, 1.0, params.n_search) ** 2
    # and on to the barrier's inner edge: a broad state above the window reaches into it with
    # its line's tail (found only inside the window, it set in at full strength there); in
    # steps growing geometrically from the last one of the window's grid, so that a narrow
    # state just above the window is a maximum on every bias (module note 6)
    ceiling = np.maximum(top, hi)
    span = ceiling - end
    first = np.minimum(end - grid[..., -2], span)
    with np.errstate(divide="ignore", invalid="ignore"):
        growth = np.where(first > 0, span / first, 1.0)
    above = end[..., None] + first[..., None] * growth[..., None] ** _spaced(
        0.0, 1.0, params.n_above
    )
    grid = np.concatenate([grid, above], axis=-1)
    # candidates: the tallest maxima of the coarse T and the lowest ones (a narrow deep state
    # shows on the coarse grid only as a small maximum of its tails, below the upper lines)
    k = params.n_states + 2
    center, gamma, peak, valid = grid_maxima(grid, profile=probe, n_max=k, n_first=k)
    # a maximum without a half-maximum width is no state (NaN: not valid below)
    gamma, peak = _half_maximum_width(center, gamma, peak, valid, probe, unresolved_width=np.nan)
    e_w, well_nm, _ = _kinetic_ev(center, geo, edge=edge, mass=mass, width=width)
    valid &= (
        np.isfinite(gamma)
        & (gamma > 0)
        & (gamma < top[..., None] - center)
        & (center > lo[..., None])
        & (center < ceiling[..., None])
        & geo.has[..., None]
        & (e_w >= CONFINED_SHARE * _box_energy_ev(center, geo, well_nm))
    )
    # the lowest states (the tallest peaks need not be the lowest)
    order = np.argsort(np.where(valid, center, np.inf), axis=-1)[..., : params.n_states]
    center, gamma, peak, valid = _take_last(order, center, gamma, peak, valid)
    return center, gamma, peak, valid, _resolved_share(center, gamma, peak, valid, probe)


def _half_maximum_width(
    center, gamma, peak, valid, profile, *, peak_at_center=False, unresolved_width=None
):
    """Widths of the lines ``center`` (fitted width ``gamma``, peak ``peak``) from ``T`` at
    ``center +- gamma / 2``: on each side the Lorentzian through the peak and that point,
    ``2 d / sqrt(T_p / T(E_n + d) - 1)``, the two sides averaged. With ``peak_at_center``
    the peak is ``T`` computed at ``center`` (in the same call), for lines whose ``peak`` is
    a fit's value. Returns the widths and the peaks.

    The fit's width is the curvature of 1/T over its last bracket, whose spacing depends on
    the refinement's path; near the band edge a state's line is not Lorentzian, and that
    width moved by 2 % with rounding-level changes of ``T`` (a stack swept alone or beside
    others); a broad line (15 to 25 meV) moved by 10 % where its refinement's start moved
    across a coarse node, and its fitted peak (the parabola's, clipped at 1) with it
    (module note 4). At the half-maximum points the width of a near-Lorentzian line depends
    on the fit only to second order. Exact for a Lorentzian.

    A line whose ``T`` at a half-maximum point is not below its peak has no half-maximum
    width there (a ripple of a nearly transparent stack, no quasi-bound state's line): it
    keeps the fit's width, or gets ``unresolved_width`` where that is given.
    """
    ok = valid & np.isfinite(gamma) & (gamma > 0) & np.isfinite(peak) & (peak > 0)
    if not ok.any():
        return gamma, peak
    where = np.nonzero(ok)
    d = 0.5 * gamma[where]
    steps = np.array([-1.0, 0.0, 1.0]) if peak_at_center else np.array([-1.0, 1.0])
    energy = center[where][:, None] + d[:, None] * steps
    t = transmission_rows(energy, profile=profile, rows=where[:-1])
    at_peak = t[:, 1] if peak_at_center else peak[where]
    if peak_at_center:
        t = t[:, ::2]
    ratio = at_peak[:, None] / np.maximum(t, 1e-300) - 1.0
    side = np.where(ratio > 0, 2.0 * d[:, None] / np.sqrt(np.maximum(ratio, 1e-300)), np.nan)
    width = 0.5 * (side[:, 0] + side[:, 1])  # np.mean's numbers
    out, out_peak = gamma.copy(), np.array(peak, dtype=float, copy=True)
    good = np.isfinite(width) & (width > 0)
    fallback = gamma[where] if unresolved_width is None else unresolved_width
    out[where] = np.where(good, width, fallback)
    out_peak[where] = np.where(good, at_peak, peak[where])
    return out, out_peak


def _match_lines(e_n, gamma_p, peak_p, valid, lines, top, unmatched=None):
    """The coherent line that is each state (its centre, width and peak are exact there).

    A state is matched only when it and the line both lie above the emitter band edge by
    more than their widths (nearer, the device's ``T`` shows the rise of the state's tail
    at the band edge, no Lorentzian line: its fitted ``Gamma_L`` against the emitter's
    coupling there, which vanishes at the edge, overstated ``Gamma_L(z)`` 20 times and the
    current 6.5 times within 4 uV of bias on a GaAs/AlGaAs stack) and a narrow line lies
    within its width (lowering the emitter side moves a state by a fraction of its
    width), and not where ``unmatched`` (``(...)``, behind a hump: module note 7). Returns
    the state's centre, width and peak and ``matched``, all ``(..., L)``.
    """
    d = np.abs(e_n[..., :, None] - lines["center_ev"][..., None, :])
    narrow = lines["valid"] & (lines["width_ev"] < top[..., None] - lines["center_ev"])
    d = np.where(narrow[..., None, :], d, np.inf)
    near = np.argmin(d, axis=-1)
    line_width, line_center, line_peak = _take_last(
        near, lines["width_ev"], lines["center_ev"], lines["peak"]
    )
    matched = (
        valid
        & (e_n > gamma_p)
        & (line_center > line_width)
        & (np.min(d, axis=-1) < 0.5 * (gamma_p + line_width))
        & ((line_peak >= MATCH_PEAK_SHARE * peak_p) | (e_n < MATCH_EDGE_WIDTHS * gamma_p))
    )
    if unmatched is not None:
        matched &= ~unmatched[..., None]
    center = np.where(valid, np.where(matched, line_center, e_n), 0.0)
    width = np.where(valid, np.where(matched, line_width, gamma_p), 1.0)
    peak = np.where(matched, line_peak, peak_p)
    return center, width, peak, matched


def _bound_share(center, gamma, top):
    """How far each state counts as bound (note 6): 0 within its width ``gamma`` of the lower
    barrier's inner edge ``top``, 1 from two widths below it, a smoothstep between."""
    with np.errstate(invalid="ignore", divide="ignore"):
        t = np.clip((top[..., None] - center) / gamma - 1.0, 0.0, 1.0)
    return np.where(np.isfinite(t), t * t * (3.0 - 2.0 * t), 1.0)


def _resolved_share(center, gamma, peak, valid, probe):
    """How far each state's line is resolved from its surroundings (note 6): on each side the
    lowest ``T`` of the probe at :data:`DIP_OFFSETS` widths ``gamma`` from the centre (the
    dip towards the next line or the background), the higher side's against the peak: 1
    where it is below :data:`RESOLVED_BELOW` of it, 0 where it reaches it, a smoothstep
    between. The lines whose ``T`` one width away is below that on both sides (every line of
    a usual stack) are resolved without the other offsets."""
    share = np.ones_like(center)
    ok = valid & np.isfinite(gamma) & (gamma > 0) & np.isfinite(peak) & (peak > 0)
    for offsets in (np.array([1.0]), DIP_OFFSETS):
        where = np.nonzero(ok)
        if not where[0].size:
            break
        steps = np.concatenate([-offsets, offsets])
        energy = center[where][:, None] + gamma[where][:, None] * steps
        t = transmission_rows(energy, profile=probe, rows=where[:-1]).reshape(-1, 2, offsets.size)
        dip = np.max(np.min(t, axis=-1), axis=-1) / peak[where]
        x = np.clip((1.0 - dip) / (1.0 - RESOLVED_BELOW), 0.0, 1.0)
        share[where] = x * x * (3.0 - 2.0 * x)
        ok[where] = x < 1.0  # decided where resolved one width away
    return share


def _towards_probe(trust, line, probe, matched):
    """``line^trust probe^(1 - trust)`` where ``matched`` and both are positive, else ``line``."""
    both = matched & (line > 0) & (probe > 0)
    return np.where(
        both, _geometric_mix(trust, np.where(both, line, 1.0), np.where(both, probe, 1.0)), line
    )


def _state_widths(
    edge,
    mass,
    width,
    geo,
    barriers,
    e_n,
    width_c,
    peak_c,
    matched,
    kt,
    params,
    probe,
    bound,
    hump=None,
):
    """Per state: ``Gamma_R``, the scale of ``Gamma_L(z)``, ``Gamma_t`` and the rates (notes 4-5);
    ``probe``: the width, peak and centre of the probe's line of each state; ``bound``: the
    share of the rates each state takes (:func:`_bound_share`); ``hump``: the weight of the
    source side's hump, ``(...)`` (note 7), or ``None``."""
    n = edge.shape[-1]
    z = e_n[..., None]
    (tau_r,) = _lead_coupling(z, (edge[..., -1],), mass[..., n - 1], barriers[1], edge, mass, width)
    tau_r = tau_r[..., 0]
    # the left coupling at E_n of the line's own profile: the device's (matched) or the probe's
    tau_l_dev, tau_l_probe = (
        t[..., 0]
        for t in _lead_coupling(
            z, (0.0, edge[..., -1]), mass[..., 0], barriers[0], edge, mass, width
        )
    )
    if hump is not None:  # the device's coupling through the hump as well (note 7)
        tau_l_dev = tau_l_dev * _hump_factor(z, edge, mass, width, geo, barriers[0], hump)[..., 0]
    tau_l = np.where(matched, tau_l_dev, tau_l_probe)
    # the probe's line (its source side lowered, its drain side the device's) sets which root
    # of a matched line is the drain's: near the emitter edge the device line's Gamma_L
    # vanishes while the WKB estimate still calls the thinner barrier the more transparent
    gamma_l_probe, gamma_r_probe = _split_widths(probe[1], probe[0], tau_l_probe, tau_r)
    gamma_l, gamma_r = _split_widths(
        peak_c, width_c, tau_l, tau_r, drain_ev=np.where(matched, gamma_r_probe, np.nan)
    )
    scale = gamma_l / np.maximum(tau_l, 1e-300)  # Gamma_L(z) = scale tau_L(z)
    kinetic = _kinetic_ev(e_n, geo, edge=edge, mass=mass, width=width)
    g_ifr, g_lo, floor2, bose = scattering_widths_ev(
        e_n, geo, edge=edge, mass=mass, width=width, kinetic=kinetic, kt_ev=kt, params=params
    )
    g_ifr, g_lo = bound * g_ifr, bound * g_lo
    # near the emitter edge the device line is no clean line (note 4): its scale, drain
    # width, coherent width and centre are mixed with the probe's, the line's own only where
    # the energies the channel samples about the state (its supply's kT and its line's half
    # width) lie above the matching threshold (the widths), so that the weight is 0 where
    # matching stops (the centre and the coherent width unmixed until 2026-12-05: a 3 % step
    # of the current there; the couplings and scattering widths stay at the line's centre)
    scale_probe = gamma_l_probe / np.maximum(tau_l_probe, 1e-300)
    spread = kt[..., None] + 0.5 * (width_c + g_ifr)
    trust = -np.expm1(-np.maximum(e_n - np.maximum(probe[0], width_c), 0.0) / spread)
    if hump is not None:  # the line's own share fades with the hump's weight (note 7)
        trust = trust * (1.0 - hump[..., None])
    line_scale = scale
    scale = _towards_probe(trust, scale, scale_probe, matched)
    gamma_r = _towards_probe(trust, gamma_r, gamma_r_probe, matched)
    unmatched_coh = scale * tau_l_dev + gamma_r
    gamma_coh = np.where(
        matched, _towards_probe(trust, width_c, unmatched_coh, matched), unmatched_coh
    )
    return {
        "e_n": np.where(matched, probe[2] + trust * (e_n - probe[2]), e_n),
        "gamma_r": gamma_r,
        "scale": scale,
        "line_scale": line_scale,  # the state's own line's, before the mixing (diagnostics)
        "gamma_coh": gamma_coh,
        "gamma_t": gamma_coh + g_ifr,
        "g_ifr": g_ifr,
        "g_lo": g_lo,
        "floor2": floor2,
        "bose": bose,
        "hw": geo.lo_phonon_ev[..., None] * np.ones_like(e_n),
        "e_w": kinetic.e_w_ev,
        # q^2 Lambda^2 / 4 per eV of lateral energy gained (note 2)
        "lateral_per_ev": (geo.well_mass_m0[..., None] / (2.0 * HBAR2_2M0_EV_NM2))
        * 0.5
        * params.roughness_length_nm**2
        * np.ones_like(e_n),
    }


@lru_cache(maxsize=16)
def _spaced(start: float, stop: float, n: int) -> np.ndarray:
    """``np.linspace(start, stop, n)``, made once (read-only)."""
    out = np.linspace(start, stop, n)
    out.flags.writeable = False
    return out


#: :func:`_energy_nodes`: the supply's top above the higher Fermi level, kT (its occupation
#: there exp(-10), 5e-5), and the uniform nodes above it
SUPPLY_KT = 10.0
TAIL_NODES = 8

#: the geometric steps of :func:`_energy_nodes` above 0 and ``-hbar w``, eV
_GEOMETRIC_EV = 0.02 * 0.5 ** np.arange(8.0)
_GEOMETRIC_EV.flags.writeable = False


def _energy_nodes(st, high_ev, supply_top_ev, params):
    """Total-energy nodes ``(..., L, K)``: uniform over the window, all but
    :data:`TAIL_NODES` of them below ``supply_top_ev`` (the higher Fermi level plus
    :data:`SUPPLY_KT` kT, where the supply lives), sinh-spaced about ``E_n``, and geometric
    above 0 and ``-hbar w`` (where ``Gamma_L(z)`` and ``Gamma_L(z + hbar w)`` set in)."""
    e_n, gamma_t, hw = st["e_n"], st["gamma_t"], st["hw"]
    e_lo = np.minimum(-hw, 0.0) - 1e-4
    e_hi = np.maximum(high_ev[..., None], e_lo + 1e-3)
    e_mid = np.clip(supply_top_ev[..., None], e_lo + 1e-3, e_hi)
    dense = _spaced(0.0, 1.0, params.n_uniform - TAIL_NODES)
    tail = _spaced(0.0, 1.0, TAIL_NODES + 1)[1:]
    s = _spaced(-1.0, 1.0, params.n_line)
    half = 0.5 * gamma_t
    a = np.arcsinh((e_lo - e_n) / half)
    b = np.arcsinh((e_hi - e_n) / half)
    mid, rad = 0.5 * (a + b), 0.5 * (b - a)
    about = e_n[..., None] + half[..., None] * np.sinh(mid[..., None] + rad[..., None] * s)
    nodes = np.concatenate(
        [
            e_lo[..., None] + (e_mid - e_lo)[..., None] * dense,
            e_mid[..., None] + (e_hi - e_mid)[..., None] * tail,
            about,
            np.broadcast_to(_GEOMETRIC_EV, e_n.shape + _GEOMETRIC_EV.shape),
            -hw[..., None] + _GEOMETRIC_EV,
        ],
        axis=-1,
    )
    return np.sort(np.clip(nodes, e_lo[..., None], e_hi[..., None]), axis=-1)


def _couplings(both, steps, st, edge, mass, width, barrier: _Barrier, hump=None):
    """Reservoir couplings ``g_L, g_R`` (elastic) and ``p_L, p_R`` (phonon emission, per
    ``N + 1``) at the total energies ``nodes`` (module notes 1-3).

    ``both`` is ``nodes`` and ``nodes + hbar w`` side by side along the last axis
    (``(..., L, 2K)``), ``steps`` the ``np.diff`` of ``nodes``; ``hump``: the factor of
    ``Gamma_L`` at ``both`` behind a hump (:func:`_hump_factor`, note 7), or ``None``."""

    def ex(q):
        return q[..., None]

    def cumulative(y):
        out = np.empty(y.shape)
        out[..., 0] = 0.0
        np.cumsum(0.5 * (y[..., 1:] + y[..., :-1]) * steps, axis=-1, out=out[..., 1:])
        return out

    n_k = both.shape[-1] // 2
    nodes = both[..., :n_k]
    e_n, gamma_t, hw = ex(st["e_n"]), ex(st["gamma_t"]), ex(st["hw"])
    g_ifr, g_lo, gamma_r = ex(st["g_ifr"]), ex(st["g_lo"]), ex(st["gamma_r"])
    flr = 1.0 / ex(st["floor2"])
    flr_lo = 1.0 / ex(bulk_floor2_ev2(st["e_w"]))  # the phonon's (bulk) floor, note 3
    above = nodes - e_n  # E - E_n, used five times below
    # roughness gives lateral momentum q with weight exp(-q^2 Lambda^2 / 4) (Gaussian
    # correlation): an emitter electron entering the state gains z - E_n of lateral energy
    lateral = np.exp(-ex(st["lateral_per_ev"]) * np.maximum(above, 0.0))
    # tau_L at z = E and at z = E + hbar w in one call (same barrier, same lead)
    (tau_both,) = _lead_coupling(both, (0.0,), mass[..., 0], barrier, edge, mass, width)
    if hump is not None:
        tau_both = tau_both * hump
    gl_el = ex(st["scale"]) * tau_both[..., :n_k] * lateral
    gl_lo = ex(st["scale"]) * tau_both[..., n_k:]
    half2 = 0.25 * gamma_t**2
    lor = 1.0 / (above**2 + half2)
    exists = 0.5 + np.arctan(2.0 * above / gamma_t) / np.pi
    g_left = g_ifr * (cumulative(gl_el * lor) + 0.5 * exists * cumulative(gl_el) * flr)
    # phonon emission, off-resonant (note 3): the emitter's non-resonant amplitude in the
    # well (the floor) at z = y + hbar w, landing at longitudinal y in the state that exists
    # at total energy E; Frohlich's 1/q^2 summed over q_z favours |y - E_n| << e_w
    reach = np.sqrt((np.abs(above) + 0.5 * gamma_t) / ex(st["e_w"]))  # q / q_w
    p_left = g_lo * exists * cumulative(gl_lo * flr_lo * lo_landing_weight(reach))

    g2 = 2.0 / gamma_t

    def right(rate, floor_rate, centre, bottom, offset, floor):  # the drain's (constant
        lower = bottom - centre  # Gamma_R): closed form; offset: E - centre
        top = np.maximum(offset, lower)
        arc = g2 * (np.arctan(g2 * top) - np.arctan(g2 * lower))
        return gamma_r * (rate * arc + floor_rate * exists * (top - lower) * floor)

    e_r = ex(ex(edge[..., -1]))
    g_right = right(g_ifr, 0.5 * g_ifr, e_n, e_r, above, flr)
    # (the drain's phonon term without the forward weight: an upper bound of a minor term)
    e_down = e_n - hw
    p_right = exists * right(g_lo, g_lo, e_down, e_r - hw, nodes - e_down, flr_lo)
    return g_left, g_right, p_left, p_right


def _reservoir_fluxes(both, couplings, bose, mu_left, mu_right, kt):
    """Flux from the left lead into the reservoir and from it to the right lead, per energy.

    ``both``: the nodes and the nodes plus ``hbar w``, side by side (:func:`_couplings`).
    The occupation ``f_w`` makes the reservoir's net current zero at every energy.
    """
    g_l, g_r, p_l, p_r = couplings
    n_k = both.shape[-1] // 2
    occ_l = occupation(both, mu_ev=mu_left, kt_ev=kt)
    occ_r = occupation(both, mu_ev=mu_right, kt_ev=kt)
    f_l, fu_l = occ_l[..., :n_k], occ_l[..., n_k:]
    f_r, fu_r = occ_r[..., :n_k], occ_r[..., n_k:]
    emit_l, emit_r = (bose + 1.0) * p_l, (bose + 1.0) * p_r
    absorb_l, absorb_r = bose * p_l, bose * p_r
    # products and complements used twice, made once (the same numbers)
    in_l, in_r = emit_l * fu_l, emit_r * fu_r
    empty_l, empty_r = 1.0 - fu_l, 1.0 - fu_r
    num = g_l * f_l + g_r * f_r + in_l + in_r
    den = g_l + g_r + in_l + absorb_l * empty_l + in_r + absorb_r * empty_r
    f_w = np.where(den > 0, num / np.maximum(den, 1e-300), 0.0)
    free = 1.0 - f_w
    flux_l = g_l * (f_l - f_w) + in_l * free - absorb_l * f_w * empty_l
    flux_r = g_r * (f_w - f_r) - in_r * free + absorb_r * f_w * empty_r
    return flux_l, flux_r


#: the per-state values of the compiled node passes, in the order of ``_slices.c`` (``NODE_P``)
_NODE_STATE = (
    "e_n",
    "gamma_t",
    "hw",
    "g_ifr",
    "g_lo",
    "gamma_r",
    "floor2",
    "lateral_per_ev",
    "scale",
    "e_w",
    "bose",
)


def _compiled_node_fluxes(both, steps, st, edge, mass, width, barrier, mu_left, mu_right, kt):
    """:func:`_couplings` and :func:`_reservoir_fluxes` compiled: two passes (``_slices.c``:
    ``node_arguments``, ``node_fluxes``) around numpy's ``exp``, ``arctan`` and ``tanh``, each
    called once on all its arguments; the numbers of the numpy statement bit for bit (the
    same operations in the same order, no fused multiply-add; ``tests/test_kernel_backends.py``).
    None where the routines are not built or not in use (the caller runs the numpy statement)."""
    arguments, fluxes = compiled_kernel("node_arguments"), compiled_kernel("node_fluxes")
    shape, k = both.shape[:-1], both.shape[-1] // 2  # batch + (L,), nodes per state
    if arguments is None or fluxes is None or k < 2 or shape[:-1] != edge.shape[:-1]:
        return None
    per_entry = (
        edge[..., -1],
        mu_left,
        mu_right,
        kt,
        mass[..., 0],
        barrier.outer_mass[..., 0, 0],
        barrier.outer_edge[..., 0, 0],
        np.minimum(0.0, barrier.near_edge),
    )
    par = np.empty(shape + (len(_NODE_STATE) + len(per_entry),))
    for i, name in enumerate(_NODE_STATE):
        par[..., i] = st[name]
    for i, value in enumerate(per_entry, start=len(_NODE_STATE)):
        par[..., i] = np.asarray(value)[..., None]
    rows, n = math.prod(shape), edge.shape[-1]
    flat = (-1, n)
    exp_arg, atan_arg = np.empty(rows * 3 * k), np.empty(rows * (3 * k + 2))
    tanh_arg = np.empty(rows * 4 * k)
    both = np.ascontiguousarray(both)
    arguments(
        shape[-1],
        k,
        par,
        both,
        n,
        barrier.lo,
        barrier.hi,
        HBAR2_2M0_EV_NM2,
        np.ascontiguousarray(edge, dtype=float).reshape(flat),
        np.ascontiguousarray(mass, dtype=float).reshape(flat),
        np.ascontiguousarray(width, dtype=float).reshape(flat),
        np.ascontiguousarray(barrier.run, dtype=bool).reshape(flat),
        exp_arg,
        atan_arg,
        tanh_arg,
    )
    flux_l, flux_r = np.empty(shape + (k,)), np.empty(shape + (k,))
    fluxes(
        k,
        HBAR2_2M0_EV_NM2,
        par,
        both,
        np.ascontiguousarray(steps),
        np.exp(exp_arg, out=exp_arg),  # in place: no second buffer
        np.arctan(atan_arg, out=atan_arg),
        np.tanh(tanh_arg, out=tanh_arg),
        flux_l,
        flux_r,
    )
    return flux_l, flux_r


def sequential_fluxes_ev2(
    *,
    edge,
    mass,
    alpha,
    width,
    barrier,
    phonon,
    mu_left_ev,
    mu_right_ev,
    kt_ev,
    high_ev,
    lines,
    params: ScatteringParameters,
    per_stack: bool = False,
    hump=None,
):
    """Sequential flux into the well from the left lead and out of it to the right, eV^2.

    Arrays are an oriented profile (source contact on the left at band edge 0,
    ``(..., n)``): ``barrier`` marks barrier slices; ``phonon`` is
    ``(lo_phonon_ev, permittivity_high_r, permittivity_r)``, each ``(..., n)``.
    ``lines`` holds the coherent ``T``'s lines found on this profile
    (``center_ev``, ``width_ev``, ``peak``, ``valid``; ``(..., R)``).

    Returns ``(left, right, reduction)``: the two ``(...)`` integrals (equal:
    the reservoir conserves current) to be multiplied by the Tsu-Esaki
    prefactor, and the states' ``center_ev``, ``width_ev`` (coherent),
    ``gamma_s_ev`` and ``valid`` (``(..., L)``) for :func:`coherent_factor`.

    Parameters
    ----------
    edge, mass, alpha, width
        The oriented profile's slices: band edge (eV, source contact at 0), mass (m0),
        nonparabolicity (1/eV) and width (nm), ``(..., n)`` each.
    barrier
        Which slices are barriers, ``(..., n)``.
    phonon
        ``(lo_phonon_ev, permittivity_high_r, permittivity_r)``, ``(..., n)`` each.
    mu_left_ev, mu_right_ev
        Fermi levels of the source (left) and drain (right) leads, eV, ``(...)``.
    kt_ev
        Thermal energy kT, eV, ``(...)``.
    high_ev
        Top of the energy window, eV, ``(...)``.
    lines
        The coherent ``T``'s lines on this profile (see above).
    params
        Channel settings.
    per_stack
        Whether ``mass``, ``width``, ``barrier`` and ``phonon`` are the same at every bias
        (axis -2) of a stack: the well and the barriers are then found once per stack
        (``barrier`` and ``phonon`` may then be ``(..., 1, n)``).
    hump
        The weight of the source side's hump (:func:`hump_weight`, module note 7), ``(...)``;
        ``None`` or 0: no hump.
    """
    geo = _geometry(edge, mass, width, barrier, *phonon, per_stack=per_stack)
    kt = np.broadcast_to(kt_ev, geo.has.shape)
    # a quasi-bound state lies below the lower barrier's inner edge by more than its width
    # (a bound independent of temperature: the channel stays on in the cold)
    top = np.minimum(geo.edge_at[..., 1], geo.edge_at[..., 2])
    e_p, gamma_p, peak_p, valid, resolved = _find_states(
        edge, mass, alpha, width, geo, top, high_ev, params
    )
    weight = None if hump is None or not np.any(hump > 0) else np.broadcast_to(hump, top.shape)
    e_n, width_c, peak_c, matched = _match_lines(e_p, gamma_p, peak_p, valid, lines, top)
    if weight is not None and (weight >= 1.0).any():  # behind a full hump: no line (note 7)
        e_n, width_c, peak_c, matched = _match_lines(
            e_p, gamma_p, peak_p, valid, lines, top, unmatched=weight >= 1.0
        )
    # a matched line's width and peak as the probe's: T at its centre and half-maximum points
    device = _slices_profile(edge, mass, alpha, width)
    width_c, peak_c = _half_maximum_width(
        e_n, width_c, peak_c, matched, device, peak_at_center=True
    )
    barriers = _barriers(geo)
    st = _state_widths(
        edge,
        mass,
        width,
        geo,
        barriers,
        e_n,
        width_c,
        peak_c,
        matched,
        kt,
        params,
        (gamma_p, peak_p, e_p),
        _bound_share(e_p, gamma_p, top) * resolved,
        weight,
    )
    # the states' coherent transmission goes from width Gamma to Gamma_t (Buttiker)
    reduction = {
        "center_ev": e_n,
        "width_ev": st["gamma_coh"],
        "valid": valid,
        "gamma_s_ev": st["gamma_t"] - st["gamma_coh"],
    }
    supply_top = np.maximum(mu_left_ev, mu_right_ev) + SUPPLY_KT * kt
    nodes = _energy_nodes(st, high_ev, supply_top, params)
    # the nodes and the nodes one phonon energy up, side by side: the coupling and the
    # occupations at both in one call each
    both = np.concatenate([nodes, nodes + st["hw"][..., None]], axis=-1)
    steps = np.diff(nodes)
    fluxes = None
    hump_nodes = None
    if weight is not None:  # behind a hump: the numpy statement with its factor (note 7)
        hump_nodes = _hump_factor(both, edge, mass, width, geo, barriers[0], weight)
    else:
        fluxes = _compiled_node_fluxes(
            both, steps, st, edge, mass, width, barriers[0], mu_left_ev, mu_right_ev, kt
        )
    if fluxes is None:  # the numpy statement
        couplings = _couplings(both, steps, st, edge, mass, width, barriers[0], hump_nodes)

        def ex2(q):
            return np.asarray(q)[..., None, None]

        fluxes = _reservoir_fluxes(
            both,
            couplings,
            st["bose"][..., None],
            ex2(mu_left_ev),
            ex2(mu_right_ev),
            ex2(kt),
        )
    flux_l, flux_r = fluxes
    weights = 0.5 * steps

    def integral(y):
        per_state = np.sum(weights * (y[..., 1:] + y[..., :-1]), axis=-1)
        return np.sum(np.where(valid, per_state, 0.0), axis=-1)

    return integral(flux_l), integral(flux_r), reduction


def sequential_integral_ev2(
    profile: Profile,
    *,
    table,
    bias_v,
    mu_emitter_ev,
    kt_ev,
    high_ev,
    lines,
    params: ScatteringParameters,
    hump_action=None,
):
    """Scattering-assisted current integral of every (stack, bias), either polarity.

    Parameters
    ----------
    profile
        Band profiles, batch ``(n_stacks, n_biases)``, emitter edge at 0.
    table
        The :class:`~physics.stack.LayerTable` the profiles come from (barriers,
        phonons of the well).
    bias_v, mu_emitter_ev, kt_ev, high_ev
        Batch-shaped bias, emitter Fermi level, kT and the window's top, eV.
    lines
        The coherent ``T``'s lines (``center_ev``, ``width_ev``, ``peak``,
        ``valid``; ``batch + (R,)``) from :mod:`physics.current`.
    params
        Channel settings.
    hump_action
        The WKB action of the injecting side's hump (:func:`injecting_hump`), batch-shaped;
        ``None``: computed here.

    Returns
    -------
    left, right, reduction
        Emitter-side and collector-side integrals, eV^2 (equal; multiply by the
        Tsu-Esaki prefactor and the emitter mass for A/m^2), positive from
        emitter to collector; and the states for :func:`coherent_factor`
        (centres on the device's energy scale).

    Notes
    -----
    Under reverse bias the profile is turned around (the collector becomes the
    source side) and the sign of the result changed.
    """
    edge, mass, alpha, width = profile.slice_arrays
    shape = edge.shape
    if hump_action is None:
        hump_action = injecting_hump(profile, table=table, bias_v=bias_v)[0]
    li = profile.layer_index
    rel = table.edge_ev - table.edge_ev[:, :1]
    is_barrier = rel > BARRIER_MIN_EV
    is_barrier[:, [0, -1]] = False
    layer_data = [is_barrier]
    for name, default in (
        ("lo_phonon_ev", DEFAULT_LO_PHONON_EV),
        ("permittivity_high_r", DEFAULT_PERMITTIVITY_HIGH_R),
    ):
        value = getattr(table, name)
        layer_data.append(np.full(rel.shape, default) if value is None else value)
    layer_data.append(table.permittivity_r)
    per_slice = [d[:, li][:, None, :] for d in layer_data]  # (stacks, 1, n)
    rev = np.asarray(bias_v) < 0
    e_right = edge[..., -1]
    shift = np.where(rev, e_right, 0.0)
    turned = bool(rev.any())

    def orient(a):
        if not turned:  # the same numbers as np.where below, without the copy
            return a
        return np.where(rev[..., None], a[..., ::-1], a)

    edge_o = orient(edge) - shift[..., None] if turned else edge  # (x - 0 is x: no copy)
    mu_c = mu_emitter_ev - bias_v
    mu_left = np.where(rev, mu_c, mu_emitter_ev) - shift
    mu_right = np.where(rev, mu_emitter_ev, mu_c) - shift
    lines_o = dict(lines, center_ev=lines["center_ev"] - shift[..., None])
    # masses, widths and layer data the same at every bias of a stack (a batch of biases)
    same = [np.ndim(a) < 2 or np.shape(a)[-2] == 1 for a in (profile.mass_m0, profile.width_nm)]
    per_stack = not turned and shape[-2] > 1 and all(same)
    if not (turned or per_stack or shape[-2] == 1):  # (orient broadcasts where turned)
        per_slice = [np.broadcast_to(d, shape) for d in per_slice]
    left, right, reduction = sequential_fluxes_ev2(
        edge=edge_o,
        mass=orient(mass),
        alpha=orient(alpha),
        width=orient(width),
        barrier=orient(per_slice[0]),
        phonon=tuple(orient(p) for p in per_slice[1:]),
        mu_left_ev=mu_left,
        mu_right_ev=mu_right,
        kt_ev=kt_ev,
        high_ev=high_ev - shift,
        lines=lines_o,
        params=params,
        per_stack=per_stack,
        hump=hump_weight(hump_action),
    )
    # detailed balance makes the channel vanish at zero bias; enforce it past rounding
    sign = np.where(rev, -1.0, 1.0) * (np.asarray(bias_v) != 0.0)
    reduction["center_ev"] = reduction["center_ev"] + shift[..., None]
    return sign * left, sign * right, reduction
