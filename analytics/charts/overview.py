"""Charts of the "This week" page: pure functions, DataFrame in, plotly Figure out.

Every label that can come from an upload (component and test names) passes through :func:`safe_text`;
colour is never the only signal (markers, bar patterns and text labels carry the same information).
"""

from __future__ import annotations

from datetime import date

import pandas as pd
import plotly.graph_objects as go

from analytics.charts import PALETTE, safe_text

PATTERNS = ["", "/", ".", "x", "\\", "+", "-", "|"]
EMPTY_TEXT = "No data for this selection"
_LAYOUT = dict(
    template="plotly_white", margin=dict(l=56, r=16, t=40, b=40), height=360, autosize=True,
    title=dict(x=0, xanchor="left", font=dict(size=15)),
    legend=dict(orientation="h", yanchor="top", y=-0.12, xanchor="left", x=0),
    font=dict(family="system-ui, sans-serif", size=12),
)


def _empty(title: str) -> go.Figure:
    fig = go.Figure(layout=_LAYOUT)
    fig.update_layout(title_text=title)
    fig.add_annotation(text=EMPTY_TEXT, showarrow=False, xref="paper", yref="paper", x=0.5, y=0.5)
    fig.update_xaxes(visible=False)
    fig.update_yaxes(visible=False)
    return fig


def _week_label(week: date) -> str:
    return pd.Timestamp(week).strftime("%d %b %Y")


def pass_rate_chart(frame: pd.DataFrame, *, selected: date | None = None) -> go.Figure:
    """Pass rate per week (a line with markers); the selected week gets a larger diamond marker."""
    title = "Pass rate per week"
    data = frame.dropna(subset=["pass_rate"])
    if data.empty:
        return _empty(title)
    weeks = pd.to_datetime(data["week"])
    fig = go.Figure(layout=_LAYOUT)
    fig.update_layout(title_text=title)
    fig.add_trace(
        go.Scatter(
            x=weeks, y=data["pass_rate"] * 100, mode="lines+markers", name="pass rate",
            line=dict(color=PALETTE[0], width=2), marker=dict(size=6),
            customdata=data[["runs", "failed_runs"]].to_numpy(),
            hovertemplate="week of %{x|%d %b %Y}<br>pass rate %{y:.1f} %<br>runs %{customdata[0]:,}"
                          "<br>failed runs %{customdata[1]:,}<extra></extra>",
        )
    )
    if selected is not None:
        chosen = data[pd.to_datetime(data["week"]) == pd.Timestamp(selected)]
        if not chosen.empty:
            fig.add_trace(
                go.Scatter(
                    x=pd.to_datetime(chosen["week"]), y=chosen["pass_rate"] * 100, mode="markers+text",
                    name="selected week", marker=dict(symbol="diamond", size=13, color=PALETTE[1]),
                    text=[f"{v:.1f} %" for v in chosen["pass_rate"] * 100], textposition="top center",
                    hoverinfo="skip",
                )
            )
    fig.update_yaxes(title="% of runs passed (skips excluded)", ticksuffix=" %")
    return fig


def component_failures_chart(frame: pd.DataFrame) -> go.Figure:
    """Failed runs per week, stacked by component; each component has its own colour AND bar pattern."""
    title = "Failed runs per component per week"
    if frame.empty or frame["failures"].sum() == 0:
        return _empty(title)
    fig = go.Figure(layout=_LAYOUT)
    fig.update_layout(title_text=title, barmode="stack")
    totals = frame.groupby("component")["failures"].sum().sort_values(ascending=False)
    for i, component in enumerate(totals.index):
        part = frame[frame["component"] == component]
        label = safe_text(component)
        fig.add_trace(
            go.Bar(
                x=pd.to_datetime(part["week"]), y=part["failures"], name=label,
                marker=dict(color=PALETTE[i % len(PALETTE)], pattern=dict(shape=PATTERNS[i % len(PATTERNS)])),
                # The name goes in as data, never into the template: plotly would read "%{…}" in it.
                customdata=[label] * len(part),
                hovertemplate="%{customdata}<br>week of %{x|%d %b %Y}<br>%{y:,} failed runs<extra></extra>",
            )
        )
    fig.update_yaxes(title="failed runs (failures + errors)")
    return fig


def defect_flow_chart(frame: pd.DataFrame) -> go.Figure:
    """Defects opened vs closed per week: side-by-side bars, closed ones hatched, plus the weekly difference."""
    title = "Defects opened and closed per week"
    if frame.empty or (frame["opened"].sum() + frame["closed"].sum()) == 0:
        return _empty(title)
    weeks = pd.to_datetime(frame["week"])
    fig = go.Figure(layout=_LAYOUT)
    fig.update_layout(title_text=title, barmode="group")
    fig.add_trace(go.Bar(x=weeks, y=frame["opened"], name="opened", marker=dict(color=PALETTE[3]),
                         hovertemplate="week of %{x|%d %b %Y}<br>%{y} opened<extra></extra>"))
    fig.add_trace(go.Bar(x=weeks, y=frame["closed"], name="closed",
                         marker=dict(color=PALETTE[2], pattern=dict(shape="/")),
                         hovertemplate="week of %{x|%d %b %Y}<br>%{y} closed<extra></extra>"))
    fig.add_trace(go.Scatter(x=weeks, y=frame["opened"] - frame["closed"], name="opened − closed",
                             mode="lines+markers", line=dict(color=PALETTE[7], dash="dot"),
                             marker=dict(symbol="x"),
                             hovertemplate="week of %{x|%d %b %Y}<br>net %{y:+d}<extra></extra>"))
    fig.update_yaxes(title="defects")
    return fig


def duration_growth_chart(frame: pd.DataFrame, *, window: int = 4) -> go.Figure:
    """Tests whose mean run time grew most: before vs recent mean seconds per run, one bar pair per test."""
    title = "Fastest-growing test time (mean seconds per run)"
    if frame.empty:
        return _empty(title)
    data = frame.sort_values("growth")
    labels = [safe_text(_short(t)) for t in data["test"]]
    hover = [f"{safe_text(t)}<br>{safe_text(c)}" for t, c in zip(data["test"], data["component"])]
    fig = go.Figure(layout=_LAYOUT)
    fig.update_layout(title_text=title, barmode="group", height=max(360, 90 + 40 * len(data)),
                      margin=dict(l=16, r=48, t=40, b=40), legend=dict(y=-0.08))
    fig.add_trace(go.Bar(y=labels, x=data["before"], orientation="h", name=f"{window} weeks before",
                         marker=dict(color=PALETTE[5], pattern=dict(shape=".")), customdata=hover,
                         hovertemplate="%{customdata}<br>before: %{x:.3f} s per run<extra></extra>"))
    fig.add_trace(go.Bar(y=labels, x=data["recent"], orientation="h", name=f"last {window} weeks",
                         marker=dict(color=PALETTE[0]), customdata=hover,
                         text=[f"+{g:.2f} s" for g in data["growth"]], textposition="outside", cliponaxis=False,
                         hovertemplate="%{customdata}<br>recent: %{x:.3f} s per run<extra></extra>"))
    fig.update_xaxes(title=None)
    fig.update_yaxes(automargin=True)
    return fig


def _short(label: str, limit: int = 48) -> str:
    """Keep the end of a long test name (the method name is the informative part); escape afterwards."""
    return label if len(label) <= limit else "…" + label[-(limit - 1):]
