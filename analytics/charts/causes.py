"""Charts of the "Failure causes" pages: pure functions, weekly counts in, plotly Figure or SVG points out."""

from __future__ import annotations

from collections.abc import Sequence
from datetime import date, timedelta

import pandas as pd
import plotly.graph_objects as go

from analytics.charts import PALETTE, safe_text

#: Weeks compared by :func:`trend_word`: the latest block against the block before it.
TREND_WEEKS = 4


def dense_weekly_counts(weekly_trend: Sequence[Sequence], *, end: date | None = None) -> list[tuple[date, int]]:
    """``FailureCluster.weekly_trend`` (``[[week, failures], …]``, weeks without failures left out) made dense:
    one ``(Monday, failures)`` per week from the first listed week to the later of the last listed week and
    ``end``, missing weeks counted as 0. Plain Python, cheap enough for every row of a list page.
    """
    counts: dict[date, int] = {}
    for week, n in weekly_trend or []:
        day = date.fromisoformat(str(week)[:10])
        monday = day - timedelta(days=day.weekday())
        counts[monday] = counts.get(monday, 0) + int(n or 0)
    if not counts:
        return []
    first, last = min(counts), max(counts)
    if end is not None:
        last = max(last, end - timedelta(days=end.weekday()))
    weeks = (last - first).days // 7 + 1
    return [(first + timedelta(weeks=i), counts.get(first + timedelta(weeks=i), 0)) for i in range(weeks)]


def trend_frame(weekly_trend: Sequence[Sequence], *, end: date | None = None) -> pd.DataFrame:
    """:func:`dense_weekly_counts` as a frame: ``week`` (Monday, ``YYYY-MM-DD``) and ``failures``."""
    rows = dense_weekly_counts(weekly_trend, end=end)
    return pd.DataFrame({"week": [w.isoformat() for w, _ in rows], "failures": [n for _, n in rows]},
                        columns=["week", "failures"]).astype({"week": str, "failures": int})


def weekly_trend_figure(trend: pd.DataFrame, *, label: str = "") -> go.Figure:
    """Failures per week of one cause, as labelled bars (the count is written on each bar)."""
    title = "Failures per week" + (f": {safe_text(label[:80])}" if label else "")  # cut, then escape
    fig = go.Figure(go.Bar(
        x=trend["week"], y=trend["failures"], text=trend["failures"], textposition="outside",
        marker={"color": PALETTE[0]}, name="failures",
        hovertext=[f"week of {safe_text(w)}: {n} failures" for w, n in zip(trend["week"], trend["failures"],
                                                                           strict=True)],
        hoverinfo="text",
    ))
    fig.update_layout(title=title, xaxis_title="week (Monday)", yaxis_title="failures", height=320,
                      margin={"l": 50, "r": 10, "t": 40, "b": 60}, template="plotly_white")
    # One tick per week when there are few weeks; plotly picks a coarser step otherwise.
    fig.update_xaxes(type="date", tickformat="%d %b %Y", dtick=7 * 86_400_000 if len(trend) <= 12 else None)
    if trend.empty:
        fig.add_annotation(text="No failures recorded", showarrow=False, xref="paper", yref="paper", x=0.5, y=0.5)
    return fig


def sparkline_points(values: Sequence[float], *, width: int = 100, height: int = 24) -> str:
    """SVG ``polyline`` points for a small trend line (the page also prints the numbers as text)."""
    values = [float(v) for v in values]
    if not values:
        return ""
    top = max(values) or 1.0
    step = width / (len(values) - 1) if len(values) > 1 else 0.0
    return " ".join(f"{i * step:.1f},{height - 1 - (v / top) * (height - 2):.1f}" for i, v in enumerate(values))


def trend_word(values: Sequence[float], *, weeks: int = TREND_WEEKS) -> str:
    """"rising", "falling", "steady", "new" or "quiet": the latest ``weeks`` against the ``weeks`` before."""
    values = list(values)
    recent, before = sum(values[-weeks:]), sum(values[-2 * weeks:-weeks])
    if recent == 0:
        return "quiet"
    if before == 0:
        return "new"
    if recent > before * 1.25:
        return "rising"
    if recent < before * 0.8:
        return "falling"
    return "steady"
