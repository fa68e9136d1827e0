"""Published double-barrier RTDs and their measured figures of merit (validation table).

Each entry: the citation, the layer structure as printed (or as remembered, said so), the
measured peak current density ``jp_a_cm2``, peak voltage ``vp_v`` (``None`` where not
given or not remembered), PVCR and temperature, where each value comes from, and what
was assumed where the paper (or what could be read of it) is silent. Spacers, contact
doping and their composition are the usual choice when not given: n = 2e18 cm^-3
(InP-based) or 1e18 cm^-3 (GaAs-based) contacts of the well's host material and 2 nm
undoped spacers; these assumptions move Jp by tens of per cent, the test's tolerance
(x2) is wider than that.

Sources were looked up in public abstracts (search of stored web pages); numbers marked
"from memory" could not be checked there.

Used by ``tests/test_reference_devices.py``.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Device:
    key: str
    citation: str
    system: str
    temperature_k: float
    jp_a_cm2: float | None
    vp_v: float | None
    pvcr: float
    #: (material, monolayers) between the spacers, emitter side first
    layers: tuple[tuple[str, float], ...]
    contact: str
    substrate: str
    doping_cm3: float
    spacer_nm: float
    source: str
    assumptions: str
    #: why this device is expected to miss the tolerance, or "" (test prints it)
    expected_miss: str = ""


ZHANG_2006 = (
    "Y. Zhang, Y.-P. Zeng, L. Ma, B.-Q. Wang, Z.-P. Zhu, L.-C. Wang and F.-H. Yang, "
    "Chinese Physics 15, 1335 (2006)"
)
SMET_1992 = "J. H. Smet, T. P. E. Broekaert and C. G. Fonstad, J. Appl. Phys. 71, 2475 (1992)"
BROEKAERT_1990 = "T. P. E. Broekaert and C. G. Fonstad, J. Appl. Phys. 68, 4310 (1990)"
GOODHUE_1986 = (
    "W. D. Goodhue, T. C. L. G. Sollner, H. Q. Le, E. R. Brown and B. A. Vojak, "
    "Appl. Phys. Lett. 49, 1086 (1986)"
)
SOLLNER_1983 = (
    "T. C. L. G. Sollner, W. D. Goodhue, P. E. Tannenwald, C. D. Parker and D. D. Peck, "
    "Appl. Phys. Lett. 43, 588 (1983)"
)
INATA_1986 = (
    "T. Inata, S. Muto, Y. Nakata, T. Fujii, H. Ohnishi and S. Hiyamizu, "
    "Jpn. J. Appl. Phys. 25, L983 (1986)"
)

INAS_INSERT_8ML = (
    ("AlAs", 10),
    ("In0.53Ga0.47As", 2),
    ("InAs", 4),
    ("In0.53Ga0.47As", 2),
    ("AlAs", 10),
)
INAS_INSERT_SMET = (
    ("AlAs", 10),
    ("In0.53Ga0.47As", 3),
    ("InAs", 6),
    ("In0.53Ga0.47As", 3),
    ("AlAs", 10),
)

DEVICES: tuple[Device, ...] = (
    Device(
        key="zhang2006_inas_insert",
        citation=ZHANG_2006,
        system="In0.53Ga0.47As/AlAs, InAs insert",
        temperature_k=300.0,
        jp_a_cm2=3.0e3,
        vp_v=None,
        pvcr=17.0,
        layers=INAS_INSERT_8ML,
        contact="In0.53Ga0.47As",
        substrate="InP",
        doping_cm3=2e18,
        spacer_nm=2.0,
        source="Jp, PVCR and the monolayer counts from the paper's abstract",
        assumptions="the 8 ML well includes the 4 ML InAs insert, placed in its middle; "
        "contacts and spacers not in the abstract (module defaults)",
    ),
    Device(
        key="smet1992_inas_insert_300k",
        citation=SMET_1992,
        system="In0.53Ga0.47As/AlAs, InAs insert",
        temperature_k=300.0,
        jp_a_cm2=None,
        vp_v=None,
        pvcr=42.0,
        layers=INAS_INSERT_SMET,
        contact="In0.53Ga0.47As",
        substrate="InP",
        doping_cm3=2e18,
        spacer_nm=2.0,
        source="PVCR of most devices (42 at 300 K) from the abstract; layer structure "
        "from memory (10 ML AlAs, 3/6/3 ML InGaAs/InAs/InGaAs well), uncertain",
        assumptions="structure from memory; contacts and spacers module defaults",
    ),
    Device(
        key="smet1992_inas_insert_77k",
        citation=SMET_1992,
        system="In0.53Ga0.47As/AlAs, InAs insert",
        temperature_k=77.0,
        jp_a_cm2=None,
        vp_v=None,
        pvcr=85.0,
        layers=INAS_INSERT_SMET,
        contact="In0.53Ga0.47As",
        substrate="InP",
        doping_cm3=2e18,
        spacer_nm=2.0,
        source="PVCR 85 at 77 K from the abstract; structure as the 300 K entry",
        assumptions="as the 300 K entry",
    ),
    Device(
        key="broekaert1990_thin_barriers",
        citation=BROEKAERT_1990,
        system="In0.53Ga0.47As/AlAs",
        temperature_k=300.0,
        jp_a_cm2=4.5e5,
        vp_v=None,
        pvcr=3.0,
        layers=(("AlAs", 4), ("In0.53Ga0.47As", 15), ("AlAs", 4)),
        contact="In0.53Ga0.47As",
        substrate="InP",
        doping_cm3=2e18,
        spacer_nm=2.0,
        source="Jp > 450 kA/cm^2 from the title; barriers (4 ML), well (15 ML) and "
        "PVCR (about 3) from memory",
        assumptions="structure and PVCR from memory; contacts and spacers module defaults",
    ),
    Device(
        key="goodhue1986_gaas_alas",
        citation=GOODHUE_1986,
        system="GaAs/AlAs",
        temperature_k=300.0,
        jp_a_cm2=None,
        vp_v=None,
        pvcr=3.5,
        layers=(("AlAs", 6), ("GaAs", 16), ("AlAs", 6)),
        contact="GaAs",
        substrate="GaAs",
        doping_cm3=1e18,
        spacer_nm=2.0,
        source="from memory: 1.7 nm AlAs barriers (6 ML), 4.5 nm GaAs well (16 ML), "
        "PVCR about 3.5 at room temperature",
        assumptions="all values from memory; contacts and spacers module defaults",
        expected_miss="GaAs/AlAs: the AlAs X valley lies below the GaAs Gamma edge and "
        "carries valley current the model does not include (README)",
    ),
    Device(
        key="sollner1983_gaas_algaas",
        citation=SOLLNER_1983,
        system="GaAs/Al0.25Ga0.75As",
        temperature_k=25.0,
        jp_a_cm2=None,
        vp_v=None,
        pvcr=6.0,
        layers=(("Al0.25Ga0.75As", 18), ("GaAs", 18), ("Al0.25Ga0.75As", 18)),
        contact="GaAs",
        substrate="GaAs",
        doping_cm3=1e18,
        spacer_nm=2.0,
        source="from memory: 5 nm Al0.25Ga0.75As barriers, 5 nm GaAs well (18 ML each), "
        "PVCR 6 at 25 K",
        assumptions="all values from memory; contacts and spacers module defaults",
    ),
    Device(
        key="inata1986_ingaas_inalas",
        citation=INATA_1986,
        system="In0.53Ga0.47As/In0.52Al0.48As",
        temperature_k=77.0,
        jp_a_cm2=None,
        vp_v=None,
        pvcr=15.0,
        layers=(("In0.52Al0.48As", 15), ("In0.53Ga0.47As", 15), ("In0.52Al0.48As", 15)),
        contact="In0.53Ga0.47As",
        substrate="InP",
        doping_cm3=2e18,
        spacer_nm=2.0,
        source="from memory: 4.4 nm InAlAs barriers and InGaAs well (15 ML), PVCR about 15 at 77 K",
        assumptions="all values from memory; contacts and spacers module defaults",
    ),
)
