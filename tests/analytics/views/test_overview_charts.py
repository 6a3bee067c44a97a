"""The "This week" charts (pure: DataFrame → plotly Figure) and the week arithmetic behind the page.

Weeks are ISO 8601 weeks (Monday to Sunday, UTC); Python's ``date.isocalendar()`` is the reference.
"""

from __future__ import annotations

import html
from datetime import UTC, date, datetime, timedelta

import pandas as pd
import pytest

from analytics.charts.overview import (
    EMPTY_TEXT,
    component_failures_chart,
    defect_flow_chart,
    duration_growth_chart,
    pass_rate_chart,
)
from analytics.selectors_overview import Scope, default_week, defect_flow_frame, weekly_runs_frame
from ingest.models import Build, Defect, Project, TestCase, TestResult
from ingest.services.results import rollup_rebuild

XSS = "<img src=x onerror=alert(1)>"
WEEKS = [date(2026, 10, 5) + timedelta(weeks=i) for i in range(3)]


def _no_raw_markup(fig) -> None:
    text = fig.to_json()
    assert "<img" not in text and "onerror=alert(1)>" not in text


# --------------------------------------------------------------------------------------------------- charts
def test_component_chart_escapes_names_and_never_relies_on_colour_alone():
    frame = pd.DataFrame({"week": WEEKS * 2, "component": [XSS] * 3 + ["Payments"] * 3,
                          "failures": [1, 2, 3, 4, 5, 6]})
    fig = component_failures_chart(frame)
    assert {t.name for t in fig.data} == {html.escape(XSS), "Payments"}
    _no_raw_markup(fig)
    colours = {t.marker.color for t in fig.data}
    patterns = {t.marker.pattern.shape for t in fig.data}
    assert len(colours) == 2 and len(patterns) == 2  # each stack differs in colour AND pattern
    assert fig.layout.barmode == "stack"
    # the biggest component is drawn first (at the bottom of the stack)
    assert fig.data[0].name == "Payments"


def test_growth_chart_escapes_and_keeps_the_end_of_long_names():
    long_name = "io.berthwise.payments." + "Deep" * 20 + "::test_refund_after_storm"
    frame = pd.DataFrame({"test_id": [1, 2], "test": [XSS, long_name], "component": ["A", XSS],
                          "before": [1.0, 2.0], "recent": [2.0, 2.5], "growth": [1.0, 0.5]})
    fig = duration_growth_chart(frame)
    _no_raw_markup(fig)
    labels = list(fig.data[0].y)
    assert html.escape(XSS) in labels
    assert any(label.endswith("::test_refund_after_storm") and label.startswith("…") for label in labels)
    # recent bars say the growth in words too
    assert list(fig.data[1].text) == ["+0.50 s", "+1.00 s"]


def test_pass_rate_chart_in_percent_with_the_selected_week_marked():
    frame = pd.DataFrame({"week": WEEKS, "pass_rate": [0.5, None, 0.75], "runs": [4, 0, 8],
                          "failed_runs": [2, 0, 2]})
    fig = pass_rate_chart(frame, selected=WEEKS[2])
    line, marker = fig.data
    assert list(line.y) == [50.0, 75.0]  # the week without runs is a gap, not a zero
    assert list(marker.y) == [75.0] and marker.marker.symbol == "diamond"


def test_defect_flow_chart_has_the_difference_as_a_dashed_line():
    frame = pd.DataFrame({"week": WEEKS, "opened": [3, 1, 0], "closed": [1, 1, 2]})
    opened, closed, net = defect_flow_chart(frame).data
    assert list(net.y) == [2, 0, -2]
    assert closed.marker.pattern.shape == "/" and net.line.dash == "dot"


@pytest.mark.parametrize(
    ("builder", "frame"),
    [
        (pass_rate_chart, pd.DataFrame({"week": WEEKS, "pass_rate": [None] * 3, "runs": [0] * 3,
                                        "failed_runs": [0] * 3})),
        (component_failures_chart, pd.DataFrame(columns=["week", "component", "failures"])),
        (defect_flow_chart, pd.DataFrame({"week": WEEKS, "opened": [0] * 3, "closed": [0] * 3})),
        (duration_growth_chart, pd.DataFrame(columns=["test_id", "test", "component", "before", "recent",
                                                      "growth"])),
    ],
)
def test_empty_data_says_so(builder, frame):
    fig = builder(frame)
    assert [a.text for a in fig.layout.annotations] == [EMPTY_TEXT]


# --------------------------------------------------------------------------------------------------- weeks
def test_default_week_is_the_last_complete_iso_week():
    today = date(2026, 12, 2)  # a Wednesday
    current_monday = today - timedelta(days=today.isocalendar().weekday - 1)
    weeks = [current_monday, current_monday - timedelta(weeks=1), current_monday - timedelta(weeks=3)]
    assert default_week(weeks, today=today) == current_monday - timedelta(weeks=1)
    assert default_week([current_monday], today=today) == current_monday  # only the running week has data
    assert default_week([], today=today) is None


@pytest.mark.django_db
def test_defects_are_counted_in_their_iso_week_at_the_boundaries():
    project = Project.objects.create(slug="berthwise", name="Berthwise")
    monday = datetime(2026, 10, 12, tzinfo=UTC)
    moments = [monday - timedelta(seconds=1), monday, monday + timedelta(days=6, hours=23, minutes=59)]
    for i, at in enumerate(moments):
        Defect.objects.create(project=project, key=f"BW-{i}", title="t", created_at=at,
                              resolved_at=at + timedelta(days=7))
    frame = defect_flow_frame(Scope(project.pk, date(2026, 10, 19)), weeks=3).set_index("week")
    def iso_weeks(stamps) -> dict[date, int]:  # reference: ISO 8601 week of each moment, date.isocalendar()
        out: dict[date, int] = {}
        for at in stamps:
            year, week, _ = at.date().isocalendar()
            monday = date.fromisocalendar(year, week, 1)
            out[monday] = out.get(monday, 0) + 1
        return out

    assert {w: int(n) for w, n in frame["opened"].items() if n} == iso_weeks(moments)
    assert {w: int(n) for w, n in frame["closed"].items() if n} == iso_weeks(m + timedelta(days=7) for m in moments)


@pytest.mark.django_db
def test_weekly_frame_reads_the_rollup_and_leaves_gaps():
    project = Project.objects.create(slug="berthwise", name="Berthwise")
    test = TestCase.objects.create(project=project, name="test_gate")
    build = Build.objects.create(project=project, external_id="b1", started_at=datetime(2026, 10, 6, tzinfo=UTC))
    for outcome in ("passed", "passed", "failed", "skipped"):
        TestResult.objects.create(project=project, build=build, test_case=test, outcome=outcome, duration=1.0)
    rollup_rebuild(project=project)
    frame = weekly_runs_frame(Scope(project.pk, date(2026, 10, 12)), weeks=2).set_index("week")
    first, second = frame.loc[date(2026, 10, 5)], frame.loc[date(2026, 10, 12)]
    assert (first["runs"], first["failed_runs"], first["tests"]) == (4, 1, 1)
    assert first["pass_rate"] == pytest.approx(2 / 3)  # skipped runs are left out of the rate
    assert pd.isna(second["pass_rate"]) and second["runs"] == 0
