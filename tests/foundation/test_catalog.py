"""The seeded method catalog: every precision figure carries its source.

Sources of the checks: ISO 12185 density precision r ≈ 0.2 kg/m³, R ≈ 0.5 kg/m³ for light
transparent products (from memory); ASTM D613 R = 3.8 at CN 48 and 4.3 at CN 52 (from
memory); a precision figure without its source cannot be signed by a reviewer (the
registry's own rule, stated in registry/catalog.py).
"""

from __future__ import annotations

import pytest

from registry import catalog


def _figures(spec: dict) -> list[float]:
    return [float(v) for k, v in spec.items() if k != "kind"]


@pytest.mark.parametrize("method", catalog.METHODS, ids=lambda m: f"{m['code']}-{m['property']}")
def test_every_figure_names_its_source(method):
    source = method.get("source", "")
    # a published source (the method itself or the standard the figure comes from) and
    # how sure the figure is
    assert any(body in source for body in ("ASTM", "ISO", "EN ")) or "from memory" in source
    assert "from memory" in source or "common practice" in source
    # each stored figure appears in the note, so the note speaks of these numbers
    for key in ("repeatability", "reproducibility"):
        for v in _figures(method[key]):
            assert f"{abs(v):g}" in source, (method["code"], key, v)


def test_density_precision_is_that_of_iso_12185():
    d = catalog.method_of("DENSITY")
    # 0.2 and 0.5 kg/m³ = 0.0002 and 0.0005 g/mL (ISO 12185, from memory)
    assert catalog.precision_at(d["repeatability"], 0.75) == pytest.approx(0.0002)
    assert catalog.precision_at(d["reproducibility"], 0.75) == pytest.approx(0.0005)


def test_cetane_reproducibility_at_the_d613_points():
    cn = catalog.method_of("CN")
    assert catalog.precision_at(cn["reproducibility"], 48.0) == pytest.approx(3.8)
    assert catalog.precision_at(cn["reproducibility"], 52.0) == pytest.approx(4.3)


def test_one_primary_method_per_property():
    properties = [m["property"] for m in catalog.METHODS]
    assert len(properties) == len(set(properties))
    assert {p["code"] for p in catalog.PROPERTIES} == set(properties)
