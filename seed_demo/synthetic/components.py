"""Property table of the blend components of the synthetic demo.

Pure-compound densities, molar masses and normal boiling points are handbook
values (CRC Handbook of Chemistry and Physics, from memory, rounded to the
digits shown). Octane numbers of pure hydrocarbons are the API Research
Project 45 values as reproduced in refining textbooks, from memory; the
literature spreads by several numbers for aromatics and ethers (blending vs
neat ratings), which does not matter for invented demo data. Reid vapour
pressures are at 37.8 °C, from memory; for MTBE the *blending* RVP is used
(common practice). Ethanol keeps its own vapour pressure: its strongly
non-ideal effect on a blend is the vapour-pressure rule's business
(:func:`seed_demo.synthetic.blending.vapour_pressure`).

Gasoline lumps take the values of the named representative compound, except
that for the distillation (T50) a lump distils over the boiling range of the
refinery cut it stands for: from the normal boiling point of its lightest to
that of its heaviest typical member (CRC Handbook boiling points, from memory;
the choice of members is invented for the demo). The four diesel lumps are
invented typical values for the demo (marked "invented").
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Component:
    """One blend component and the properties the blending rules need.

    Parameters
    ----------
    name : str
        Column name used in composition tables and the band library.
    represented_by : str
        The pure compound whose properties the component takes, or a
        description of an invented lump.
    kind : str
        Hydrocarbon class: ``n-paraffin``, ``isoparaffin``, ``naphthene``,
        ``olefin``, ``aromatic`` or ``oxygenate``.
    density : float
        g/mL at 15–20 °C.
    molar_mass : float
        g/mol.
    boiling_point : float
        Normal boiling point, °C.
    ron, mon : float or None
        Research / Motor octane number (gasoline components).
    rvp : float or None
        Reid vapour pressure (blending value for oxygenates), kPa.
    cetane : float or None
        Cetane number (diesel components).
    source : str
        Where the figures come from.
    boiling_range : (float, float) or None
        °C over which the component distils in the T50 rule; None for a pure
        compound, which distils at ``boiling_point``.
    """

    name: str
    represented_by: str
    kind: str
    density: float
    molar_mass: float
    boiling_point: float
    ron: float | None = None
    mon: float | None = None
    rvp: float | None = None
    cetane: float | None = None
    source: str = ""
    boiling_range: tuple[float, float] | None = None

    @property
    def is_aromatic(self) -> bool:
        return self.kind == "aromatic"

    @property
    def is_olefin(self) -> bool:
        return self.kind == "olefin"


_HANDBOOK = ("density, molar mass, boiling point: CRC Handbook (from memory); "
             "RON/MON: API Project 45 via refining textbooks (from memory); "
             "RVP at 37.8 °C (from memory)")

GASOLINE_COMPONENTS: tuple[Component, ...] = (
    Component("n_butane", "n-butane", "n-paraffin", 0.579, 58.12, -0.5,
              ron=94.0, mon=89.6, rvp=356.0, source=_HANDBOOK),
    # light isoparaffins C5–C6: isopentane 27.8 °C to 3-methylpentane 63.3 °C
    Component("isopentane", "2-methylbutane", "isoparaffin", 0.620, 72.15, 27.8,
              ron=92.3, mon=90.3, rvp=138.0, source=_HANDBOOK, boiling_range=(27.8, 63.3)),
    # light n-paraffins C5–C8: n-pentane 36.1 °C to n-octane 125.7 °C
    Component("n_paraffins", "n-hexane", "n-paraffin", 0.659, 86.18, 68.7,
              ron=24.8, mon=26.0, rvp=34.0, source=_HANDBOOK, boiling_range=(36.1, 125.7)),
    # isooctane is RON = MON = 100 by definition of the scale (ASTM D2699/D2700)
    # alkylate trimethylpentanes: 2,2,4- 99.2 °C to 2,3,4-trimethylpentane 113.5 °C
    Component("isooctane", "2,2,4-trimethylpentane", "isoparaffin", 0.692, 114.23, 99.2,
              ron=100.0, mon=100.0, rvp=11.8, source=_HANDBOOK, boiling_range=(99.2, 113.5)),
    # C5–C8 naphthenes: cyclopentane 49.3 °C to the dimethylcyclohexanes, about 120 °C
    Component("naphthenes", "cyclohexane", "naphthene", 0.779, 84.16, 80.7,
              ron=83.0, mon=77.2, rvp=22.5, source=_HANDBOOK, boiling_range=(49.3, 120.0)),
    # FCC olefins C5–C8: 1-pentene 30.0 °C to 1-octene 121.3 °C
    Component("olefins", "1-hexene", "olefin", 0.673, 84.16, 63.5,
              ron=76.4, mon=63.4, rvp=31.0, source=_HANDBOOK, boiling_range=(30.0, 121.3)),
    Component("toluene", "toluene", "aromatic", 0.867, 92.14, 110.6,
              ron=120.0, mon=103.5, rvp=3.4, source=_HANDBOOK),
    Component("o_xylene", "1,2-dimethylbenzene", "aromatic", 0.880, 106.17, 144.4,
              ron=120.0, mon=103.0, rvp=0.9, source=_HANDBOOK),
    Component("m_xylene", "1,3-dimethylbenzene", "aromatic", 0.864, 106.17, 139.1,
              ron=117.5, mon=115.0, rvp=1.1, source=_HANDBOOK),
    Component("p_xylene", "1,4-dimethylbenzene", "aromatic", 0.861, 106.17, 138.4,
              ron=116.4, mon=109.6, rvp=1.2, source=_HANDBOOK),
    Component("benzene", "benzene", "aromatic", 0.879, 78.11, 80.1,
              ron=101.0, mon=91.0, rvp=22.1, source=_HANDBOOK + "; benzene octanes approximate"),
    # ethanol: RON ~109, MON ~90 as used in the ethanol-blending literature
    # (Anderson & Wallington, Energy Fuels 2020; from memory); vapour pressure
    # 15.9 kPa at 37.8 °C (CRC Handbook, from memory). In a gasoline it distils
    # with the hydrocarbons as azeotropes, from about 58.7 °C (with n-hexane) to
    # 76.7 °C (with toluene) (azeotrope tables, from memory)
    Component("ethanol", "ethanol", "oxygenate", 0.789, 46.07, 78.4,
              ron=109.0, mon=90.0, rvp=15.9,
              source="CRC Handbook (from memory); octanes from memory",
              boiling_range=(58.7, 76.7)),
    # MTBE: blending values (from memory); neat RVP ~54 kPa
    Component("mtbe", "methyl tert-butyl ether", "oxygenate", 0.741, 88.15, 55.2,
              ron=117.0, mon=101.0, rvp=55.0,
              source="CRC Handbook (from memory); blending octanes/RVP from memory"),
    # the new component of the demo timeline (outside the early calibration space)
    # C9 aromatics: n-propylbenzene 159.2 °C to 1,2,3-trimethylbenzene 176.1 °C
    Component("heavy_aromatics", "1,2,4-trimethylbenzene (C9 aromatic reformate)", "aromatic",
              0.876, 120.19, 169.4, ron=110.0, mon=101.0, rvp=0.5,
              source="CRC Handbook (from memory); octanes approximate, from memory",
              boiling_range=(159.2, 176.1)),
)

_INVENTED = "invented typical lump values for the demo"

# Distillation ranges of the diesel lumps: n-dodecane 216.3 °C to n-eicosane 343 °C for
# the paraffins (CRC Handbook, from memory); the naphthene and aromatic ranges are invented
# to sit in the same middle-distillate cut.
DIESEL_COMPONENTS: tuple[Component, ...] = (
    Component("diesel_paraffins", "n- and isoparaffins C12–C20 (lump)", "n-paraffin",
              0.785, 226.0, 285.0, cetane=70.0, source=_INVENTED,
              boiling_range=(216.3, 343.0)),
    Component("diesel_naphthenes", "alkylcyclohexanes and decalins (lump)", "naphthene",
              0.850, 210.0, 260.0, cetane=42.0, source=_INVENTED, boiling_range=(190.0, 300.0)),
    Component("diesel_aromatics", "alkylbenzenes and alkylnaphthalenes (lump)", "aromatic",
              0.930, 170.0, 255.0, cetane=15.0, source=_INVENTED, boiling_range=(200.0, 300.0)),
    # FAME: density within EN 14214's 0.860–0.900 (from memory), methyl oleate
    # molar mass 296.5 g/mol (handbook), rapeseed methyl ester CN ~54 (from memory)
    Component("fame", "fatty acid methyl esters (rapeseed type)", "oxygenate",
              0.883, 296.5, 350.0, cetane=54.0,
              source="EN 14214 density range and CN (from memory); boiling point approximate"),
)

COMPONENTS: dict[str, Component] = {c.name: c for c in GASOLINE_COMPONENTS + DIESEL_COMPONENTS}

FAMILY_COMPONENTS: dict[str, tuple[str, ...]] = {
    "gasoline": tuple(c.name for c in GASOLINE_COMPONENTS),
    "diesel": tuple(c.name for c in DIESEL_COMPONENTS),
}

#: Name of the component that only appears later in the demo timeline.
NEW_COMPONENT = "heavy_aromatics"
