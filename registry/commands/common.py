"""Shared CLI plumbing: database and acting-user options, output, error handling.

Commands never touch SQL: they open one transaction, authenticate, call one
service function, and print its result (a JSON document with ``--format json``).
"""

from __future__ import annotations

import functools
import getpass
import json
import os
import sys
from contextlib import contextmanager
from datetime import date, datetime
from typing import Annotated, Any, Callable, Iterator, Optional

import typer
from sqlalchemy.exc import SQLAlchemyError
from sqlmodel import Session

from ..errors import AuthenticationError, RegistryError
from ..services.auth import authenticate
from ..services.context import Actor
from ..storage.engine import get_engine, resolve_url, session_scope

DbOpt = Annotated[Optional[str], typer.Option(
    "--db", help="Database URL or SQLite file (default: $SPECLEDGER_DATABASE_URL or ./specledger.db).",
    show_default=False)]
AsOpt = Annotated[Optional[str], typer.Option(
    "--as", help="Acting user (default: $SPECLEDGER_USER). Password from a prompt or "
                 "$SPECLEDGER_PASSWORD.", show_default=False)]
FormatOpt = Annotated[str, typer.Option("--format", help="Output: table or json.")]


def fail(message: str, code: int = 2) -> None:
    typer.echo(f"error: {message}", err=True)
    raise typer.Exit(code)


def handle_errors(fn: Callable) -> Callable:
    """Turn registry errors into one clear line on stderr and a non-zero exit code."""

    @functools.wraps(fn)
    def wrapper(*args, **kwargs):
        try:
            return fn(*args, **kwargs)
        except RegistryError as exc:
            fail(str(exc))
        except SQLAlchemyError as exc:
            # e.g. server unreachable, database locked by another writer: one line, no traceback
            reason = str(getattr(exc, "orig", None) or exc).strip().splitlines()[0]
            fail(f"database error ({type(exc).__name__}): {reason}; nothing was written")
        except KeyboardInterrupt:
            fail("interrupted; nothing was written", 130)
    return wrapper


def read_password(prompt: str = "Password") -> str:
    env = os.environ.get("SPECLEDGER_PASSWORD")
    if env is not None:
        return env
    if not sys.stdin.isatty():
        line = sys.stdin.readline()
        if line:
            return line.rstrip("\n")
        raise AuthenticationError("no password given: set SPECLEDGER_PASSWORD or use a terminal")
    return getpass.getpass(f"{prompt}: ")


def acting_user_name(as_user: str | None) -> str:
    name = as_user or os.environ.get("SPECLEDGER_USER")
    if not name:
        raise AuthenticationError("no acting user: pass --as NAME or set SPECLEDGER_USER")
    return name


@contextmanager
def transaction(db: str | None) -> Iterator[Session]:
    """One user action = one transaction on the resolved database."""
    url = resolve_url(db)
    engine = get_engine(url)
    from ..services.admin import ensure_known

    with session_scope(engine) as session:
        ensure_known(session)
        yield session


def login(session: Session, as_user: str | None) -> Actor:
    name = acting_user_name(as_user)
    return authenticate(session, name, read_password(f"Password for {name}"))


def jsonable(obj: Any) -> Any:
    if isinstance(obj, datetime):
        return obj.isoformat()
    if isinstance(obj, date):
        return obj.isoformat()
    if isinstance(obj, bytes):
        return None
    if hasattr(obj, "model_dump"):
        return {k: jsonable(v) for k, v in obj.model_dump().items()
                if not isinstance(v, bytes) and k != "password_hash"}
    if isinstance(obj, dict):
        return {str(k): jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [jsonable(v) for v in obj]
    try:
        import numpy as np

        if isinstance(obj, np.generic):
            return obj.item()
        if isinstance(obj, np.ndarray):
            return obj.tolist()
    except ImportError:  # pragma: no cover
        pass
    return obj


def emit(fmt: str, document: Any, text: str | Callable[[], str]) -> None:
    """Print ``document`` as JSON, or the human-readable ``text``."""
    if fmt == "json":
        typer.echo(json.dumps(jsonable(document), indent=2, ensure_ascii=False, default=str))
    elif fmt in ("table", "text"):
        typer.echo(text() if callable(text) else text)
    else:
        fail(f"unknown --format {fmt!r}; use table or json")


def table(rows: list[dict[str, Any]], columns: list[str] | None = None) -> str:
    """A plain fixed-width table for the terminal."""
    if not rows:
        return "(none)"
    columns = columns or list(rows[0].keys())
    cells = [[_cell(r.get(c)) for c in columns] for r in rows]
    widths = [max(len(c), *(len(row[i]) for row in cells)) for i, c in enumerate(columns)]
    line = "  ".join(c.ljust(w) for c, w in zip(columns, widths))
    out = [line, "  ".join("-" * w for w in widths)]
    out += ["  ".join(v.ljust(w) for v, w in zip(row, widths)) for row in cells]
    return "\n".join(out)


def _cell(v: Any) -> str:
    if v is None:
        return ""
    if isinstance(v, float):
        return f"{v:.6g}"
    if isinstance(v, datetime):
        return v.strftime("%Y-%m-%d %H:%M")
    if isinstance(v, (list, tuple)):
        return ",".join(str(x) for x in v)
    return str(v)
