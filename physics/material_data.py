"""Band parameters of III-V binaries and bowing parameters of their ternary alloys.

Data only; :mod:`physics.materials` holds the formulas that use it. Every entry
names its source. All Vurgaftman et al. [1]_ values below are transcribed from
memory of the paper's recommended-parameter tables: the zinc-blende binary
tables (Sec. III; the tables the project brief calls Tables III/IV — table
numbers not re-checked) and the ternary bowing parameters of Sec. IV (the
per-alloy sections and the bowing summary table). Check every number against
the paper before relying on it for a growth run. Static permittivities are not
in [1]_; they are from memory of Adachi [2]_ and equally need checking.

Conventions of [1]_ kept here:

- lattice constants are given at 300 K with a linear thermal coefficient,
  ``a(T) = a(300 K) + (da/dT) (T - 300 K)``;
- Gamma gaps are given at 0 K with Varshni parameters [3]_;
- valence-band offsets (VBO) are the valence-band maxima on one common scale on
  which the InSb VBM is 0 eV, and are taken as temperature independent, so the
  whole temperature shift of the gap goes into the conduction band;
- effective masses are low-temperature values with no temperature dependence;
- ternary parameters are ``P(x) = x P(B) + (1 - x) P(A) - x (1 - x) C`` with
  ``A`` the binary at x = 0, ``B`` the binary at x = 1 and bowing parameter
  ``C`` (temperature independent). Parameters without a bowing entry are linear
  in x (Vegard's law [4]_ for the lattice constant).

References
----------
.. [1] I. Vurgaftman, J. R. Meyer and L. R. Ram-Mohan, "Band parameters for
   III-V compound semiconductors and their alloys", J. Appl. Phys. 89, 5815
   (2001).
.. [2] S. Adachi, Properties of Group-IV, III-V and II-VI Semiconductors
   (Wiley, Chichester, 2005).
.. [3] Y. P. Varshni, "Temperature dependence of the energy gap in
   semiconductors", Physica 34, 149 (1967).
.. [4] L. Vegard, "Die Konstitution der Mischkristalle und die Raumfüllung der
   Atome", Z. Phys. 5, 17 (1921).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from types import MappingProxyType

SOURCE_VURGAFTMAN = "Vurgaftman, Meyer, Ram-Mohan, J. Appl. Phys. 89, 5815 (2001)"
SOURCE_ADACHI = "Adachi, Properties of Group-IV, III-V and II-VI Semiconductors (Wiley 2005)"
_BINARY_SOURCE = (
    f"{SOURCE_VURGAFTMAN} (binary tables, from memory); permittivity: {SOURCE_ADACHI} (from memory)"
)
_TERNARY_SOURCE = (
    f"{SOURCE_VURGAFTMAN} (end-point binaries and bowing, from memory); "
    f"permittivity: {SOURCE_ADACHI}, linear in x (from memory)"
)


@dataclass(frozen=True)
class BinaryData:
    """Recommended parameters of one zinc-blende binary (units in the names)."""

    lattice_300k_angstrom: float  #: lattice constant at 300 K
    lattice_expansion_angstrom_per_k: float  #: da/dT
    gap_gamma_0k_ev: float  #: Gamma gap at 0 K
    varshni_alpha_mev_per_k: float  #: Varshni alpha (Gamma gap)
    varshni_beta_k: float  #: Varshni beta (Gamma gap)
    mass_gamma_m0: float  #: Gamma-valley electron effective mass / m0
    kane_energy_ev: float  #: Ep = 2 m0 P^2 / hbar^2
    spin_orbit_ev: float  #: spin-orbit splitting Delta_so
    valence_band_offset_ev: float  #: VBM on the common scale (InSb VBM = 0)
    c11_gpa: float  #: elastic constant c11
    c12_gpa: float  #: elastic constant c12
    deformation_ac_ev: float  #: conduction-band hydrostatic deformation potential a_c
    permittivity_r: float  #: static relative permittivity (from [2], not [1])
    source: str = _BINARY_SOURCE


@dataclass(frozen=True)
class TernaryData:
    """A ternary alloy between two binaries, with its bowing parameters.

    ``formula`` spells the trade notation: each element with its role, ``"x"``
    (fraction x), ``"1-x"`` (fraction 1 - x) or ``None`` (the common element).
    ``bowing`` maps a parameter key of :func:`physics.materials.band_parameters`
    to ``(c0, c1)`` with bowing ``C(x) = c0 + c1 x`` (``c1`` is zero except for
    the AlGaAs Gamma gap).
    """

    binary_x0: str  #: the binary at x = 0
    binary_x1: str  #: the binary at x = 1
    formula: tuple[tuple[str, str | None], ...]
    representative_x: tuple[float, ...]  #: compositions listed in the material table
    bowing: Mapping[str, tuple[float, float]] = field(default_factory=dict)
    source: str = _TERNARY_SOURCE


# Binaries. Vurgaftman et al. [1] values from memory of the binary tables;
# permittivity_r from memory of Adachi [2]. The Al compounds (AlAs, AlSb) are
# indirect: only their Gamma valley is described here.
BINARIES: Mapping[str, BinaryData] = MappingProxyType(
    {
        "GaAs": BinaryData(
            lattice_300k_angstrom=5.65325,
            lattice_expansion_angstrom_per_k=3.88e-5,
            gap_gamma_0k_ev=1.519,
            varshni_alpha_mev_per_k=0.5405,
            varshni_beta_k=204.0,
            mass_gamma_m0=0.067,
            kane_energy_ev=28.8,
            spin_orbit_ev=0.341,
            valence_band_offset_ev=-0.80,
            c11_gpa=1221.0,
            c12_gpa=566.0,
            deformation_ac_ev=-7.17,
            permittivity_r=12.90,
        ),
        "AlAs": BinaryData(
            lattice_300k_angstrom=5.6611,
            lattice_expansion_angstrom_per_k=2.90e-5,
            gap_gamma_0k_ev=3.099,
            varshni_alpha_mev_per_k=0.885,
            varshni_beta_k=530.0,
            mass_gamma_m0=0.15,
            kane_energy_ev=21.1,
            spin_orbit_ev=0.28,
            valence_band_offset_ev=-1.33,
            c11_gpa=1250.0,
            c12_gpa=534.0,
            deformation_ac_ev=-5.64,
            permittivity_r=10.06,
        ),
        "InAs": BinaryData(
            lattice_300k_angstrom=6.0583,
            lattice_expansion_angstrom_per_k=2.74e-5,
            gap_gamma_0k_ev=0.417,
            varshni_alpha_mev_per_k=0.276,
            varshni_beta_k=93.0,
            mass_gamma_m0=0.026,
            kane_energy_ev=21.5,
            spin_orbit_ev=0.39,
            valence_band_offset_ev=-0.59,
            c11_gpa=832.9,
            c12_gpa=452.6,
            deformation_ac_ev=-5.08,
            permittivity_r=15.15,
        ),
        "InP": BinaryData(
            lattice_300k_angstrom=5.8697,
            lattice_expansion_angstrom_per_k=2.79e-5,
            gap_gamma_0k_ev=1.4236,
            varshni_alpha_mev_per_k=0.363,
            varshni_beta_k=162.0,
            mass_gamma_m0=0.0795,
            kane_energy_ev=20.7,
            spin_orbit_ev=0.108,
            valence_band_offset_ev=-0.94,
            c11_gpa=1011.0,
            c12_gpa=561.0,
            deformation_ac_ev=-6.0,
            permittivity_r=12.61,
        ),
        "GaSb": BinaryData(
            lattice_300k_angstrom=6.0959,
            lattice_expansion_angstrom_per_k=4.72e-5,
            gap_gamma_0k_ev=0.812,
            varshni_alpha_mev_per_k=0.417,
            varshni_beta_k=140.0,
            mass_gamma_m0=0.039,
            kane_energy_ev=27.0,
            spin_orbit_ev=0.76,
            valence_band_offset_ev=-0.03,
            c11_gpa=884.2,
            c12_gpa=402.6,
            deformation_ac_ev=-7.5,
            permittivity_r=15.69,
        ),
        "AlSb": BinaryData(
            lattice_300k_angstrom=6.1355,
            lattice_expansion_angstrom_per_k=2.60e-5,
            gap_gamma_0k_ev=2.386,
            varshni_alpha_mev_per_k=0.42,
            varshni_beta_k=140.0,
            mass_gamma_m0=0.14,
            kane_energy_ev=18.7,
            spin_orbit_ev=0.676,
            valence_band_offset_ev=-0.41,
            c11_gpa=876.9,
            c12_gpa=434.1,
            deformation_ac_ev=-4.5,
            permittivity_r=12.04,
        ),
        "InSb": BinaryData(
            lattice_300k_angstrom=6.4794,
            lattice_expansion_angstrom_per_k=3.48e-5,
            gap_gamma_0k_ev=0.235,
            varshni_alpha_mev_per_k=0.32,
            varshni_beta_k=170.0,
            mass_gamma_m0=0.0135,
            kane_energy_ev=23.3,
            spin_orbit_ev=0.81,
            valence_band_offset_ev=0.0,
            c11_gpa=684.7,
            c12_gpa=373.5,
            deformation_ac_ev=-6.94,
            permittivity_r=16.8,
        ),
    }
)

# Ternaries. Bowing parameters from memory of Vurgaftman et al. [1], Sec. IV
# (per-alloy sections and bowing summary table). Keys not listed are linear.
TERNARIES: Mapping[str, TernaryData] = MappingProxyType(
    {
        # Al(x)Ga(1-x)As: the paper's x-dependent Gamma-gap bowing -0.127 + 1.310 x;
        # VBO, mass, Ep linear (no bowing recommended).
        "AlGaAs": TernaryData(
            binary_x0="GaAs",
            binary_x1="AlAs",
            formula=(("Al", "x"), ("Ga", "1-x"), ("As", None)),
            representative_x=(0.3,),
            bowing=MappingProxyType({"gap_ev": (-0.127, 1.310)}),
        ),
        # In(x)Ga(1-x)As
        "InGaAs": TernaryData(
            binary_x0="GaAs",
            binary_x1="InAs",
            formula=(("In", "x"), ("Ga", "1-x"), ("As", None)),
            representative_x=(0.53,),
            bowing=MappingProxyType(
                {
                    "gap_ev": (0.477, 0.0),
                    "valence_band_offset_ev": (-0.38, 0.0),
                    "mass_m0": (0.0091, 0.0),
                    "kane_energy_ev": (-1.48, 0.0),
                    "spin_orbit_ev": (0.15, 0.0),
                    "deformation_ac_ev": (2.61, 0.0),
                }
            ),
        ),
        # In(x)Al(1-x)As
        "InAlAs": TernaryData(
            binary_x0="AlAs",
            binary_x1="InAs",
            formula=(("In", "x"), ("Al", "1-x"), ("As", None)),
            representative_x=(0.52,),
            bowing=MappingProxyType(
                {
                    "gap_ev": (0.70, 0.0),
                    "valence_band_offset_ev": (-0.64, 0.0),
                    "mass_m0": (0.049, 0.0),
                    "kane_energy_ev": (-4.81, 0.0),
                    "spin_orbit_ev": (0.15, 0.0),
                    "deformation_ac_ev": (-1.4, 0.0),
                }
            ),
        ),
        # GaAs(1-x)Sb(x), x = Sb fraction; mass and Ep linear (no bowing recalled).
        "GaAsSb": TernaryData(
            binary_x0="GaAs",
            binary_x1="GaSb",
            formula=(("Ga", None), ("As", "1-x"), ("Sb", "x")),
            representative_x=(0.49,),
            bowing=MappingProxyType(
                {
                    "gap_ev": (1.43, 0.0),
                    "valence_band_offset_ev": (-1.06, 0.0),
                    "spin_orbit_ev": (0.6, 0.0),
                }
            ),
        ),
        # AlAs(1-x)Sb(x), x = Sb fraction; mass and Ep linear (no bowing recalled).
        "AlAsSb": TernaryData(
            binary_x0="AlAs",
            binary_x1="AlSb",
            formula=(("Al", None), ("As", "1-x"), ("Sb", "x")),
            representative_x=(0.44,),
            bowing=MappingProxyType(
                {
                    "gap_ev": (0.8, 0.0),
                    "valence_band_offset_ev": (-1.71, 0.0),
                    "spin_orbit_ev": (0.15, 0.0),
                }
            ),
        ),
    }
)
