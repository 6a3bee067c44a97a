"""Charts of the "Defect outlook" page: pure functions, DataFrame in, plotly Figure out.

One chart per series (a component or the total): weekly defects found so far, then the expected count with
its 80 % and 95 % intervals. The two bands differ in more than colour: the 95 % band is paler and edged
with dotted lines, the 80 % band darker and edged with dashed lines, each has its own legend entry, and
the hover text spells the interval out. Every label that can come from an upload (the component name)
passes through :func:`safe_text`.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import pandas as pd
import plotly.graph_objects as go

from analytics.charts import PALETTE, safe_text

HISTORY_COLUMNS = ("week_start", "count")
FORECAST_COLUMNS = ("week_start", "expected", "lower_80", "upper_80", "lower_95", "upper_95")
EMPTY_TEXT = "No weeks to show for this series"
HISTORY_NAME = "defects found per week"
EXPECTED_NAME = "expected (forecast)"
BAND_80_NAME = "80 % interval (dashed edges)"
BAND_95_NAME = "95 % interval (dotted edges)"
FORECAST_START_TEXT = "forecast starts"

_HISTORY_COLOUR = PALETTE[7]
_FORECAST_COLOUR = PALETTE[0]
_BAND_80_FILL = "rgba(0, 114, 178, 0.35)"
_BAND_95_FILL = "rgba(0, 114, 178, 0.13)"
_LAYOUT = dict(
    template="plotly_white",
    margin=dict(l=56, r=16, t=56, b=96),
    height=420,
    legend=dict(orientation="h", yanchor="top", y=-0.2, xanchor="left", x=0),
    font=dict(family="Liberation Sans, Arial, sans-serif", size=12),
    hovermode="closest",
)
_COMPACT_LAYOUT = dict(
    template="plotly_white",
    margin=dict(l=30, r=6, t=6, b=22),
    height=130,
    showlegend=False,
    font=dict(family="Liberation Sans, Arial, sans-serif", size=9),
)


def series_frames(payload: Mapping[str, Any]) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The stored JSON of one series (``history``, ``forecast`` lists) as two DataFrames with dates."""
    history = pd.DataFrame(list(payload.get("history") or []), columns=list(HISTORY_COLUMNS))
    forecast = pd.DataFrame(list(payload.get("forecast") or []), columns=list(FORECAST_COLUMNS))
    for frame in (history, forecast):
        frame["week_start"] = pd.to_datetime(frame["week_start"])
    return history, forecast


def _week(value: pd.Timestamp) -> str:
    return pd.Timestamp(value).strftime("%d %b %Y")


def _number(value: object, fmt: str = "{:.0f}") -> str:
    return "n/a" if value is None or pd.isna(value) else fmt.format(value)


def _forecast_hover(label: str, forecast: pd.DataFrame) -> list[str]:
    return [
        f"{label}<br>week of {_week(row.week_start)}<br>expected {_number(row.expected, '{:.1f}')}"
        f"<br>80 % interval {_number(row.lower_80)} to {_number(row.upper_80)}"
        f"<br>95 % interval {_number(row.lower_95)} to {_number(row.upper_95)}"
        for row in forecast.itertuples(index=False)
    ]


def _band(
    fig: go.Figure,
    forecast: pd.DataFrame,
    *,
    level: int,
    name: str,
    fill: str,
    dash: str,
    hover: Sequence[str],
) -> None:
    edge = dict(color=_FORECAST_COLOUR, width=1, dash=dash)
    group = f"band{level}"
    fig.add_trace(
        go.Scatter(
            x=forecast["week_start"],
            y=forecast[f"lower_{level}"],
            mode="lines",
            line=edge,
            name=name,
            legendgroup=group,
            showlegend=False,
            text=list(hover),
            hovertemplate="%{text}<extra></extra>",
        )
    )
    fig.add_trace(
        go.Scatter(
            x=forecast["week_start"],
            y=forecast[f"upper_{level}"],
            mode="lines",
            line=edge,
            name=name,
            legendgroup=group,
            fill="tonexty",
            fillcolor=fill,
            text=list(hover),
            hovertemplate="%{text}<extra></extra>",
        )
    )


