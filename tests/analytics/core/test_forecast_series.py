"""Weekly defect counts: ISO weeks in UTC, zeros for quiet weeks, component counting rules."""

import pandas as pd
import pytest

from analytics.core.forecast import TOTAL, weekly_counts
from analytics.core.forecast.series import (
    BAD_COMPONENTS,
    BAD_DATE,
    FILTER_COLUMN_MISSING,
    MISSING_COLUMNS,
    UNKNOWN_FREQ,
)


def _defects(rows):
    return pd.DataFrame(rows, columns=["key", "created", "resolved", "components", "severity", "type"])


def _cell(frame, series, week, column="created"):
    row = frame[(frame["series"] == series) & (frame["period_start"] == pd.Timestamp(week))]
    assert len(row) == 1
    return int(row[column].iloc[0])


def test_weeks_start_monday_utc():
    # ISO 8601 weeks start on Monday; times are converted to UTC before flooring (common practice).
    defects = _defects(
        [
            ("BERTH-1", "2025-03-02T23:30:00-05:00", None, ("berths",), "major", "bug"),  # Mon 04:30 UTC
            ("BERTH-2", "2025-03-03T00:30:00+02:00", None, ("berths",), "major", "bug"),  # Sun 22:30 UTC
        ]
    )
    counts = weekly_counts(defects)
    assert _cell(counts, "berths", "2025-03-03") == 1
    assert _cell(counts, "berths", "2025-02-24") == 1
    assert set(counts["period_start"].dt.day_of_week) == {0}


def test_quiet_weeks_are_zeros_not_gaps_and_multi_component_counts_once_in_total():
    defects = _defects(
        [
            ("B-1", "2025-01-06", None, ("berths", "payments"), "minor", "bug"),
            ("B-2", "2025-01-28", None, ("berths",), "minor", "bug"),
        ]
    )
    counts = weekly_counts(defects)
    weeks = pd.date_range("2025-01-06", "2025-01-27", freq="7D")
    for name in ("berths", "payments", TOTAL):
        assert list(counts.loc[counts["series"] == name, "period_start"]) == list(weeks)
    assert _cell(counts, "berths", "2025-01-13") == 0  # quiet week is a zero row
    assert _cell(counts, "berths", "2025-01-06") == 1
    assert _cell(counts, "payments", "2025-01-06") == 1
    assert _cell(counts, TOTAL, "2025-01-06") == 1  # counted once in the total
    assert counts.loc[counts["series"] == TOTAL, "created"].sum() == 2


def test_resolved_and_backlog_by_hand():
    defects = _defects(
        [
            ("B-1", "2025-01-06", "2025-01-15", ("berths",), "major", "bug"),
            ("B-2", "2025-01-07", "", ("berths",), "major", "bug"),
            ("B-3", "2025-01-14", "2025-01-20", ("berths",), "major", "bug"),
        ]
    )
    counts = weekly_counts(defects)
    rows = counts[counts["series"] == "berths"]
    # week 06: +2 open -> 2; week 13: +1 created, 1 resolved -> 2; week 20: 1 resolved -> 1.
    assert list(rows["created"]) == [2, 1, 0]
    assert list(rows["resolved"]) == [0, 1, 1]
    assert list(rows["open_backlog"]) == [2, 2, 1]


def test_daily_frequency_filters_and_listed_components():
    defects = _defects(
        [
            ("B-1", "2025-01-06T10:00", None, ("berths",), "critical", "bug"),
            ("B-2", "2025-01-08T10:00", None, ("berths",), "minor", "task"),
        ]
    )
    daily = weekly_counts(defects, freq="D", severity="critical", components=["harbour-map"])
    assert list(daily.loc[daily["series"] == TOTAL, "created"]) == [1]
    assert list(daily.loc[daily["series"] == "harbour-map", "created"]) == [0]
    daily = weekly_counts(defects, freq="D", type=["bug", "task"])
    assert list(daily.loc[daily["series"] == TOTAL, "created"]) == [1, 0, 1]


def test_input_is_not_modified():
    defects = _defects([("B-1", "2025-01-06", None, ("berths",), "major", "bug")])
    before = defects.copy()
    weekly_counts(defects)
    pd.testing.assert_frame_equal(defects, before)


def test_bad_input_names_the_field_and_row():
    with pytest.raises(ValueError) as err:
        weekly_counts(pd.DataFrame({"key": ["B-1"], "created": ["2025-01-06"]}))
    assert str(err.value) == MISSING_COLUMNS.format(columns="components")
    bad_date = _defects(
        [
            ("B-1", "2025-01-06", None, ("berths",), "major", "bug"),
            ("B-2", "yesterday", None, (), "major", "bug"),
        ]
    )
    with pytest.raises(ValueError) as err:
        weekly_counts(bad_date)
    assert str(err.value) == BAD_DATE.format(key="B-2", row=1, field="created", value="yesterday")
    bad_comp = _defects([("B-1", "2025-01-06", None, 42, "major", "bug")])
    with pytest.raises(ValueError) as err:
        weekly_counts(bad_comp)
    assert str(err.value) == BAD_COMPONENTS.format(key="B-1", row=0, value=42)
    good = _defects([("B-1", "2025-01-06", None, ("berths",), "major", "bug")])
    with pytest.raises(ValueError) as err:
        weekly_counts(good, freq="M")
    assert str(err.value) == UNKNOWN_FREQ.format(allowed="W-MON, D", freq="M")
    with pytest.raises(ValueError) as err:
        weekly_counts(good.drop(columns="severity"), severity="major")
    assert str(err.value) == FILTER_COLUMN_MISSING.format(field="severity")
