"""What every page shares: the signed-in actor, calling services, errors, the caution, colours.

Pages call service functions only (``registry.services.*``); each call runs in
its own transaction (one user action = one transaction). A refused or bad
request (:class:`registry.errors.RegistryError`) is shown as an error message,
never as a traceback.
"""

from __future__ import annotations

import logging
from datetime import datetime
from typing import Any, Callable

import streamlit as st

from registry.errors import RegistryError
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


def show_error(exc: RegistryError) -> None:
    """The error's message; every line of an all-or-nothing import that was refused."""
    st.error(str(exc))
    lines = getattr(exc, "errors", None)
    if lines:
        st.markdown(f"**{len(lines)} problem(s) found:**")
        st.code("\n".join(e.located() if hasattr(e, "located") else str(e) for e in lines),
                language=None)


def call(fn: Callable[..., Any], *args: Any, with_actor: bool = True, **kwargs: Any) -> Any:
    """Run ``fn(session, actor, *args, **kwargs)`` in one transaction.

    Returns its result, or :data:`FAILED` after showing the error.
    """
    try:
        with session_scope(engine()) as session:
            if with_actor:
                return fn(session, actor(), *args, **kwargs)
            return fn(session, *args, **kwargs)
    except RegistryError as exc:
        show_error(exc)
        return FAILED
    except Exception as exc:  # never a traceback on the page; the server log keeps it
        log.exception("unexpected error in %s", getattr(fn, "__name__", fn))
        st.error(f"Unexpected error ({type(exc).__name__}); nothing was saved. "
                 "The details are in the server log.")
        return FAILED


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
