"""Scattering broadening of the resonances: a phenomenological model.

Scattering in the well (phonons, interface roughness, alloy disorder) gives
the quasi-bound state an extra energy width ``Gamma_s`` besides its
tunnelling width ``Gamma``. In the Breit-Wigner picture of a resonance
[1]_, ``T(E) = T_p (G/2)^2 / ((E - E_r)^2 + (G/2)^2)``, the total
(coherent plus scattered-then-transmitted, i.e. sequential) transmission of
a resonance with an extra width ``Gamma_s`` is again a Lorentzian, of width
``Gamma + Gamma_s`` and peak ``T_p Gamma / (Gamma + Gamma_s)``, so that the
area under the peak, and with it the current of a resonance much narrower
than the supply function, is conserved [2]_, [3]_. The same result is the
convolution of the Lorentzian peak with a Lorentzian of FWHM ``Gamma_s``.

Model used here (one parameter, ``[model] broadening_mev`` = ``Gamma_s``):
each resonance ``r`` of the coherent ``T(E)`` found on the coarse grid
(centre ``E_r``, width ``Gamma_r``, peak ``T_r``, from
:func:`physics.resonances.refine_grid_peaks`; all of them, not only those the
current's grid resolves, so the result does not depend on how many are
resolved: a broadened line's Lorentzian tails reach energies where the supply
is large, however high the line) has its Lorentzian part replaced by the
broadened one,

    T_b(E) = T(E) + sum_r [L(E; T_r Gamma_r / (Gamma_r + Gamma_s), Gamma_r + Gamma_s)
                           - L(E; T_r, Gamma_r)],

so the current gains ``sum_r int (L'_r - L_r) S dE`` over the integration
window. The correction terms are analytic, so they are integrated on their
own Gauss-Legendre rules under the map ``E = E_r + (W/2) sinh(s)`` with
``W = Gamma_r`` and ``W = Gamma_r + Gamma_s`` respectively (the broadened
width sets the nodes of the broadened term), over the whole window; no
extra transmission evaluations are needed. ``Gamma_s = 0`` skips the
correction, so the coherent result is reproduced exactly.

Only lines narrower than ``kT`` are broadened. A wider line (a transmission
feature above the barriers, tens of meV wide) is not a quasi-bound state
whose tunnelling width scattering competes with: broadening changes it by
about ``Gamma_s / Gamma_r`` near the line, while the Lorentzian kernel's far
tails would spread a fraction ``Gamma_s / (pi d)`` of its large area to
distances beyond ``d``, down to the emitter's Fermi level where the supply is
large (measured: +20 % on a valley current from a 42 meV line at 0.8 eV), an
artifact of the kernel's shape.

The replacement is also cut at ``SPAN_KT = 10`` kT either side of each line
(0.26 eV at 300 K): the Lorentzian kernel would otherwise carry current from
a line far above the Fermi level down to it (measured: a 5 meV line 0.8 eV
above the emitter's Fermi level raised a valley current 300-fold), scattering
across energies that no few phonons bridge. The cut removes about
``Gamma_s / (pi SPAN_KT kT)`` of each line's area (0.4 % for 3 meV at 300 K).
The cut and the ``kT`` limit are this model's choices, not from a publication.

Where the Lorentzian model of a line overstates the coherent ``T`` (a line cut
by a band edge, an asymmetric line), the removed ``int L_r S dE`` can outweigh
what the line carries in ``int T S dE`` and the broadened lines together;
:func:`physics.current.current_density_a_cm2` then gives zero current, never
current against the bias (both parts of :func:`broadened_lines` have the sign
of the bias). Before this and the removal of duplicate lines (two coarse-grid
maxima refined onto one line were broadened twice), 49 of 982 random
broadened I-Vs had negative valleys (issue 18).

Departures and limits: the non-Lorentzian remainder of ``T`` (background,
asymmetry) is left unbroadened; only resonances found inside the
integration window are broadened, so the scattering-assisted current
through a level that has already dropped below the emitter band edge (the
dominant valley mechanism of the sequential picture [4]_) is not included;
the Lorentzian tails are cut at the window's ends and at ``SPAN_KT``. The
valley current is therefore still an underestimate.

Recommended values (from memory, to be checked against the sources):
``Gamma_s`` of a few meV at 300 K for GaAs/AlGaAs and InGaAs/AlAs wells,
corresponding to scattering times of a few hundred fs (``hbar / Gamma_s``
= 0.66 ps meV); 0.5-1 meV at 77 K and below. Calibrate against a measured
valley current.

References
----------
.. [1] B. Ricco and M. Ya. Azbel, Phys. Rev. B 29, 1970 (1984).
.. [2] M. Jonson and A. Grincwajg, Appl. Phys. Lett. 51, 1729 (1987).
.. [3] M. Buttiker, IBM J. Res. Dev. 32, 63 (1988) (coherent and sequential
   tunnelling, total peak reduced by Gamma / (Gamma + Gamma_phase)) -- cited
   from memory.
.. [4] S. Luryi, Appl. Phys. Lett. 47, 490 (1985).
"""

from __future__ import annotations

