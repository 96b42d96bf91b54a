"""Reference data seeded into a new registry: fuel properties and primary test methods.

Figures carry their source; "from memory" marks figures not re-checked against
the (paywalled) standard text and "common practice" marks trade rules of thumb.
An admin can edit all of them; they are starting values, not certified data.

Precision specs (``repeatability`` r and ``reproducibility`` R) are JSON:
``{"kind": "constant", "value": v}``, ``{"kind": "linear", "a": a, "b": b}``
meaning a + b·X, or ``{"kind": "proportional", "b": b}`` meaning b·X.
"""

from __future__ import annotations

from typing import Any

from .errors import InputError

# code, name, unit, lower, upper, decimals, source of the limits
PROPERTIES: list[dict[str, Any]] = [
    dict(code="RON", name="Research octane number", unit="", lower_limit=40, upper_limit=120, decimals=1),
    dict(code="MON", name="Motor octane number", unit="", lower_limit=40, upper_limit=120, decimals=1),
    dict(code="CN", name="Cetane number", unit="", lower_limit=20, upper_limit=80, decimals=1),
    dict(code="DENSITY", name="Density at 15 °C", unit="g/mL", lower_limit=0.6, upper_limit=1.1, decimals=4),
    dict(code="T10", name="Distillation 10 % recovered", unit="°C", lower_limit=0, upper_limit=400, decimals=1),
    dict(code="T50", name="Distillation 50 % recovered", unit="°C", lower_limit=0, upper_limit=400, decimals=1),
    dict(code="T90", name="Distillation 90 % recovered", unit="°C", lower_limit=0, upper_limit=450, decimals=1),
    dict(code="FLASH", name="Flash point (closed cup)", unit="°C", lower_limit=-50, upper_limit=300, decimals=1),
    dict(code="VP", name="Vapour pressure (DVPE)", unit="kPa", lower_limit=0, upper_limit=200, decimals=1),
    dict(code="AROMATICS", name="Aromatics", unit="vol %", lower_limit=0, upper_limit=100, decimals=1),
    dict(code="BENZENE", name="Benzene", unit="vol %", lower_limit=0, upper_limit=10, decimals=2),
    dict(code="ETHANOL", name="Ethanol", unit="vol %", lower_limit=0, upper_limit=100, decimals=1),
    dict(code="MTBE", name="Methyl tert-butyl ether", unit="vol %", lower_limit=0, upper_limit=30, decimals=1),
    # computed, not measured: AKI = (RON + MON)/2 from the two engine results (ASTM D4814,
    # the anti-knock index posted at the pump; from memory). Its "method" below is that rule.
    dict(code="AKI", name="Anti-knock index (R+M)/2, computed from RON and MON", unit="",
         lower_limit=40, upper_limit=120, decimals=1),
    dict(code="FAME", name="Fatty acid methyl esters", unit="vol %", lower_limit=0, upper_limit=100, decimals=1),
    dict(code="FREEZE", name="Freezing point", unit="°C", lower_limit=-80, upper_limit=0, decimals=1),
]
PROPERTY_SOURCE = ("Physical limits are plausibility bounds for fuel work chosen by the project "
                   "(common practice), not specification limits.")

def _c(v: float) -> dict:
    return {"kind": "constant", "value": v}


