"""Synthetic fuel populations for benchmarks and the demo (invented data, no database).

Mid-IR spectra are rendered by Beer–Lambert from a band library of pure blend
components (:mod:`.bands`), properties follow the blending rules of
:mod:`.blending` (each with its source there), and reference values get the
test methods' precision noise from the registry's method catalog
(:mod:`.reference`).
"""

from .bands import BAND_LIBRARY, Band, default_axis
from .blending import PROPERTY_CODES, PROPERTY_UNITS, blend_properties
from .components import COMPONENTS, FAMILY_COMPONENTS, NEW_COMPONENT, Component
from .population import (DIESEL_GRADES, GASOLINE_GRADES, SEASONS, Population,
                         generate_population)
from .reference import PRECISIONS, reference_noise, reference_sigma
from .spectra import (REFERENCE_ANALYZER, SECOND_ANALYZER, Analyzer,
                      pure_component_spectra, render_spectra)

__all__ = [
    "Analyzer", "BAND_LIBRARY", "Band", "COMPONENTS", "Component", "DIESEL_GRADES",
    "FAMILY_COMPONENTS", "GASOLINE_GRADES", "NEW_COMPONENT", "PRECISIONS", "PROPERTY_CODES",
    "PROPERTY_UNITS", "Population", "REFERENCE_ANALYZER", "SECOND_ANALYZER", "SEASONS",
    "blend_properties", "default_axis", "generate_population", "pure_component_spectra",
    "reference_noise", "reference_sigma", "render_spectra",
]
