"""What every page shares: the signed-in actor, calling services, errors, the caution, colours.

Pages call service functions only (``registry.services.*``); each call runs in
its own transaction (one user action = one transaction). A refused or bad
request (:class:`registry.errors.RegistryError`) is shown as an error message,
never as a traceback.
"""

from __future__ import annotations

import logging
from datetime import datetime
from pathlib import Path
from typing import Any, Callable

import pandas as pd
import streamlit as st

from registry.errors import InputError, RegistryError
from registry.lifecycle.permissions import Action, is_allowed
from registry.services.context import Actor
from registry.storage.engine import get_engine, mask_url, resolve_url, session_scope

CAUTION = ("Model predictions are estimates: they do not replace the specification test method. "
           "Fuels are flammable and toxic; handle samples under the laboratory's safety procedures. "
           "Follow local regulations and accredited practice.")

# A neutral palette (greys and one blue, one brick red for "outside"); no traffic-light bands.
COLOURS = {"calibration": "#8a8a8a", "inside": "#2f5d8a", "outside": "#b3472d",
           "line": "#3a3a3a", "limit": "#9a9a9a", "centre": "#5b5b5b", "marker": "#b3472d"}
PLOT_TEMPLATE = "simple_white"

ACTOR_KEY = "actor"
FLASH_KEY = "flash"


class _Failed:
    """Returned by :func:`call` when the service refused; falsy."""

    def __bool__(self) -> bool:
        return False


FAILED = _Failed()


def database_url() -> str:
    return resolve_url()


log = logging.getLogger("specledger.ui")


def engine():
    return get_engine(database_url())


def actor() -> Actor | None:
    return st.session_state.get(ACTOR_KEY)


def sidebar() -> None:
    """Who is signed in, sign out, the registry in use, and the caution (on every page).

    Each page draws it itself (through :func:`require_actor`) rather than the
    main script, so it is there however the page is run.
    """
    a = actor()
    with st.sidebar:
        if a is not None:
            st.markdown(f"Signed in as **{a.name}**  \nroles: {', '.join(sorted(a.roles))}")
            if st.button("Sign out", key="sign_out"):
                st.session_state.clear()
                st.rerun()
        st.caption(f"Registry: {mask_url(database_url())}")
        st.divider()
        st.caption(CAUTION)


def sign_in_form() -> None:
    """User name and password; on success the actor is kept in the session and the app reruns."""
    from registry.services.auth import authenticate

    st.title("Specledger")
    st.write("Calibration sets, model versions and their evidence for the fuel laboratory.")
    with st.form("sign_in"):
        name = st.text_input("User name", key="sign_in_name")
        password = st.text_input("Password", type="password", key="sign_in_password")
        submitted = st.form_submit_button("Sign in")
    if submitted:
        try:
            with session_scope(engine()) as session:
                st.session_state[ACTOR_KEY] = authenticate(session, name.strip(), password)
        except RegistryError as exc:
            st.error(str(exc))
            return
        st.rerun()


def require_actor() -> Actor:
    """Draw the sidebar and return the signed-in actor.

    Nobody signed in (e.g. a page opened by its address after signing out): the
    sign-in form is shown instead of the page.
    """
    sidebar()
    a = actor()
    if a is None:
        sign_in_form()
        st.stop()
    return a


def may(action: Action) -> bool:
    a = actor()
    return a is not None and is_allowed(a.roles, action)


def field_label(field: str | None) -> str:
    """A field or option name as a person reads it: ``--on-duplicate`` -> "On duplicate",
    ``NAME`` -> "Name", ``--n/--budget`` -> "N or budget"."""
    words = []
    for part in (field or "").split("/"):
        text = part.lstrip("-").replace("_", " ").replace("-", " ").strip()
        words.append(text.lower() if text.isupper() else text)  # NAME: an argument placeholder
    text = " or ".join(w for w in words if w)
    return text[:1].upper() + text[1:]


def _file_label(file: str | None, names: dict[str, str] | None) -> str:
    """The name the user knows a file by: the uploaded name, never a server path."""
    if not file:
        return ""
    if names:
        for path, name in names.items():
            file = file.replace(path, name)
        return file
    return Path(file).name or file


