"""Driving the Streamlit app under AppTest: sign in, open a page, read what it shows."""

from __future__ import annotations

import base64
import json
from pathlib import Path

import numpy as np

from streamlit.testing.v1 import AppTest

from tests.conftest import PASSWORD, ROLE_USERS

APP = str(Path(__file__).resolve().parents[2] / "ui" / "app.py")
PAGES = ("overview", "coverage", "send_list", "models", "qc", "due", "trace", "imports", "admin")


def signed_in(role: str = "lab_manager", password: str = PASSWORD) -> AppTest:
    """A fresh app run through the sign-in form as the test user of ``role``."""
    at = AppTest.from_file(APP, default_timeout=30).run()
    at.text_input(key="sign_in_name").input(ROLE_USERS[role])
    at.text_input(key="sign_in_password").input(password)
    at.form_submit_button[0].click().run()
    return at


def open_page(at: AppTest, page: str) -> AppTest:
    return at.switch_page(f"pages/{page}.py").run()


def plotly_specs(at: AppTest) -> list[dict]:
    return [json.loads(el.proto.spec) for el in at.get("plotly_chart")]


def texts(at: AppTest) -> str:
    """Every markdown, caption, error, info, success and title text of the run, joined."""
    parts = []
    for kind in ("markdown", "caption", "error", "info", "success", "warning", "title", "subheader"):
        parts += [str(e.value) for e in getattr(at, kind)]
    return "\n".join(parts)


def frame(at: AppTest, column: str):
    """The first table shown (as a DataFrame) that has ``column``."""
    for df in at.dataframe:
        value = df.value
        if column in value.columns:
            return value
    raise AssertionError(f"no table with a column {column!r}")


def array(v) -> np.ndarray:
    """A Plotly data array from the chart JSON (a list, or typed-array ``bdata``)."""
    if isinstance(v, dict) and "bdata" in v:
        out = np.frombuffer(base64.b64decode(v["bdata"]), dtype=np.dtype(v["dtype"]))
        return out.reshape(v["shape"]) if "shape" in v and isinstance(v["shape"], list) else out
    return np.asarray(v)


def service(reg, fn, *args, role="auditor", **kw):
    """``fn(session, actor, ...)`` on the registry ``reg`` as the user of ``role``."""
    from registry.storage.engine import make_engine, session_scope

    engine = make_engine(reg.url)
    try:
        with session_scope(engine) as s:
            return fn(s, reg.actors[role], *args, **kw)
    finally:
        engine.dispose()
