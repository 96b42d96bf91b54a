"""Benchmark: switching pages of the front end in a real browser, on the demo registry.

Plain script (``make bench``). Builds the demo registry (the full invented 14-month story,
``seed_demo.scenario.build_demo``) in a temporary folder, starts ``streamlit run
ui/app.py`` from that folder, signs in with the demo logins of an auditor and a lab
manager in headless Chromium (Debian's package; Playwright drives it) and clicks through
every page of the navigation three times. A switch is timed from the click to the moment
the new page's run has ended with its title drawn and nothing left to draw.

Figures, per role: each page's first visit and the median of its repeat visits; the median
and slowest repeat switch against the 2 s goal; and the same-run reference, the median
round trip of the server's health request (the floor under any page switch).

Without Chromium or the playwright package it says so and exits 0 (nothing to measure).

Run: ``python tests/benchmarks/bench_ui.py``.
"""

from __future__ import annotations

import statistics
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from threadpoolctl import threadpool_limits  # noqa: E402

from tests.ui import browser  # noqa: E402

GOAL_S = 2.0
ROUNDS = 3
ROLES = ("jonas", "imara")  # the demo's auditor and lab manager


def main() -> int:
    try:
        from playwright.sync_api import sync_playwright
    except ImportError:
        print("skipped: the playwright package is not installed")
        return 0
    if browser.chromium() is None:
        print("skipped: Debian's chromium is not installed")
        return 0
    from registry.storage.engine import make_engine, upgrade
    from seed_demo.scenario import PEOPLE, build_demo

    passwords = {user: pw for user, _, _, pw in PEOPLE}
    with tempfile.TemporaryDirectory(prefix="specledger-bench-ui-") as tmp:
        work = Path(tmp)
        url = f"sqlite:///{work / 'demo.db'}"
        t0 = time.perf_counter()
        upgrade(url)
        engine = make_engine(url)
        with threadpool_limits(1):
            report = build_demo(engine)
        engine.dispose()
        print(f"demo registry built in {time.perf_counter() - t0:.0f} s: "
              + ", ".join(f"{v} {k}" for k, v in report.counts.items() if v))
        with browser.app_server(url, work, log=work / "server.log") as app_url, \
                sync_playwright() as pw:
            chromium = browser.launch(pw)
            reference = browser.health_round_trip(app_url, n=50)
            print(f"reference: health request round trip, median of 50: {reference * 1000:.2f} ms")
            worst = 0.0
            for user in ROLES:
                context = chromium.new_context(viewport={"width": 1400, "height": 1000})
                page = context.new_page()
                browser.sign_in(page, app_url, user, passwords[user])
                times = browser.page_switch_times(page, rounds=ROUNDS)
                problems = browser.problems_on(page)
                context.close()
                repeats = [statistics.median(t[1:]) for t in times.values()]
                median = statistics.median(repeats)
                worst = max(worst, max(repeats))
                print(f"\n{user}: page       first visit   repeat (median of {ROUNDS - 1})")
                for label, t in times.items():
                    print(f"  {label:16s} {t[0]:8.2f} s   {statistics.median(t[1:]):8.2f} s")
                print(f"  median repeat switch {median:.2f} s = {median / GOAL_S:.2f} × the "
                      f"{GOAL_S:g} s goal = {median / reference:,.0f} × the health round trip; "
                      f"slowest {max(repeats):.2f} s")
                if problems:
                    print("  pages showed errors: " + " | ".join(problems))
            chromium.close()
    print(f"\nslowest repeat page switch over both roles: {worst:.2f} s "
          f"({'within' if worst < GOAL_S else 'OVER'} the {GOAL_S:g} s goal)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