import numpy as np

from .quadrature import sinh_gauss_legendre

__all__ = ["lorentzian", "broadened_peak", "broadened_lines", "broadening_correction"]

#: Half span, in kT, over which a line's Lorentzian is replaced (module notes).
SPAN_KT = 10.0


def lorentzian(energy_ev, *, center_ev, width_ev, peak):
    """Breit-Wigner line ``peak (W/2)^2 / ((E - E_r)^2 + (W/2)^2)`` ([1]_), ``W`` the FWHM.

    Parameters
    ----------
    energy_ev
        Energies ``E``, eV, broadcasting with the line's arrays.
    center_ev
        Line centre ``E_r``, eV.
    width_ev
        Full width at half maximum ``W``, eV.
    peak
        Value at the centre (a peak transmission), dimensionless.
    """
    half = 0.5 * np.asarray(width_ev, float)
    return peak * half**2 / ((energy_ev - center_ev) ** 2 + half**2)


def broadened_peak(peak, *, width_ev, broadening_ev):
    """Peak and width of a resonance with the extra width ``Gamma_s``, area conserved ([2]_, [3]_).

    Returns ``(T_p Gamma / (Gamma + Gamma_s), Gamma + Gamma_s)``.

    Parameters
    ----------
    peak
        Peak transmission ``T_p`` of the coherent line, any shape.
    width_ev
        Its full width at half maximum ``Gamma``, eV, broadcasting with ``peak``.
    broadening_ev
        Extra width ``Gamma_s`` from scattering, eV, non-negative.
    """
    width = np.asarray(width_ev, float)
    new_width = width + broadening_ev
    return peak * width / new_width, new_width


def _lorentzian_integral(center, width, peak, low, high, supply, n_nodes):
    """int_low^high L(E) S(E) dE on the sinh-mapped rule of :mod:`physics.quadrature`.

    ``center``, ``width``, ``peak``, ``low``, ``high`` are ``batch + (n_res,)``;
    ``supply`` maps energies ``batch + (n_res, n)`` to the supply function.
    """
    energy, weight = sinh_gauss_legendre(
        center, width_ev=width, low_ev=low, high_ev=high, n=n_nodes
    )
    line = lorentzian(
        energy, center_ev=center[..., None], width_ev=width[..., None], peak=peak[..., None]
    )
    return np.sum(weight * line * supply(energy), axis=-1)


def broadened_lines(
    *,
    center_ev,
    width_ev,
    peak,
    valid,
    low_ev,
    high_ev,
    supply,
    broadening_ev: float,
    kt_ev=np.inf,
    n_nodes: int = 64,
):
    """The coherent lines' ``int L_r S dE`` and the broadened lines' ``int L'_r S dE`` (eV^2).

    Parameters
    ----------
    center_ev, width_ev, peak, valid
        Resonances, ``batch + (n_res,)``; invalid slots contribute nothing.
    low_ev, high_ev
        Integration window, ``batch``.
    supply
        Callable: energies ``batch + (n_res, n)`` -> supply function, eV.
    broadening_ev
        ``Gamma_s``, eV (FWHM of the scattering Lorentzian).
    kt_ev
        ``kT``, eV, broadcastable to ``batch``: lines wider than ``kT`` are left
        coherent, and each line's replacement spans ``+- SPAN_KT kT`` (module notes).

    Returns
    -------
    removed, added
        ``batch`` each: ``sum_r int L_r S dE`` and ``sum_r int L'_r S dE`` over each
        line's span; both of the sign of the supply (of the bias), as ``L_r, L'_r >= 0``.
    """
    if broadening_ev <= 0.0:
        zero = np.zeros(np.shape(low_ev))
        return zero, zero
    ok = valid & np.isfinite(width_ev) & (width_ev > 0) & np.isfinite(peak)
    kt = np.asarray(kt_ev, float)[..., None]
    ok &= width_ev <= kt
    width = np.where(ok, width_ev, 1.0)
    peak = np.where(ok, peak, 0.0)
    center = np.where(ok, center_ev, 0.5 * (low_ev + high_ev)[..., None])
    new_peak, new_width = broadened_peak(peak, width_ev=width, broadening_ev=broadening_ev)
    # each line's redistribution is cut at SPAN_KT kT either side (module notes)
    low = np.maximum(low_ev[..., None], center - SPAN_KT * kt)
    high = np.minimum(high_ev[..., None], center + SPAN_KT * kt)
    high = np.maximum(high, low)
    coherent = _lorentzian_integral(center, width, peak, low, high, supply, n_nodes)
    broadened = _lorentzian_integral(center, new_width, new_peak, low, high, supply, n_nodes)
    return (
        np.sum(np.where(ok, coherent, 0.0), axis=-1),
        np.sum(np.where(ok, broadened, 0.0), axis=-1),
    )


def broadening_correction(**lines) -> np.ndarray:
    """Change of ``int T S dE`` (eV^2), ``batch``, when each resonance is broadened by
    ``Gamma_s``: ``added - removed`` of :func:`broadened_lines` (same arguments)."""
    removed, added = broadened_lines(**lines)
    return added - removed
