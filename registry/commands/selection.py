"""Selection commands: ``select`` (choose samples to send for reference testing) and
``selection list`` / ``selection show RUN``."""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Annotated, Optional

import typer

from ..errors import InputError
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
        method: Annotated[choice(METHODS), typer.Option("--method")],
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
        n_components=n_components, metric=metric)
    bars = _Bars(enabled=fmt is not Output.json)
    try:
        with staged_output(out) as send_list, transaction(db) as session:
            result = svc.run_request(session, login(session, as_user), request, progress=bars,
                                     store=not dry_run)
            doc = result.summary()
            if send_list is not None:
                send_list.write(runs.send_list_csv(result.rows))
    finally:
        bars.close()

    def text() -> str:
        head = (f"selection run {doc['run_id']}" if doc["run_id"] else "preview (not stored)")
        lines = [f"{head}: {method}, {len(result.rows)} of {result.pool_size} candidate samples, "
                 f"tests {result.tests} at {result.cost_per_sample:g} {result.currency} per sample, "
                 f"total {result.total_cost:g} {result.currency}"
                 + (f" of budget {budget:g}" if budget is not None else ""),
                 f"space: {doc['parameters']['space']['components']} PCA components "
                 f"({100 * doc['parameters']['space']['explained']:.1f} % of variance) of "
                 f"{'model ' + result.model_label + ' recipe' if result.model_label else 'the default recipe'}; "
                 f"reference: {doc['parameters']['reference_set']} ({doc['parameters']['n_reference']})",
                 "", table(result.rows, SEND_TABLE_COLUMNS), ""]
        lines += _benefit_lines(result.benefit)
        if out is not None:
            lines.append(f"send list written to {out}")
        return "\n".join(lines)
    emit(fmt, doc, text)


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
    app.add_typer(selection_app, name="selection")
