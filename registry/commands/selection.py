"""Selection commands: ``select`` (choose samples to send for reference testing),
``plan`` (what further reference tests are expected to buy) and ``selection list`` /
``selection show RUN``."""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Annotated, Optional

import typer

from ..errors import InputError
from ..services import planning
from ..services import selection as svc
from ..services import selection_runs as runs
from ..services.models import read_recipe
from ..timeparse import parse_time
from ..selection.picking import METHODS
from .common import (AsOpt, DbOpt, FormatOpt, Output, choice, emit, handle_errors, login,
                     staged_output, table, transaction)

selection_app = typer.Typer(help="Stored selection runs (send lists).", no_args_is_help=True)

# Below this many spectra to load a run is quick and no progress bar is drawn.
LARGE_POOL_SPECTRA = 2000
LARGE_PICK_COUNT = 200
SEND_TABLE_COLUMNS = ["rank", "sample_id", "batch", "source", "use", "cost", "cumulative_cost", "reason"]


class _Bars:
    """One terminal progress bar per stage, drawn only for large jobs (on stderr)."""

    def __init__(self, enabled: bool):
        self.enabled = enabled
        self.bars: dict[str, tuple] = {}

    def __call__(self, stage: str, done: int, total: int) -> None:
        limit = LARGE_PICK_COUNT if stage == "selecting" else LARGE_POOL_SPECTRA
        if not self.enabled or total < limit:
            return
        if stage not in self.bars:
            ctx = typer.progressbar(length=total, label=stage, file=sys.stderr)
            self.bars[stage] = (ctx, ctx.__enter__(), 0)
        ctx, bar, seen = self.bars[stage]
        bar.update(done - seen)
        self.bars[stage] = (ctx, bar, done)
        if done >= total:
            ctx.__exit__(None, None, None)

    def close(self) -> None:
        for ctx, bar, seen in self.bars.values():
            if seen < bar.length:
                ctx.__exit__(None, None, None)


def _date(text: Optional[str], field: str):
    return parse_time(text, field=field) if text else None


def recommendation_line(rec: dict | None) -> str:
    """One line: the method proposed for the situation, why, and whether it was used."""
    if not rec:
        return ""
    used = "used" if rec["followed"] else "not used: another method was chosen"
    return f"recommended method: {rec['method']} ({used}) - {rec['reason']}"


def _expected(session, actor, result, grade: str) -> dict | None:
    """The space property's expected RMSEP now and after the picks (None without a model)."""
    code = result.parameters.get("space_property")
    if code is None or not result.rows:
        return None
    plan = planning.plan_testing(session, actor, planning.check_plan(
        property_code=code, grade=grade, added=len(result.rows)))
    return {"property": code, "unit": plan["unit"], "now": plan["now"], "after": plan["after"],
            "band": plan["band"], "cautions": plan["cautions"]}


def expected_lines(e: dict | None) -> list[str]:
    if not e:
        return []
    unit = f" {e['unit']}" if e["unit"] else ""
    now, after, band = e["now"], e["after"], f"{100 * e['band']:.0f} % band"
    return [f"expected {e['property']} RMSEP: now {now['rmsep']:.3g}{unit} ({band} "
            f"{now['low']:.3g}-{now['high']:.3g}), after these {after['added']} results "
            f"{after['rmsep']:.3g}{unit} ({after['low']:.3g}-{after['high']:.3g})",
            *e["cautions"][1:]]


def _benefit_lines(b: dict) -> list[str]:
    if not b:
        return []
    pct = lambda v: "n/a (no calibration yet)" if v is None else f"{100 * v:.1f} %"  # noqa: E731
    num = lambda v: "n/a" if v is None else f"{v:.3g}"  # noqa: E731
    return [
        f"recent production (last {b['recent_window_days']} days, {b['n_recent']} spectra, in "
        f"{b.get('space', 'the selection space')}) inside the calibration space: now "
        f"{pct(b.get('inside_share_now'))}, with these picks at today's fixed limits "
        f"{pct(b.get('inside_share_after'))} (an estimate)",
        f"largest {b['distance']} distance from a recent sample to its nearest calibration "
        f"sample: now {num(b.get('largest_gap_now'))}, with these picks "
        f"{num(b.get('largest_gap_after'))}",
    ]


