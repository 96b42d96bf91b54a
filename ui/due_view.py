"""Revalidation due dates as a table and a timeline (shared by the Overview and Due pages)."""

from __future__ import annotations

from datetime import datetime, timezone

import pandas as pd
import plotly.graph_objects as go

from ui.common import COLOURS, PLOT_TEMPLATE, when


def overdue_text(row: dict) -> str:
    """How long a version has been overdue, from its cause: "overdue 12 days (since
    2027-01-03 09:00 UTC, a trigger was raised)"; "" when it is not overdue."""
    if not row["overdue"]:
        return ""
    days = row["overdue_days"]
    if days >= 1:
        span = f"{int(days)} day" + ("s" if int(days) != 1 else "")
    else:
        hours = int(days * 24)
        span = "less than an hour" if hours < 1 else f"{hours} hour" + ("s" if hours != 1 else "")
    cause = ("the scheduled date passed" if row["overdue_since"] == row["scheduled_at"]
             else "a trigger was raised")
    return f"overdue {span} (since {when(row['overdue_since'])}, {cause})"


def due_frame(rows: list[dict], *, local: bool = False) -> pd.DataFrame:
    """One row per version: when it is due, or for how long it has been overdue, and why."""
    out = []
    for r in rows:
        line = {"model": r["label"], "property": r["property"], "grade": r["grade"],
                "state": r["state"],
                "status": overdue_text(r) or f"due in {r['days_left']} days",
                "due (UTC)": when(r["scheduled_at"])}
        if local:
            line["due (site time)"] = "; ".join(
                f"{d['site']}: {d['due_at_local']:%Y-%m-%d %H:%M} ({d['timezone']})"
                for d in r["due_at_local"])
        line["reasons"] = "; ".join(r["reasons"])
        if local:
            line.update({"last validated": when(r["last_validated_at"]),
                         "interval (days)": r["interval_days"]})
        out.append(line)
    return pd.DataFrame(out)


def _utc(t: datetime | None) -> datetime | None:
    """A naive UTC time for the chart (the axis is labelled UTC; Plotly drops offsets)."""
    return None if t is None else t.astimezone(timezone.utc).replace(tzinfo=None)


def due_timeline(rows: list[dict], now: datetime) -> go.Figure:
    """Each version on its own row: the interval from its last validation to its scheduled
    date, the time it has been overdue, and today as a vertical line."""
    labels = [r["label"] for r in rows]
    today = _utc(now)
    fig = go.Figure()

    def segments(pairs):
        xs, ys = [], []
        for label, start, end in pairs:
            xs += [_utc(start), _utc(end), None]
            ys += [label, label, None]
        return xs, ys

    xs, ys = segments((r["label"], r["last_validated_at"], r["scheduled_at"]) for r in rows
                      if r["last_validated_at"] is not None)
    fig.add_trace(go.Scatter(x=xs, y=ys, mode="lines", name="since last validation",
                             line={"color": COLOURS["calibration"], "width": 6},
                             hoverinfo="skip"))
    fig.add_trace(go.Scatter(x=[_utc(r["scheduled_at"]) for r in rows], y=labels, mode="markers",
                             name="scheduled due date",
                             marker={"symbol": "diamond", "size": 11, "color": COLOURS["inside"]},
                             hovertemplate="%{y}: due %{x|%Y-%m-%d}<extra></extra>"))
    late = [r for r in rows if r["overdue"]]
    if late:
        xs, ys = segments((r["label"], r["overdue_since"], now) for r in late)
        fig.add_trace(go.Scatter(x=xs, y=ys, mode="lines", name="overdue",
                                 line={"color": COLOURS["outside"], "width": 6},
                                 hoverinfo="skip"))
        fig.add_trace(go.Scatter(x=[_utc(r["overdue_since"]) for r in late],
                                 y=[r["label"] for r in late], mode="markers",
                                 name="overdue since", text=[overdue_text(r) for r in late],
                                 hovertemplate="%{y}: %{text}<extra></extra>",
                                 marker={"symbol": "x", "size": 11, "color": COLOURS["outside"]}))
    today_line = {"color": COLOURS["line"], "dash": "dot", "width": 2}
    # today spans the whole plot (a shape); the one-point trace only names it in the legend
    fig.add_shape(type="line", x0=today, x1=today, yref="paper", y0=0, y1=1, line=today_line,
                  name="today")
    fig.add_trace(go.Scatter(x=[today], y=labels[:1], mode="lines", name="today (dotted line)",
                             line=today_line, hoverinfo="skip"))
    fig.update_layout(template=PLOT_TEMPLATE, height=160 + 40 * len(rows),
                      legend={"orientation": "h", "yanchor": "top", "y": -0.3},
                      xaxis_title="date (UTC)", yaxis_title="model version",
                      yaxis={"type": "category", "categoryorder": "array",
                             "categoryarray": list(reversed(labels))},
                      margin={"t": 20})
    return fig
