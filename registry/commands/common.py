"""Shared CLI plumbing: database and acting-user options, output, error handling.

Commands never touch SQL: they check every option, then open one transaction,
authenticate, call one service function, and print its result (a JSON document
with ``--format json``). Nothing is checked after the commit: an option that is
wrong must fail before anything is stored. A file a command writes as part of
its action is staged inside the transaction and put in place after the commit
(:func:`staged_output`).
"""

from __future__ import annotations

import functools
import getpass
import json
import os
import sys
import tempfile
from contextlib import contextmanager
from datetime import datetime
from enum import Enum
from pathlib import Path
from typing import Annotated, Any, Callable, Iterator, Literal, Optional


import typer
from sqlalchemy.exc import SQLAlchemyError
from sqlmodel import Session

from ..errors import AuthenticationError, InputError, RegistryError
from ..plain_json import plain_json
from ..services.auth import authenticate
from ..services.context import Actor
from ..storage.engine import get_engine, resolve_url, session_scope
from ..storage.output_fields import output_record

DbOpt = Annotated[Optional[str], typer.Option(
    "--db", help="Database URL or SQLite file (default: $SPECLEDGER_DATABASE_URL or ./specledger.db).",
    show_default=False)]
AsOpt = Annotated[Optional[str], typer.Option(
    "--as", help="Acting user (default: $SPECLEDGER_USER). Password from a prompt or "
                 "$SPECLEDGER_PASSWORD.", show_default=False)]


class Output(str, Enum):
    """What a command prints: ``text`` for people, ``json`` for programs (every command)."""

    text = "text"
    json = "json"


class DocumentOutput(str, Enum):
    """Output of a command that renders a whole document (``trace``): also ``html``."""

    text = "text"
    json = "json"
    html = "html"


FormatOpt = Annotated[Output, typer.Option("--format", case_sensitive=False,
                                           help="Output: text or json.")]


def choice(values) -> Any:
    """The type of an option with a fixed set of values (``Annotated[choice(...), typer.Option(...)]``):
    anything else is refused by the parser, before any transaction (exit status 2)."""
    return Literal[tuple(str(v) for v in values)]


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


def json_text(document: Any) -> str:
    """``document`` as indented JSON; stored records through their allow-lists
    (:data:`registry.storage.output_fields.RECORD_FIELDS`)."""
    return json.dumps(plain_json(document, default=output_record), indent=2, ensure_ascii=False)


def emit(fmt: Output | str, document: Any, text: str | Callable[[], str]) -> None:
    """Print ``document`` as JSON, or the human-readable ``text``.

    ``fmt`` was checked by the option parser (:class:`Output`), before the transaction.
    """
    if Output(fmt) is Output.json:
        typer.echo(json_text(document))
    else:
        typer.echo(text() if callable(text) else text)


# --------------------------------------------------------------------------- output files
def check_output_path(path: Path, option: str = "--out") -> Path:
    """Refuse, before anything is done, an output file that cannot be written."""
    path = Path(path)
    parent = path.parent if str(path.parent) else Path(".")
    if path.is_dir():
        raise InputError("is a folder; give a file name", file=str(path), field=option)
    if not parent.is_dir():
        raise InputError(f"folder {parent} does not exist", file=str(path), field=option)
    if not os.access(parent, os.W_OK | os.X_OK) or (path.exists() and not os.access(path, os.W_OK)):
        raise InputError("not writable", file=str(path), field=option)
    return path


class StagedFile:
    """An output file written during the user action and put in place after the commit.

    :meth:`write` writes a temporary file beside the target (a full disk or a
    permission error surfaces while the transaction can still roll back);
    :meth:`publish` renames it over the target (atomic within one folder).
    """

    def __init__(self, path: Path, option: str = "--out"):
        self.path = check_output_path(path, option)
        self.option = option
        self._staged: str | None = None

    def write(self, text: str) -> None:
        self.discard()
        try:
            fd, staged = tempfile.mkstemp(dir=self.path.parent, prefix=f".{self.path.name}.",
                                          suffix=".part")
            self._staged = staged
            with os.fdopen(fd, "w", encoding="utf-8", newline="") as fh:
                fh.write(text)
        except OSError as exc:
            raise InputError(f"cannot write: {exc.strerror or exc}", file=str(self.path),
                             field=self.option) from None

    def publish(self) -> None:
        if self._staged is not None:
            os.replace(self._staged, self.path)
            self._staged = None

    def discard(self) -> None:
        if self._staged is not None:
            Path(self._staged).unlink(missing_ok=True)
            self._staged = None


@contextmanager
def staged_output(path: Path | None, option: str = "--out") -> Iterator[StagedFile | None]:
    """``with staged_output(out) as file, transaction(db) as session:`` — the path is
    checked on entry, the file is published only if the transaction committed (the
    transaction's block ends first) and removed otherwise."""
    if path is None:
        yield None
        return
    staged = StagedFile(path, option)
    try:
        yield staged
        staged.publish()
    finally:
        staged.discard()


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
