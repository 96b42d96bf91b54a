"""Property table of the blend components of the synthetic demo.

Pure-compound densities, molar masses and normal boiling points are handbook
values (CRC Handbook of Chemistry and Physics, from memory, rounded to the
digits shown). Octane numbers of pure hydrocarbons are the API Research
Project 45 values as reproduced in refining textbooks, from memory; the
literature spreads by several numbers for aromatics and ethers (blending vs
neat ratings), which does not matter for invented demo data. Reid vapour
pressures are at 37.8 °C, from memory; for ethanol and MTBE the *blending*
RVP is used because the neat value badly under-predicts their effect in
gasoline (common practice).

Gasoline lumps take the values of the named representative compound. The four
diesel lumps are invented typical values for the demo (marked "invented").
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
    Component("isopentane", "2-methylbutane", "isoparaffin", 0.620, 72.15, 27.8,
              ron=92.3, mon=90.3, rvp=138.0, source=_HANDBOOK),
    Component("n_paraffins", "n-hexane", "n-paraffin", 0.659, 86.18, 68.7,
              ron=24.8, mon=26.0, rvp=34.0, source=_HANDBOOK),
    # isooctane is RON = MON = 100 by definition of the scale (ASTM D2699/D2700)
    Component("isooctane", "2,2,4-trimethylpentane", "isoparaffin", 0.692, 114.23, 99.2,
              ron=100.0, mon=100.0, rvp=11.8, source=_HANDBOOK),
    Component("naphthenes", "cyclohexane", "naphthene", 0.779, 84.16, 80.7,
              ron=83.0, mon=77.2, rvp=22.5, source=_HANDBOOK),
    Component("olefins", "1-hexene", "olefin", 0.673, 84.16, 63.5,
              ron=76.4, mon=63.4, rvp=31.0, source=_HANDBOOK),
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
    # (Anderson & Wallington, Energy Fuels 2020; from memory); blending RVP
    # ~124 kPa (18 psi) at low ethanol levels (from memory) vs 15.9 kPa neat
    Component("ethanol", "ethanol", "oxygenate", 0.789, 46.07, 78.4,
              ron=109.0, mon=90.0, rvp=124.0,
              source="CRC Handbook (from memory); octanes and blending RVP from memory"),
    # MTBE: blending values (from memory); neat RVP ~54 kPa
    Component("mtbe", "methyl tert-butyl ether", "oxygenate", 0.741, 88.15, 55.2,
              ron=117.0, mon=101.0, rvp=55.0,
              source="CRC Handbook (from memory); blending octanes/RVP from memory"),
    # the new component of the demo timeline (outside the early calibration space)
    Component("heavy_aromatics", "1,2,4-trimethylbenzene (C9 aromatic reformate)", "aromatic",
              0.876, 120.19, 169.4, ron=110.0, mon=101.0, rvp=0.5,
              source="CRC Handbook (from memory); octanes approximate, from memory"),
)

_INVENTED = "invented typical lump values for the demo"

DIESEL_COMPONENTS: tuple[Component, ...] = (
    Component("diesel_paraffins", "n- and isoparaffins C12–C20 (lump)", "n-paraffin",
              0.785, 226.0, 285.0, cetane=70.0, source=_INVENTED),
    Component("diesel_naphthenes", "alkylcyclohexanes and decalins (lump)", "naphthene",
              0.850, 210.0, 260.0, cetane=42.0, source=_INVENTED),
    Component("diesel_aromatics", "alkylbenzenes and alkylnaphthalenes (lump)", "aromatic",
              0.930, 170.0, 255.0, cetane=15.0, source=_INVENTED),
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