@handle_errors
def select_command(
        prop: Annotated[list[str], typer.Option("--property", help="Property to test (repeat for several).")],
        grade: Annotated[str, typer.Option("--grade")],
        method: Annotated[Optional[choice(METHODS)], typer.Option(
            "--method", help="Selection method (default: the one recommended for the situation).")] = None,
        n: Annotated[Optional[int], typer.Option("--n", help="Pick exactly N samples.")] = None,
        budget: Annotated[Optional[float], typer.Option("--budget", help="Pick as many as AMOUNT buys.")] = None,
        pool: Annotated[choice(svc.POOLS), typer.Option("--pool")] = "unreferenced",
        since: Annotated[Optional[str], typer.Option("--since", help="Spectra acquired from DATE (UTC).")] = None,
        until: Annotated[Optional[str], typer.Option("--until", help="Spectra acquired before DATE (UTC).")] = None,
        site: Annotated[Optional[str], typer.Option("--site")] = None,
        recipe: Annotated[Optional[Path], typer.Option("--recipe", help="Recipe JSON for the space.")] = None,
        components: Annotated[Optional[str], typer.Option(
            "--components", help="PCA components: a number, or 'model' for the model's count.")] = None,
        explained_variance: Annotated[float, typer.Option("--explained-variance")] = 0.99,
        metric: Annotated[choice(svc.METRICS), typer.Option("--metric")] = "mahalanobis",
        space_property: Annotated[Optional[str], typer.Option(
            "--space-property", help="Property whose model space the picks are made in "
                                     "(default: the costliest test's).")] = None,
        forecast: Annotated[bool, typer.Option(
            "--forecast/--no-forecast", help="Expected RMSEP now and after these results.")] = True,
        out: Annotated[Optional[Path], typer.Option("--out", help="Write the send list as CSV.")] = None,
        dry_run: Annotated[bool, typer.Option("--dry-run", help="Show the send list, store nothing.")] = False,
        db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """Choose untested samples to send for reference testing, within a count or a budget.

    With ``--out`` the send list is written during the action and put in place only
    once the run is stored; a send list that cannot be written stores no run.
    """
    n_components = None
    if components is not None:
        if components == "model":
            n_components = "model"
        elif components.isdigit():
            n_components = int(components)
        else:
            raise InputError(f"--components must be a number or 'model', got {components!r}",
                             field="--components")
    request = svc.check_request(
        property_codes=prop, grade=grade, method=method, n=n, budget=budget, pool=pool,
        since=_date(since, "--since"), until=_date(until, "--until"), site=site,
        recipe=read_recipe(recipe) if recipe else None, explained_variance=explained_variance,
        n_components=n_components, metric=metric, space_property=space_property)
    bars = _Bars(enabled=fmt is not Output.json)
    try:
        with staged_output(out) as send_list, transaction(db) as session:
            actor = login(session, as_user)
            result = svc.run_request(session, actor, request, progress=bars, store=not dry_run)
            doc = result.summary()
            doc["expected"] = (_expected(session, actor, result, request.grade)
                               if forecast else None)
            if send_list is not None:
                send_list.write(runs.send_list_csv(result.rows))
    finally:
        bars.close()

    def text() -> str:
        head = (f"selection run {doc['run_id']}" if doc["run_id"] else "preview (not stored)")
        lines = [f"{head}: {doc['parameters']['method']}, {len(result.rows)} of {result.pool_size} candidate samples, "
                 f"tests {result.tests} at {result.cost_per_sample:g} {result.currency} per sample, "
                 f"total {result.total_cost:g} {result.currency}"
                 + (f" of budget {budget:g}" if budget is not None else ""),
                 f"space: {doc['parameters']['space']['components']} PCA components "
                 f"({100 * doc['parameters']['space']['explained']:.1f} % of variance) of "
                 f"{'model ' + result.model_label + ' recipe' if result.model_label else 'the default recipe'}; "
                 f"reference: {doc['parameters']['reference_set']} ({doc['parameters']['n_reference']})",
                 recommendation_line(doc["recommendation"]),
                 "", table(result.rows, SEND_TABLE_COLUMNS), ""]
        lines += _benefit_lines(result.benefit)
        lines += expected_lines(doc["expected"])
        if out is not None:
            lines.append(f"send list written to {out}")
        return "\n".join(lines)
    emit(fmt, doc, text)


def plan_text(doc: dict) -> str:
    """The plan for a lab manager: where the error stands, what money buys, when to stop."""
    unit = f" {doc['unit']}" if doc["unit"] else ""
    cur, now, band = doc["currency"], doc["now"], f"{100 * doc['band']:.0f} % band"
    fmt = lambda v: f"{v:.3g}"  # noqa: E731
    lines = [f"{doc['property']} on {doc['grade']}: "
             + (f"model {doc['model']}" if doc["model"] else "no current model")
             + f", reference test {doc['reference_method']} at {doc['cost_per_test']:g} {cur} "
               "per sample",
             f"Now: RMSECV {fmt(now['rmsecv'])}{unit} with {now['n']} calibration samples "
             f"(expected RMSEP {fmt(now['rmsep'])}{unit}, {band} {fmt(now['low'])}-"
             f"{fmt(now['high'])})"]
    b = doc["budget"]
    if b is not None:
        lines.append(f"The budget of {b['amount']:g} {cur} buys {b['tests']} tests: expected "
                     f"RMSEP {fmt(b['rmsep'])}{unit} ({fmt(b['low'])}-{fmt(b['high'])})")
    t, reach = doc["target"], doc["to_reach"]
    if reach is not None:
        lines.append(f"Target RMSEP {fmt(reach['target'])}{unit} ({t['source']}): "
                     + ("already reached" if reach["added"] == 0 else
                        f"about {reach['added']} more tests, {reach['cost']:g} {cur}"))
    else:
        lines.append(f"Target: not reachable - {doc['to_reach_reason']}")
    p = doc["precision"]
    if p["sigma_r"]:
        lines.append(f"Floor: {fmt(doc['floor']['rmsep'])}{unit}; it includes the reference "
                     f"test's own repeatability σ_r = {fmt(p['sigma_r'])}{unit} (r = {p['r']:g})")
    lines.append(doc["verdict"])
    lines += ["", "More tests and what they are expected to buy:",
              table([{"tests": r["added"], f"cost ({cur})": f"{r['cost']:g}",
                      "expected RMSEP": fmt(r["rmsep"]),
                      band: f"{fmt(r['low'])}-{fmt(r['high'])}"} for r in doc["forecast"]]),
              "", f"Candidates: {doc['pool']['candidates']} untested samples, "
                  f"{100 * doc['pool']['outside_share']:.0f} % outside the model's space. "
                  f"Recommended selection: {doc['recommendation']['method']} - "
                  f"{doc['recommendation']['reason']}"]
    lines += doc["cautions"]
    return "\n".join(lines)


@handle_errors
def plan_command(
        prop: Annotated[str, typer.Option("--property", help="Property to plan reference tests for.")],
        grade: Annotated[str, typer.Option("--grade")],
        budget: Annotated[Optional[float], typer.Option("--budget", help="What would AMOUNT buy?")] = None,
        target: Annotated[Optional[float], typer.Option(
            "--target", help="RMSEP to reach (default: σ_R of the reference method).")] = None,
        curve: Annotated[choice(planning.CURVES), typer.Option(
            "--curve", help="How the learning-curve subsets are chosen.")] = planning.DEFAULT_CURVE,
        db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """Forecast the prediction error against the number and cost of further reference tests.

    Says what a budget buys, how many tests reach the target, and whether more testing
    is worth anything. Stores nothing.
    """
    request = planning.check_plan(property_code=prop, grade=grade, budget=budget, target=target,
                                  curve=curve)
    with transaction(db) as session:
        doc = planning.plan_testing(session, login(session, as_user), request)
    emit(fmt, doc, lambda: plan_text(doc))


@selection_app.command("list")
@handle_errors
def selection_list(db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """List stored selection runs."""
    with transaction(db) as session:
        rows = runs.list_runs(session, login(session, as_user))
    emit(fmt, rows, lambda: table(rows, ["id", "created_at", "by", "method", "properties", "grade",
                                         "picks", "total_cost", "state"]))


@selection_app.command("show")
@handle_errors
def selection_show(run: str, db: DbOpt = None, as_user: AsOpt = None,
                   fmt: FormatOpt = Output.text) -> None:
    """Show a stored run: parameters, send list, and the results that came back."""
    with transaction(db) as session:
        doc = runs.run_detail(session, login(session, as_user), run)

    def text() -> str:
        rows = [{**p, "results": ", ".join(f"{r['method']}={r['value']:g} ({r['status']})"
                                           for r in p["results"]) or "-"} for p in doc["picks"]]
        return "\n".join([
            f"selection run {doc['id']} by {doc['by']} at {doc['created_at']:%Y-%m-%d %H:%M}: "
            f"{doc['method']} for {'/'.join(doc['properties'])} on {doc['grade']}, state {doc['state']}",
            f"pool {doc['pool_size']} samples, sha256 {doc['pool_sha256'][:16]}…; total cost "
            f"{doc['total_cost']:g}" + (f" of budget {doc['budget']:g}" if doc["budget"] else ""),
            "", table(rows, ["rank", "sample_id", "batch", "source", "use", "cost", "results", "reason"]), "",
            *_benefit_lines(doc["benefit"])])
    emit(fmt, doc, text)


@selection_app.command("close")
@handle_errors
def selection_close(run: str, reason: Annotated[str, typer.Option("--reason")],
                    db: DbOpt = None, as_user: AsOpt = None, fmt: FormatOpt = Output.text) -> None:
    """Close an open run whose remaining samples will not be tested."""
    with transaction(db) as session:
        closed = runs.close_run(session, login(session, as_user), run, reason)
    emit(fmt, closed, f"selection run {closed.id} closed")


def register(app: typer.Typer) -> None:
    app.command("select")(select_command)
    app.command("plan")(plan_command)
    app.add_typer(selection_app, name="selection")
