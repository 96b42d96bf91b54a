"""``specledger demo``: build the invented demo registry."""

from __future__ import annotations

import time
from pathlib import Path
from typing import Annotated

import typer

from ..errors import RegistryError
from .common import FormatOpt, Output, emit, handle_errors


@handle_errors
def demo(db: Annotated[Path, typer.Option("--db", help="SQLite file for the demo registry.")] = Path("demo.db"),
         seed: Annotated[int, typer.Option("--seed")] = 7,
         force: Annotated[bool, typer.Option("--force", help="Rebuild an existing demo registry.")] = False,
         fmt: FormatOpt = Output.text) -> None:
    """Build a demo registry: fourteen invented months at two invented fuel labs."""
    from seed_demo.scenario import build_demo
    from ..storage.engine import dispose_engines, make_engine, upgrade

    _clear_old(db, force)
    url = f"sqlite:///{db}"
    upgrade(url)
    engine = make_engine(url)
    started = time.perf_counter()
    quiet = fmt == "json"
    report = build_demo(engine, seed=seed,
                        progress=None if quiet else (lambda msg: typer.echo(f"  {msg}", err=True)))
    engine.dispose()
    dispose_engines()
    elapsed = time.perf_counter() - started
    doc = {"db": str(db), "seed": seed, "seconds": round(elapsed, 1), "counts": report.counts,
           "models": report.models, "due": report.due, "notes": report.notes,
           "logins": [{"user": u, "role": r, "password": p} for u, r, p in report.logins]}

    def text() -> str:
        c = report.counts
        lines = [f"demo registry built in {elapsed:.0f} s: {db}",
                 f"  {c['spectra']} spectra, {c['reference_results']} reference results, "
                 f"{c['model_versions']} model versions, {c['predictions']} predictions, "
                 f"{c['qc_results']} QC results, {c['audit_events']} audit events",
                 "  due for revalidation:"]
        lines += [f"    {d['label']:<22} {d['state']:<9} days left {d['days_left']:>5}  "
                  f"{'; '.join(d['reasons'])[:90]}" for d in report.due]
        lines += ["", "demo logins (DEMO ONLY - invented people, never reuse these passwords):"]
        lines += [f"    {u:<8} {r:<12} {p}" for u, r, p in report.logins]
        env = f"SPECLEDGER_DATABASE_URL={db}"
        lines += ["", "try (each asks for the user's password):",
                  f"  {env} specledger due --as jonas",
                  f"  {env} specledger model show RON-PREM95-v2 --as greta",
                  f"  {env} specledger select --property RON --property MON --grade PREM95 "
                  "--method kennard-stone --budget 3000 --pool outside-coverage --as imara",
                  f"  {env} specledger trace --model RON-PREM95-v2 --format html --out trace.html --as jonas",
                  f"  {env} specledger audit verify --as jonas"]
        lines += [f"  note: {n}" for n in report.notes]
        return "\n".join(lines)
    emit(fmt, doc, text)


def _clear_old(db: Path, force: bool) -> None:
    """Refuse to touch anything but an earlier demo registry."""
    if not db.exists():
        return
    import sqlite3

    try:
        con = sqlite3.connect(f"file:{db}?mode=ro", uri=True)
        try:
            row = con.execute("SELECT value FROM registry_meta WHERE key = 'demo_seed'").fetchone()
        finally:
            con.close()
    except sqlite3.Error:
        row = None
    if row is None:
        raise RegistryError(f"{db} exists and is not a demo registry; refusing to overwrite it")
    if not force:
        raise RegistryError(f"{db} already holds a demo registry; pass --force to rebuild it")
    for suffix in ("", "-wal", "-shm"):
        Path(str(db) + suffix).unlink(missing_ok=True)


def register(app: typer.Typer) -> None:
    app.command("demo")(demo)
