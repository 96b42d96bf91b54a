"""The Coverage page says which check put each recent spectrum outside, shows Q in
scientific notation, draws a week without spectra apart from a week with 0 % outside,
gives every axis a unit, and keeps a map only while the data it depends on is unchanged.

The reference for every count is the service's own per-spectrum flag list
(``views.coverage_map``), itself checked against the prediction service in test_views.py.
"""

from __future__ import annotations

import re

import numpy as np

from registry.services import views
from registry.services.intake import import_spectra
from seed_demo.synthetic import generate_population
from tests.factories import write_population_csv
from tests.ui.helpers import array, frame, open_page, plotly_specs, service, signed_in


def _checks_table(at):
    return frame(at, "recent spectra failing it").set_index("check")


def test_count_per_check_agrees_with_the_services_flags(ui_reg):
    at = open_page(signed_in("reviewer"), "coverage")
    assert not at.exception and not at.error
    cov = service(ui_reg, views.coverage_map, "RON", "PREM95")
    table = _checks_table(at)
    flags = cov["recent"]["flags"]
    for c in cov["checks"]:
        # the same count as the per-spectrum flags, for each of the five checks
        assert table.loc[c["words"], "recent spectra failing it"] == sum(c["check"] in f for f in flags)
    assert set(table.index) == {"leverage", "Hotelling T²", "Q residual",
                                "nearest-neighbour distance",
                                "prediction outside the calibration range"}
    # the prediction-range check is reported but does not make a spectrum outside
    assert table.loc["prediction outside the calibration range", "counts as outside"].startswith("no")
    # the Q limit is written in scientific notation
    assert re.fullmatch(r"\d\.\d{2}e[-+]\d{2}", table.loc["Q residual", "limit"])
    # every outside spectrum fails at least one check that counts
    counting = {c["check"] for c in cov["checks"] if c["makes_outside"]}
    assert all(bool(set(f) & counting) == bool(o) for f, o in zip(flags, cov["recent"]["outside"]))


def test_hover_names_the_failed_checks_and_writes_q_in_scientific_notation(ui_reg):
    at = open_page(signed_in("auditor"), "coverage")
    cov = service(ui_reg, views.coverage_map, "RON", "PREM95")
    scatter = plotly_specs(at)[0]
    outside = next(t for t in scatter["data"] if t["name"] == "recent, outside")
    idx = [i for i, o in enumerate(cov["recent"]["outside"]) if o]
    words = {c["check"]: c["words"] for c in cov["checks"]}
    assert len(outside["hovertext"]) == len(idx) > 0
    for text, i in zip(outside["hovertext"], idx):
        assert cov["recent"]["samples"][i] in text
        failed = text.split("checks failed: ")[1]
        assert failed == ", ".join(words[f] for f in cov["recent"]["flags"][i])
        q = re.search(r"Q (\S+)<br>", text).group(1)
        assert re.fullmatch(r"\d\.\d{2}e[-+]\d{2}", q)
        assert float(q) == float(f"{cov['residuals']['recent']['q'][i]:.2e}")


def test_a_week_without_spectra_is_drawn_apart_from_a_week_with_none_outside(ui_reg):
    at = open_page(signed_in("reviewer"), "coverage")
    cov = service(ui_reg, views.coverage_map, "RON", "PREM95")
    weeks = cov["weekly"]
    empty = [w for w in weeks if w["n"] == 0]
    zero = [w for w in weeks if w["n"] and w["outside"] == 0]
    assert empty and zero  # the test registry has both kinds of week
    # consecutive Mondays from the window's start to its end, empty ones included
    starts = [w["week_start"] for w in weeks]
    assert all((b - a).days == 7 for a, b in zip(starts, starts[1:]))
    assert starts[0] <= cov["since"] and cov["until"] - starts[-1] < np.timedelta64(7, "D")
    assert all(w["share"] is None for w in empty)
    weekly = plotly_specs(at)[2]
    bars, gaps = weekly["data"]
    assert bars["type"] == "bar" and gaps["name"].startswith("week without spectra")
    assert len(bars["x"]) == len(weeks) - len(empty) and len(gaps["x"]) == len(empty)
    heights = array(bars["y"])
    np.testing.assert_allclose(heights, [100 * w["outside"] / w["n"] for w in weeks if w["n"]])
    # a week with 0 % outside still shows its count, "0/n"
    assert {f"0/{w['n']}" for w in zero} <= set(bars["text"])


def test_every_axis_has_a_unit(ui_reg):
    at = open_page(signed_in("reviewer"), "coverage")
    for spec in plotly_specs(at):
        layout = spec["layout"]
        for axis in ("xaxis", "yaxis"):
            title = layout[axis]["title"]["text"]
            assert re.search(r"\(.+\)", title), title  # e.g. "(%)", "(dimensionless, ...)"


def test_a_kept_map_is_redrawn_when_new_spectra_arrive(ui_reg, tmp_path):
    at = open_page(signed_in("reviewer"), "coverage")
    before = service(ui_reg, views.coverage_map, "RON", "PREM95")["counts"]["recent"]
    assert at.metric[1].value == str(before)
    at = open_page(at, "due")
    at = open_page(at, "coverage")  # a repeat visit: same stamp, same figures
    assert at.metric[1].value == str(before)
    pop = generate_population(4, family="gasoline", seed=5)
    path = tmp_path / "late.csv"
    write_population_csv(path, pop, "LATE", "PREM95", start_day=26)
    service(ui_reg, import_spectra, [path], instrument="IR-100", role="analyst")
    at = open_page(at, "coverage")
    assert at.metric[1].value == str(service(ui_reg, views.coverage_map, "RON", "PREM95")
                                     ["counts"]["recent"]) == str(before + 4)