def problem_row(exc: Exception, names: dict[str, str] | None = None) -> dict[str, Any]:
    """One problem as table cells (file, line, field, problem); blanks rather than "None"."""
    if not isinstance(exc, InputError):
        return {"file": "", "line": "", "field": "", "problem": str(exc)}
    message = exc.message
    for path, name in (names or {}).items():
        message = message.replace(path, name)
    return {"file": _file_label(exc.file, names), "line": "" if exc.line is None else str(exc.line),
            "field": field_label(exc.field), "problem": message}


def readable(exc: Exception, names: dict[str, str] | None = None) -> str:
    """An error's message located for a person: "file, line 3, Reason: what is wrong"."""
    row = problem_row(exc, names)
    where = ", ".join(x for x in (row["file"], f"line {row['line']}" if row["line"] else "",
                                  row["field"]) if x)
    return f"{where}: {row['problem']}" if where else row["problem"]


def show_error(exc: RegistryError, names: dict[str, str] | None = None) -> None:
    """The error's message; every problem of an all-or-nothing import that was refused, as a
    table. ``names`` maps server-side file paths to the names the user uploaded."""
    st.error(readable(exc, names))
    lines = getattr(exc, "errors", None)
    if lines:
        st.markdown(f"**{len(lines)} problem(s) found:**")
        st.dataframe(pd.DataFrame([problem_row(e, names) for e in lines]), hide_index=True)


def call(fn: Callable[..., Any], *args: Any, with_actor: bool = True,
         names: dict[str, str] | None = None, **kwargs: Any) -> Any:
    """Run ``fn(session, actor, *args, **kwargs)`` in one transaction.

    Returns its result, or :data:`FAILED` after showing the error (``names``: see
    :func:`show_error`).
    """
    try:
        with session_scope(engine()) as session:
            if with_actor:
                return fn(session, actor(), *args, **kwargs)
            return fn(session, *args, **kwargs)
    except RegistryError as exc:
        show_error(exc, names)
        return FAILED
    except Exception as exc:  # never a traceback on the page; the server log keeps it
        log.exception("unexpected error in %s", getattr(fn, "__name__", fn))
        st.error(f"Unexpected error ({type(exc).__name__}); nothing was saved. "
                 "The details are in the server log.")
        return FAILED


def kept_call(fn: Callable[..., Any], stamp: Any, *args: Any, **kwargs: Any) -> Any:
    """:func:`call` of ``fn(session, actor, *args, **kwargs)``, its result kept for the next
    visits while ``stamp`` (what the result depends on, from a cheap service) is unchanged.

    The same service runs on a miss; a hit only skips it. The key also holds the registry,
    the function and its arguments; every role may read what is kept this way (``view``).
    """
    if stamp is FAILED:
        return FAILED
    key = (database_url(), f"{fn.__module__}.{fn.__qualname__}", stamp, args,
           tuple(sorted(kwargs.items())))
    return call(_kept, key, fn, args, kwargs)


@st.cache_data(max_entries=32, show_spinner=False)
def _kept(_session, _actor, key: tuple, _fn, _args, _kwargs):
    return _fn(_session, _actor, *_args, **_kwargs)


def check_registry() -> bool:
    """Show a clear message and stop when the database is not a current registry."""
    from registry.services.admin import ensure_known

    try:
        with session_scope(engine()) as session:
            ensure_known(session)
    except RegistryError as exc:
        st.error(str(exc))
        return False
    except Exception as exc:  # e.g. the database cannot be reached
        log.exception("cannot open the registry")
        st.error(f"Cannot open the registry at {database_url()!r} ({type(exc).__name__}).")
        return False
    return True


def flash(message: str) -> None:
    """Keep a success message for the next run (shown after st.rerun)."""
    st.session_state[FLASH_KEY] = message


def show_flash() -> None:
    msg = st.session_state.pop(FLASH_KEY, None)
    if msg:
        st.success(msg)


def when(t: datetime | None) -> str:
    return "" if t is None else f"{t:%Y-%m-%d %H:%M} UTC"


def flags_text(flags: list[str] | None) -> str:
    return ", ".join(flags) if flags else ""
