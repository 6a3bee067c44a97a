"""Charts of the "Flaky tests" pages: pure functions, DataFrame in, plotly Figure out."""

from __future__ import annotations

import pandas as pd
import plotly.graph_objects as go

from analytics.charts import PALETTE, safe_text

#: outcome → (legend label, marker symbol, colour): shape and label carry the meaning, colour only helps.
OUTCOME_STYLE = {
    "passed": ("passed", "circle", PALETTE[2]),
    "failed": ("failed", "x", PALETTE[3]),
    "error": ("error", "diamond", PALETTE[4]),
    "skipped": ("skipped", "square-open", PALETTE[7]),
}


def duration_figure(runs: pd.DataFrame) -> go.Figure:
    """Duration of each attempt over time, one marker shape per outcome.

    Parameters
    ----------
    runs : DataFrame
        Columns ``started_at`` (build start), ``build``, ``commit``, ``attempt``, ``outcome``, ``duration``
        (seconds, may be missing). ``build`` and ``commit`` come from uploads and are escaped here.
    """
    fig = go.Figure()
    data = runs.dropna(subset=["duration"]) if len(runs) else runs
    for outcome, (label, symbol, colour) in OUTCOME_STYLE.items():
        part = data[data["outcome"] == outcome] if len(data) else data
        if part.empty:
            continue
        hover = [
            f"build {safe_text(b)} · commit {safe_text(c)[:12]}<br>attempt {int(a)}: {label}, {d:.3f} s"
            for b, c, a, d in zip(part["build"], part["commit"], part["attempt"], part["duration"], strict=True)
        ]
        fig.add_trace(go.Scatter(
            x=part["started_at"], y=part["duration"], mode="markers", name=label,
            marker={"symbol": symbol, "color": colour, "size": 7, "line": {"width": 1.5, "color": colour}},
            hovertext=hover, hoverinfo="text",
        ))
    fig.update_layout(
        title="Duration of each run (seconds)", xaxis_title="build start", yaxis_title="seconds",
        margin={"l": 50, "r": 10, "t": 40, "b": 40}, height=320, legend={"orientation": "h", "y": -0.25},
        template="plotly_white",
    )
    if data.empty:
        fig.add_annotation(text="No durations recorded", showarrow=False, xref="paper", yref="paper", x=0.5, y=0.5)
    return fig
