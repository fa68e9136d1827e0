"""Independent reference solvers used to cross-check the transfer/scattering-matrix kernel.

* :func:`qtbm_transmission`: finite-difference quantum transmitting boundary
  method (Lent and Kirkner, J. Appl. Phys. 67, 6353 (1990)).
* :func:`propagate_packet`: time-domain wave packet by Visscher's explicit
  staggered scheme (Computers in Physics 5, 596 (1991)), with
  :func:`expected_transmission` for the T(E) it must reproduce.

They share the :class:`~physics.bands.Profile` with the kernel, not its arithmetic.
"""

from .qtbm import UniformGrid, qtbm_transmission, uniform_grid
from .wavepacket import (
    HBAR_EV_FS,
    PacketResult,
    barrier_span_nm,
    expected_transmission,
    propagate_packet,
)

__all__ = [
    "qtbm_transmission",
    "uniform_grid",
    "UniformGrid",
    "propagate_packet",
    "expected_transmission",
    "barrier_span_nm",
    "PacketResult",
    "HBAR_EV_FS",
]