def forecast_chart(
    history: pd.DataFrame,
    forecast: pd.DataFrame,
    *,
    series_label: str,
    compact: bool = False,
    history_weeks: int | None = None,
    subtitle: str | None = None,
) -> go.Figure:
    """Weekly defects found so far, then the forecast with its 80 % and 95 % intervals.

    Parameters
    ----------
    history : DataFrame
        ``week_start``, ``count``.
    forecast : DataFrame
        ``week_start``, ``expected``, ``lower_80``, ``upper_80``, ``lower_95``, ``upper_95``.
    series_label : str
        Shown in the title and the hover text; escaped here (component names come from uploads).
    compact : bool, default False
        A small chart without title or legend, for the printable planning sheet.
    history_weeks : int, optional
        Show only the last this many weeks of history.
    subtitle : str, optional
        A line under the title (project, forecast date, model), escaped here too.
    """
    label = safe_text(series_label)
    title = f"Defects per week: {label}"
    if compact:
        layout = dict(_COMPACT_LAYOUT)
    else:
        heading: dict[str, Any] = dict(text=title, x=0, xref="paper", xanchor="left")
        if subtitle:
            heading["subtitle"] = dict(text=safe_text(subtitle), font=dict(size=11))
        layout = {**_LAYOUT, "title": heading, "margin": {**_LAYOUT["margin"], "t": 84 if subtitle else 56}}
    fig = go.Figure(layout=layout)
    if history_weeks is not None:
        history = history.tail(history_weeks)
    if history.empty and forecast.empty:
        fig.add_annotation(text=EMPTY_TEXT, showarrow=False, xref="paper", yref="paper", x=0.5, y=0.5)
        fig.update_xaxes(visible=False)
        fig.update_yaxes(visible=False)
        return fig

    hover = _forecast_hover(label, forecast)
    _band(fig, forecast, level=95, name=BAND_95_NAME, fill=_BAND_95_FILL, dash="dot", hover=hover)
    _band(fig, forecast, level=80, name=BAND_80_NAME, fill=_BAND_80_FILL, dash="dash", hover=hover)
    fig.add_trace(
        go.Scatter(
            x=history["week_start"],
            y=history["count"],
            mode="lines+markers",
            name=HISTORY_NAME,
            line=dict(color=_HISTORY_COLOUR, width=1.5),
            marker=dict(symbol="circle", size=4 if compact else 6),
            text=[
                f"{label}<br>week of {_week(w)}<br>{int(c)} defect(s) found"
                for w, c in zip(history["week_start"], history["count"], strict=True)
            ],
            hovertemplate="%{text}<extra></extra>",
        )
    )
    fig.add_trace(
        go.Scatter(
            x=forecast["week_start"],
            y=forecast["expected"],
            mode="lines+markers",
            name=EXPECTED_NAME,
            line=dict(color=_FORECAST_COLOUR, width=2.5),
            marker=dict(symbol="diamond", size=5 if compact else 8),
            text=hover,
            hovertemplate="%{text}<extra></extra>",
        )
    )
    if not forecast.empty:
        start = forecast["week_start"].iloc[0]
        fig.add_vline(x=start, line=dict(color=PALETTE[7], width=1, dash="longdash"))
        if not compact:
            fig.add_annotation(
                x=start,
                y=1,
                yref="paper",
                text=FORECAST_START_TEXT,
                showarrow=False,
                xanchor="left",
                yanchor="top",
                xshift=4,
                font=dict(size=11),
            )
    fig.update_yaxes(title_text=None if compact else "defects per week", rangemode="tozero")
    fig.update_xaxes(title_text=None if compact else "week starting (Monday)")
    if compact:
        fig.update_xaxes(nticks=4, tickformat="%b", tickangle=0)
        fig.update_yaxes(nticks=4)
    return fig