# The one table of primary test methods: the registry seeds it into a new database
# and the synthetic reference generator (seed_demo.synthetic.reference) draws its
# noise from it, so the demo and the registry cannot disagree. One method per
# property. Every r and R names its source; "from memory" marks figures recalled
# from the method's precision statement and not re-checked against its current text.
# Costs are invented planning figures in USD (a knock-engine rating is of the order of
# US$100-300, from memory); turnaround in days. Edit them to the lab's own figures.
METHODS: list[dict[str, Any]] = [
    dict(code="ASTM D2699", property="RON", name="Research octane, knock engine",
         repeatability=_c(0.2), reproducibility=_c(0.7), cost=250, turnaround_days=2,
         source="r 0.2 and R 0.7 for RON 90-100: ASTM D2699 precision statement, from memory."),
    dict(code="ASTM D2700", property="MON", name="Motor octane, knock engine",
         repeatability=_c(0.2), reproducibility=_c(0.9), cost=250, turnaround_days=2,
         source="r 0.2 and R 0.9 for MON 80-90: ASTM D2700 precision statement, from memory."),
    dict(code="ASTM D613", property="CN", name="Cetane number, CFR engine",
         repeatability={"kind": "linear", "a": 0.42, "b": 0.01},
         reproducibility={"kind": "linear", "a": -2.2, "b": 0.125}, cost=350, turnaround_days=3,
         source="ASTM D613 precision table (from memory): r 0.8, 0.9, 0.9, 0.9, 1.0 and "
                "R 2.8, 3.3, 3.8, 4.3, 4.8 at CN 40, 44, 48, 52, 56. R = 0.125·CN − 2.2 "
                "passes through every R; r = 0.42 + 0.01·CN is the least-squares line "
                "through the r values (within 0.04)."),
    dict(code="ASTM D4052", property="DENSITY", name="Density, oscillating U-tube",
         repeatability=_c(0.0002), reproducibility=_c(0.0005), cost=30, turnaround_days=1,
         source="r 0.2 kg/m³ and R 0.5 kg/m³ (0.0002 and 0.0005 g/mL) for light "
                "transparent products: ISO 12185 precision statement, from memory; the "
                "ASTM D4052 figures for such products are of the same size (from memory)."),
    *[dict(code="ASTM D86", property=p, name="Distillation at atmospheric pressure",
           repeatability=_c(1.5), reproducibility=_c(4.0), cost=80, turnaround_days=1,
           source="r 1.5 °C and R 4.0 °C: approximate, from memory. ASTM D86 precision "
                  "depends on the slope of the distillation curve at the point; constant "
                  "figures are a simplification.")
      for p in ("T10", "T50", "T90")],
    dict(code="ASTM D93", property="FLASH", name="Flash point, closed cup (procedure A)",
         repeatability={"kind": "proportional", "b": 0.029},
         reproducibility={"kind": "proportional", "b": 0.071}, cost=60, turnaround_days=1,
         source="r = 0.029·X and R = 0.071·X: ASTM D93 procedure A precision statement, "
                "from memory."),
    dict(code="ASTM D5191", property="VP", name="Vapour pressure, mini method",
         repeatability=_c(0.5), reproducibility=_c(2.75), cost=40, turnaround_days=1,
         source="r 0.50 kPa and R 2.75 kPa for DVPE of gasolines and gasoline-oxygenate "
                "blends: ASTM D5191 precision statement, from memory."),
    dict(code="ASTM D5769", property="AROMATICS", name="Aromatics by GC-MS",
         repeatability=_c(0.6), reproducibility=_c(2.0), cost=180, turnaround_days=3,
         source="r 0.6 and R 2.0 vol % near 20-35 vol % total aromatics: approximate, from "
                "memory (ASTM D5769 gives level-dependent precision)."),
    dict(code="ASTM D5769", property="BENZENE", name="Benzene by GC-MS",
         repeatability=_c(0.03), reproducibility=_c(0.1), cost=180, turnaround_days=3,
         source="r 0.03 and R 0.1 vol % near 0.5-1 vol % benzene: approximate, from memory "
                "(ASTM D5769 gives level-dependent precision)."),
    dict(code="ASTM D4815", property="ETHANOL", name="Oxygenates by GC",
         repeatability=_c(0.2), reproducibility=_c(0.6), cost=120, turnaround_days=2,
         source="r 0.2 and R 0.6 vol % near 10 vol % ethanol: approximate, from memory "
                "(ASTM D4815 gives level-dependent precision)."),
    dict(code="ASTM D4815", property="MTBE", name="Oxygenates by GC",
         repeatability=_c(0.2), reproducibility=_c(0.6), cost=120, turnaround_days=2,
         source="r 0.2 and R 0.6 vol % near 5-10 vol % MTBE: approximate, from memory "
                "(ASTM D4815 gives level-dependent precision)."),
    # Not a test of its own: the lab computes (R + M)/2 from its ASTM D2699 and D2700
    # results (ASTM D4814, from memory). For a mean of two independent results the precision
    # is √(r₁² + r₂²)/2 (propagation of independent errors): r = √(0.2² + 0.2²)/2 ≈ 0.14,
    # R = √(0.7² + 0.9²)/2 ≈ 0.57. The cost is the two engine ratings.
    dict(code="ASTM D4814", property="AKI", name="Anti-knock index (R+M)/2, computed",
         repeatability=_c(0.14), reproducibility=_c(0.57), cost=500, turnaround_days=2,
         source="computed, not measured: AKI = (RON + MON)/2 (ASTM D4814, from memory); "
                "r 0.14 = √(0.2² + 0.2²)/2 and R 0.57 = √(0.7² + 0.9²)/2 from the ASTM "
                "D2699 and D2700 figures above, errors of the two ratings independent."),
    dict(code="EN 14078", property="FAME", name="FAME in middle distillates, IR",
         repeatability=_c(0.1), reproducibility=_c(0.3), cost=60, turnaround_days=1,
         source="r 0.1 and R 0.3 vol % near 5-7 vol % FAME: approximate, from memory."),
    dict(code="ASTM D2386", property="FREEZE", name="Freezing point of aviation fuels",
         repeatability=_c(1.5), reproducibility=_c(2.5), cost=90, turnaround_days=1,
         source="r 1.5 °C and R 2.5 °C: ASTM D2386 precision statement, from memory."),
]


def method_of(property_code: str) -> dict[str, Any]:
    """The catalog's primary test method for a property (one per property)."""
    for m in METHODS:
        if m["property"] == property_code:
            return m
    raise InputError(f"no test method for property {property_code!r} in the catalog; known: "
                     f"{', '.join(m['property'] for m in METHODS)}", field="property")


def precision_at(spec: dict[str, Any] | None, level: float) -> float | None:
    """Evaluate a precision spec (r or R) at the level ``level``; None when not set."""
    if not spec:
        return None
    kind = spec.get("kind")
    if kind == "constant":
        return float(spec["value"])
    if kind == "linear":
        return float(spec["a"]) + float(spec["b"]) * level
    if kind == "proportional":
        return float(spec["b"]) * abs(level)
    raise InputError(f"unknown precision kind {kind!r}", field="repeatability/reproducibility")


def validate_precision_spec(spec: dict[str, Any], field: str) -> dict[str, Any]:
    """Check a precision spec before it is stored."""
    try:
        precision_at(spec, 1.0)
    except (KeyError, TypeError, ValueError) as exc:
        raise InputError(f"invalid precision spec {spec!r}: {exc}", field=field) from None
    return spec
