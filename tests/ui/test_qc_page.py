"""QC page: the counts in the header are what the charts and the table show, moving-range
points above the limit are marked, signals are named by their rule, legends sit clear of
the axis titles.

Reference: the individuals/moving-range chart of the NIST/SEMATECH e-Handbook of Statistical
Methods §6.3.2 (ASTM D6299): MR_i = |x_i − x_{i−1}|, upper MR limit D₄·MR̄ with D₄ = 3.267
for ranges of two, MR̄ from the baseline (the first 20 results here). The rule names are the
run rules as stated by Western Electric (1956) and Nelson (1984).
"""

from __future__ import annotations

import numpy as np
import pytest

from registry.lifecycle.qc_charts import Rule, rule_name
from registry.services import qc
from tests.ui.helpers import array, frame, open_page, plotly_specs, service, signed_in

D4 = 3.267  # e-Handbook §6.3.2.2, table of control-chart constants, n = 2


def _add(reg, value: float, day: int) -> None:
    service(reg, qc.add_qc_result, role="analyst", instrument="IR-100", material="CHECK-95",
            value=value, known_value=95.0, property_code="RON",
            measured_at=f"2027-03-{day:02d}T09:00")


def _metric(at, label: str) -> str:
    return next(m.value for m in at.metric if m.label == label)


def test_a_jump_is_marked_on_the_moving_range_chart_and_counts_agree(ui_reg):
    _add(ui_reg, 96.5, 1)   # a jump of about 1.5 against a spread of 0.1: MR far above its limit
    _add(ui_reg, 95.0, 2)   # and back
    at = open_page(signed_in("reviewer"), "qc")
    assert not at.exception and not at.error
    doc = service(ui_reg, qc.qc_chart, instrument="IR-100", material="CHECK-95",
                  property_code="RON")
    values = np.array(doc["chart"]["value"])
    mr = np.abs(np.diff(values))
    limit = D4 * mr[:19].mean()  # baseline: the first 20 results, 19 moving ranges
    above = [i + 1 for i in np.flatnonzero(mr > limit)]
    assert {20, 21} <= set(above)  # the jump and the return (and any the baseline had)
    ind, mrc, _ = plotly_specs(at)
    marked = next(t for t in mrc["data"] if t["name"].startswith("above the limit"))
    assert marked["name"] == f"above the limit ({len(above)})"
    np.testing.assert_allclose(array(marked["y"]), mr[np.array(above) - 1])
    ucl = next(t for t in mrc["data"] if t["name"] == "upper limit")
    assert array(ucl["y"])[0] == pytest.approx(limit, rel=1e-3)
    # header, charts and table agree: results drawn, signals listed
    table = frame(at, "rule")
    assert _metric(at, "Results") == str(len(values)) == str(doc["n"])
    assert array(ind["data"][0]["y"]).size == doc["n"]
    assert ind["data"][0]["name"] == f"result ({doc['n']})"
    assert _metric(at, "Signals") == str(len(table)) == str(len(doc["signals"]))
    assert at.selectbox(key="qc_chart").value.endswith(f"({doc['n']} results)")
    # signals named by their rule's own name; the moving-range ones on their chart
    assert set(table["rule"]) <= {rule_name(r) for r in Rule}
    mr_rows = table[table["rule"] == "moving range above its limit"]
    assert mr_rows["result"].tolist() == [i + 1 for i in above]
    assert set(mr_rows["chart"]) == {"moving range"}
    assert "1 beyond 3σ" in set(table["rule"])  # 96.5 is far beyond 3σ of a 0.1 spread


def test_legends_sit_above_the_plot_clear_of_the_axis_titles(ui_reg):
    at = open_page(signed_in("analyst"), "qc")
    for spec in plotly_specs(at):
        legend, layout = spec["layout"]["legend"], spec["layout"]
        assert legend["orientation"] == "h" and legend["yanchor"] == "bottom" and legend["y"] >= 1
        assert layout["xaxis"]["title"]["text"] and layout["yaxis"]["title"]["text"]
        assert "title" not in layout or not layout["title"].get("text")


def test_rule_names_follow_the_run_rules():
    # Western Electric (1956) / Nelson (1984) wording of the zone and run rules
    assert rule_name(Rule.TWO_OF_THREE_BEYOND_2_SIGMA) == "2 of 3 beyond 2σ"
    assert rule_name(Rule.FOUR_OF_FIVE_BEYOND_1_SIGMA) == "4 of 5 beyond 1σ"
    assert rule_name(Rule.RUN_ON_ONE_SIDE, 8) == "8 in a row on one side"
    assert rule_name("beyond_3_sigma") == "1 beyond 3σ"
