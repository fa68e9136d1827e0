"""Physical constants in SI units, CODATA 2022.

Written out rather than read from :mod:`scipy.constants` (the same values in
scipy 1.15 and later), whose import costs a command's start about a tenth of a
second; ``tests/test_materials.py`` checks them against it.

References
----------
.. [1] P. J. Mohr, E. Tiesinga, D. B. Newell and B. N. Taylor, "CODATA
   recommended values of the fundamental physical constants: 2022",
   Rev. Mod. Phys. 97, 025002 (2025) (citation from memory). e, h and k are
   exact in the SI of 2019; m_e and epsilon_0 are recommended values.
"""

import math

ELEMENTARY_CHARGE_C = 1.602176634e-19  # exact
HBAR_J_S = 6.62607015e-34 / (2.0 * math.pi)  # h exact
ELECTRON_MASS_KG = 9.1093837139e-31
BOLTZMANN_EV_K = 1.380649e-23 / ELEMENTARY_CHARGE_C  # k exact
VACUUM_PERMITTIVITY_F_M = 8.8541878188e-12

#: hbar^2 / (2 m0) in eV nm^2: k[1/nm] = sqrt(m/m0 * (E - V)[eV] / HBAR2_2M0_EV_NM2)
HBAR2_2M0_EV_NM2 = HBAR_J_S**2 / (2.0 * ELECTRON_MASS_KG) / ELEMENTARY_CHARGE_C * 1e18
