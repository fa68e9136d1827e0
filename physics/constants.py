"""Physical constants in SI units (CODATA 2018, via scipy.constants)."""

from scipy import constants as _c

HBAR_J_S = _c.hbar
ELECTRON_MASS_KG = _c.m_e
ELEMENTARY_CHARGE_C = _c.e
BOLTZMANN_EV_K = _c.k / _c.e
VACUUM_PERMITTIVITY_F_M = _c.epsilon_0

#: hbar^2 / (2 m0) in eV nm^2: k[1/nm] = sqrt(m/m0 * (E - V)[eV] / HBAR2_2M0_EV_NM2)
HBAR2_2M0_EV_NM2 = HBAR_J_S**2 / (2.0 * ELECTRON_MASS_KG) / ELEMENTARY_CHARGE_C * 1e18
