"""Band parameters of III-V binaries and bowing parameters of their ternary alloys.

Data only; :mod:`physics.materials` holds the formulas that use it. Every entry
names its source and how far it has been checked.

Status of the numbers (checked against public copies):

- The paper [1]_ itself could not be read: the only public copies found show
  its abstract and table of contents, not the tables, so no table number is
  given here. Every Vurgaftman value was instead compared with openbandparams
  [5]_ (S. J. Maddox), a band-parameter library that implements the
  recommended values of [1]_ and cites [1]_ for each of them.
- Binaries (GaAs, AlAs, InAs, InP, GaSb, AlSb, InSb): all twelve [1]_ fields
  of every binary (a(300 K), da/dT, Eg(Gamma, 0 K), Varshni alpha and beta,
  m*(Gamma), Ep, Delta_so, VBO, c11, c12, a_c) agree with [5]_; none needed
  changing.
- Ternary bowing: every bowing parameter below agrees with [5]_ (the AlGaAs
  gap bowing, and all the InGaAs and InAlAs bowings; the InGaAs and InAlAs
  mass bowings are in the 2013 version of [5]_ and in comments of the later
  one), except the AlAsSb VBO bowing, where [5]_ contradicts itself (see the
  AlAsSb entry); that one is still from memory. Where this module applies no
  bowing (linear in x), [5]_ gives none for that parameter either; whether
  [1]_ recommends a mass or Ep bowing for GaAsSb and AlAsSb is not checked.
- X and L valleys: the X and L gaps (minimum above the VBM, 0 K, with Varshni
  alpha and beta) of every binary are the values of the binary tables of [1]_
  (one table per binary in its Sec. III, GaAs first; table numbering and
  pages from memory, the tables not seen), checked against [5]_ like the
  rest; the exceptions are named at each entry (AlSb's X and L Varshni alphas
  are swapped between two versions of [5]_; InSb's X gap, 0.63 eV, is from
  memory of [1]_ and unconfirmed: [5]_ takes it from other sources). Their
  bowings (AlGaAs X 0.055 eV; InGaAs X 1.4, L 0.33; GaAsSb X and L 1.2;
  AlAsSb X and L 0.28; InAlAs none, linear) agree with [5]_. [1]_ gives no
  deformation potentials for the X and L valleys of these materials, so no
  strain shift is applied to them (see :func:`physics.materials.material_parameters`).
- Static permittivities are not in [1]_; they are from memory of Adachi [2]_.
  Adachi's tables were not found in a public copy. GaAs, AlAs, InAs, GaSb and
  InSb agree with the Ioffe Institute archive [6]_ (GaSb to its quoted 15.7);
  InP (the archive quotes 12.5) and AlSb (no archive value found) are
  unconfirmed and still from memory.
- LO-phonon energies and high-frequency permittivities (used by the
  scattering-assisted current, :mod:`physics.scattering`) are not in [1]_;
  they are from memory of Adachi's tables [7]_ and not yet checked against a
  public copy. Ternaries are linear in x (In0.53Ga0.47As: 33 meV, between
  its InAs-like and GaAs-like modes, a one-mode simplification).

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
.. [5] S. J. Maddox, openbandparams, https://github.com/scott-maddox/openbandparams
   (files src/openbandparams/iii_v_zinc_blende_binaries.py,
   iii_v_zinc_blende_ternaries.py and, older, iii_v/zinc_blende/ternary.py),
   each value cited there to [1]_.
.. [7] S. Adachi, Physical Properties of III-V Semiconductor Compounds
   (Wiley, New York, 1992) (LO-phonon energies and high-frequency
   permittivities; from memory).
.. [6] Ioffe Institute, New Semiconductor Materials archive,
   http://www.ioffe.ru/SVA/NSM/Semicond/ (static dielectric constants at
   300 K; binary values read as the end points of the AlGaAs, GaAsSb, InAsSb
   and GaInSb pages, InP page for InP).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from types import MappingProxyType

SOURCE_VURGAFTMAN = "Vurgaftman, Meyer, Ram-Mohan, J. Appl. Phys. 89, 5815 (2001)"
SOURCE_ADACHI = "Adachi, Properties of Group-IV, III-V and II-VI Semiconductors (Wiley 2005)"
SOURCE_OPENBANDPARAMS = "openbandparams (S. J. Maddox), which cites Vurgaftman 2001"
SOURCE_IOFFE = "Ioffe Institute NSM archive"
_CHECKED_OBP = f"checked against {SOURCE_OPENBANDPARAMS}; paper tables not seen"


def _binary_source(permittivity_check: str) -> str:
    """Source string of one binary: [1] values checked, permittivity as given."""
    return (
        f"{SOURCE_VURGAFTMAN} (binary table values, {_CHECKED_OBP}); "
        f"permittivity: {SOURCE_ADACHI} (from memory), {permittivity_check}"
    )


_PERMITTIVITY_AGREES = f"agrees with {SOURCE_IOFFE}"
_PERMITTIVITY_UNCHECKED = "not confirmed by a public source (still from memory)"
_PERMITTIVITY_INP = f"not confirmed: {SOURCE_IOFFE} gives 12.5 (still from memory)"
_BINARY_SOURCE = _binary_source(_PERMITTIVITY_UNCHECKED)


def _ternary_source(exception: str = "") -> str:
    """Source string of one ternary; ``exception`` names an unconfirmed value."""
    return (
        f"{SOURCE_VURGAFTMAN} (end-point binaries and bowing, {_CHECKED_OBP}{exception}); "
        f"permittivity: {SOURCE_ADACHI}, linear in x (end points as for the binaries)"
    )


_TERNARY_SOURCE = _ternary_source()
_ALASSB_VBO_NOTE = (
    "; except the VBO bowing -1.71 eV, still from memory: openbandparams versions"
    " disagree, -1.71 and -0.14"
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
    gap_x_0k_ev: float  #: X-valley gap (X minimum above the VBM) at 0 K
    varshni_alpha_x_mev_per_k: float  #: Varshni alpha (X gap)
    varshni_beta_x_k: float  #: Varshni beta (X gap)
    gap_l_0k_ev: float  #: L-valley gap at 0 K
    varshni_alpha_l_mev_per_k: float  #: Varshni alpha (L gap)
    varshni_beta_l_k: float  #: Varshni beta (L gap)
    permittivity_r: float  #: static relative permittivity (from [2], not [1])
    lo_phonon_mev: float  #: zone-centre LO-phonon energy (from [7], not [1])
    permittivity_high_r: float  #: high-frequency relative permittivity (from [7], not [1])
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


# Binaries. Vurgaftman et al. [1] values, first transcribed from memory, now
# each checked against openbandparams [5] (which cites [1] for every one of
# them): all agree, none changed. permittivity_r from memory of Adachi [2],
# compared with the Ioffe archive [6] as noted per binary. The Al compounds
# (AlAs, AlSb) are indirect: their X minimum lies below the Gamma one. Only the
# Gamma valley carries current in the model; X and L edges are reported.
BINARIES: Mapping[str, BinaryData] = MappingProxyType(
    {
        # GaAs: all [1] fields checked against openbandparams [5], all agree.
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
            # X/L valleys: X and L agree with [5]
            gap_x_0k_ev=1.981,
            varshni_alpha_x_mev_per_k=0.46,
            varshni_beta_x_k=204.0,
            gap_l_0k_ev=1.815,
            varshni_alpha_l_mev_per_k=0.605,
            varshni_beta_l_k=204.0,
            permittivity_r=12.90,  # Ioffe [6]: 12.90
            lo_phonon_mev=36.2,  # [7], from memory
            permittivity_high_r=10.89,  # [7], from memory
            source=_binary_source(_PERMITTIVITY_AGREES),
        ),
        # AlAs: all [1] fields checked against openbandparams [5], all agree.
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
            # X/L valleys: X and L agree with [5]
            gap_x_0k_ev=2.24,
            varshni_alpha_x_mev_per_k=0.7,
            varshni_beta_x_k=530.0,
            gap_l_0k_ev=2.46,
            varshni_alpha_l_mev_per_k=0.605,
            varshni_beta_l_k=204.0,
            permittivity_r=10.06,  # Ioffe [6]: 10.06 (AlGaAs end point)
            lo_phonon_mev=50.1,  # [7], from memory
            permittivity_high_r=8.16,  # [7], from memory
            source=_binary_source(_PERMITTIVITY_AGREES),
        ),
        # InAs: all [1] fields checked against openbandparams [5], all agree.
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
            # X/L valleys: X and L agree with the later [5] (the 2013 one used other sources)
            gap_x_0k_ev=1.433,
            varshni_alpha_x_mev_per_k=0.276,
            varshni_beta_x_k=93.0,
            gap_l_0k_ev=1.133,
            varshni_alpha_l_mev_per_k=0.276,
            varshni_beta_l_k=93.0,
            permittivity_r=15.15,  # Ioffe [6]: 15.15 (InAsSb end point)
            lo_phonon_mev=30.2,  # [7], from memory
            permittivity_high_r=12.3,  # [7], from memory
            source=_binary_source(_PERMITTIVITY_AGREES),
        ),
        # InP: all [1] fields checked against openbandparams [5], all agree.
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
            # X/L valleys: X and L agree with [5]; X gap linear in T, beta = 0
            gap_x_0k_ev=2.384,
            varshni_alpha_x_mev_per_k=0.37,
            varshni_beta_x_k=0.0,
            gap_l_0k_ev=2.014,
            varshni_alpha_l_mev_per_k=0.363,
            varshni_beta_l_k=162.0,
            permittivity_r=12.61,  # Ioffe [6] gives 12.5: unconfirmed, from memory
            lo_phonon_mev=42.8,  # [7], from memory
            permittivity_high_r=9.61,  # [7], from memory
            source=_binary_source(_PERMITTIVITY_INP),
        ),
        # GaSb: all [1] fields checked against openbandparams [5], all agree.
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
            # X/L valleys: X and L agree with [5]
            gap_x_0k_ev=1.141,
            varshni_alpha_x_mev_per_k=0.475,
            varshni_beta_x_k=94.0,
            gap_l_0k_ev=0.875,
            varshni_alpha_l_mev_per_k=0.597,
            varshni_beta_l_k=140.0,
            permittivity_r=15.69,  # Ioffe [6]: 15.7, agrees to its rounding
            lo_phonon_mev=29.8,  # [7], from memory
            permittivity_high_r=14.4,  # [7], from memory
            source=_binary_source(f"{_PERMITTIVITY_AGREES} (15.7, to its rounding)"),
        ),
        # AlSb: all [1] fields checked against openbandparams [5], all agree.
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
            # X/L valleys: X and L gaps agree with [5]; alpha_X 0.39 and alpha_L 0.58 as in the 2013
            # [5] and from memory of [1], the later [5] swaps them
            gap_x_0k_ev=1.696,
            varshni_alpha_x_mev_per_k=0.39,
            varshni_beta_x_k=140.0,
            gap_l_0k_ev=2.329,
            varshni_alpha_l_mev_per_k=0.58,
            varshni_beta_l_k=140.0,
            permittivity_r=12.04,  # no public value found: from memory
            lo_phonon_mev=42.1,  # [7], from memory
            permittivity_high_r=10.24,  # [7], from memory
            source=_binary_source(_PERMITTIVITY_UNCHECKED),
        ),
        # InSb: all [1] fields checked against openbandparams [5], all agree.
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
            # X/L valleys: L 0.93 agrees with the 2013 [5]; X 0.63 from memory of [1], NOT confirmed
            # ([5] takes X from other sources, 1.8 and 1.691); alpha, beta those of Gamma as in [5]
            gap_x_0k_ev=0.63,
            varshni_alpha_x_mev_per_k=0.32,
            varshni_beta_x_k=170.0,
            gap_l_0k_ev=0.93,
            varshni_alpha_l_mev_per_k=0.32,
            varshni_beta_l_k=170.0,
            permittivity_r=16.8,  # Ioffe [6]: 16.8
            lo_phonon_mev=23.9,  # [7], from memory
            permittivity_high_r=15.7,  # [7], from memory
            source=_binary_source(_PERMITTIVITY_AGREES),
        ),
    }
)

# Ternaries. Bowing parameters of Vurgaftman et al. [1], Sec. IV, first
# transcribed from memory, now checked against openbandparams [5] (which cites
# [1]); all agree except the AlAsSb VBO bowing (see there). Keys not listed are
# linear in x; [5] lists no bowing for those keys either.
TERNARIES: Mapping[str, TernaryData] = MappingProxyType(
    {
        # Al(x)Ga(1-x)As: x-dependent Gamma-gap bowing -0.127 + 1.310 x (x = Al
        # fraction), checked against [5]; VBO, mass, Ep, Delta_so, a_c linear
        # ([5] has no bowing for them).
        "AlGaAs": TernaryData(
            binary_x0="GaAs",
            binary_x1="AlAs",
            formula=(("Al", "x"), ("Ga", "1-x"), ("As", None)),
            representative_x=(0.3,),
            bowing=MappingProxyType(
                {"gap_ev": (-0.127, 1.310), "gap_x_ev": (0.055, 0.0), "gap_l_ev": (0.0, 0.0)}
            ),
        ),
        # In(x)Ga(1-x)As: all six bowings checked against [5] (the mass bowing
        # 0.0091 in its 2013 ternary file and in a comment of the later one).
        "InGaAs": TernaryData(
            binary_x0="GaAs",
            binary_x1="InAs",
            formula=(("In", "x"), ("Ga", "1-x"), ("As", None)),
            representative_x=(0.53,),
            bowing=MappingProxyType(
                {
                    "gap_ev": (0.477, 0.0),
                    "gap_x_ev": (1.4, 0.0),
                    "gap_l_ev": (0.33, 0.0),
                    "valence_band_offset_ev": (-0.38, 0.0),
                    "mass_m0": (0.0091, 0.0),
                    "kane_energy_ev": (-1.48, 0.0),
                    "spin_orbit_ev": (0.15, 0.0),
                    "deformation_ac_ev": (2.61, 0.0),
                }
            ),
        ),
        # In(x)Al(1-x)As: all six bowings checked against [5] (the mass bowing
        # 0.049 in its 2013 ternary file and in a comment of the later one).
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
        # GaAs(1-x)Sb(x), x = Sb fraction: gap, VBO and Delta_so bowings checked
        # against [5]. Mass and Ep linear: [5] has no bowing for them; whether [1]
        # gives a mass bowing is unchecked (one other public transcription lists
        # 0.014, not verified).
        "GaAsSb": TernaryData(
            binary_x0="GaAs",
            binary_x1="GaSb",
            formula=(("Ga", None), ("As", "1-x"), ("Sb", "x")),
            representative_x=(0.49,),
            bowing=MappingProxyType(
                {
                    "gap_ev": (1.43, 0.0),
                    "gap_x_ev": (1.2, 0.0),
                    "gap_l_ev": (1.2, 0.0),
                    "valence_band_offset_ev": (-1.06, 0.0),
                    "spin_orbit_ev": (0.6, 0.0),
                }
            ),
        ),
        # AlAs(1-x)Sb(x), x = Sb fraction: gap (0.8) and Delta_so (0.15) bowings
        # checked against [5]. VBO bowing -1.71 NOT confirmed, still from memory:
        # the 2013 version of [5] has -1.71 (cited to [1]); the later version
        # keeps -1.71 only in a comment and uses -0.14, also cited to [1], with
        # no reason given. Mass and Ep linear ([5] has no bowing for them).
        "AlAsSb": TernaryData(
            binary_x0="AlAs",
            binary_x1="AlSb",
            formula=(("Al", None), ("As", "1-x"), ("Sb", "x")),
            representative_x=(0.44,),
            bowing=MappingProxyType(
                {
                    "gap_ev": (0.8, 0.0),
                    "gap_x_ev": (0.28, 0.0),
                    "gap_l_ev": (0.28, 0.0),
                    "valence_band_offset_ev": (-1.71, 0.0),
                    "spin_orbit_ev": (0.15, 0.0),
                }
            ),
            source=_ternary_source(_ALASSB_VBO_NOTE),
        ),
    }
)
