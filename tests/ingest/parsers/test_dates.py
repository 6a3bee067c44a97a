"""Date parsing and inference for defect exports, checked against reference libraries.

References: pandas.to_datetime and dateutil.parser (general-purpose reference libraries); ISO 8601 /
RFC 3339 for the zone arithmetic; POSIX time (seconds since 1970-01-01T00:00:00Z) for epochs.
"""

from __future__ import annotations

import re
from datetime import UTC, datetime

import pandas as pd
import pytest
from dateutil import parser as du_parser
from hypothesis import given, settings
from hypothesis import strategies as st

from ingest.parsers.dates import (
    AMBIGUOUS_DATES_MSG,
    AMBIGUOUS_EXAMPLE_MSG,
    NO_DATE_FORMAT_MSG,
    UNPARSABLE_DATE_MSG,
    AmbiguousDatesError,
    DateFormatResolver,
    DateParseError,
    DefectExportError,
    describe_date_format,
    parse_date,
    resolve_date_format,
)

ISO_VALUES = [
    "2026-04-03",
    "2026-04-03T10:15:00",
    "2026-04-03T10:15:00Z",
    "2026-04-03T10:15:00+02:00",
    "2026-04-03T01:15:00-05:30",
    "2026-04-03 23:59:59.123456+14:00",
    "2026-12-31T23:30:00-01:00",  # crosses into the next year in UTC
    "2024-02-29T12:00:00+01:00",  # leap day
]


@pytest.mark.parametrize("value", ISO_VALUES)
def test_iso_values_match_pandas_and_dateutil(value):
    ours = parse_date(value, "iso")
    # Reference: pandas.to_datetime(utc=True) reads naive values as UTC and converts zoned ones.
    assert ours == pd.to_datetime(value, utc=True).to_pydatetime()
    # Reference: dateutil.parser.isoparse, then conversion to UTC (naive = UTC, our documented rule).
    ref = du_parser.isoparse(value)
    ref = ref.replace(tzinfo=UTC) if ref.tzinfo is None else ref.astimezone(UTC)
    assert ours == ref
    assert ours.tzinfo is UTC


def test_zone_offset_is_converted_to_utc():
    # ISO 8601 / RFC 3339: local time = UTC + offset, so 10:15+02:00 is 08:15Z.
    assert parse_date("2026-04-03T10:15:00+02:00", "iso") == datetime(2026, 4, 3, 8, 15, tzinfo=UTC)


@pytest.mark.parametrize("value", ["0", "1775174400", "1775174400.25", "-86400", "951782400"])
def test_epoch_seconds_match_pandas(value):
    # Reference: pandas.to_datetime(unit="s").
    ref = pd.to_datetime(float(value), unit="s", utc=True).to_pydatetime()
    assert parse_date(value, "epoch_s") == ref


@pytest.mark.parametrize("value", ["1775174400000", "1775174400123", "951782400999", "-1000"])
def test_epoch_milliseconds_match_pandas(value):
    # Reference: pandas.to_datetime(unit="ms").
    ref = pd.to_datetime(int(value), unit="ms", utc=True).to_pydatetime()
    assert parse_date(value, "epoch_ms") == ref
    assert parse_date(int(value), "epoch_ms") == ref  # JSON numbers arrive as int


DAY_MONTH_VALUES = [
    "03/04/2026",
    "3/4/2026",
    "25.12.2025",
    "07-11-2026",
    "03/04/2026 14:05",
    "03/04/2026 2:05 PM",
    "03/04/2026 12:05 AM",
    "03/04/2026 09:30:15",
    "12/11/2026 23:59:59.5",
]


@pytest.mark.parametrize("value", DAY_MONTH_VALUES)
@pytest.mark.parametrize("dayfirst", [True, False])
def test_day_month_forms_match_dateutil(value, dayfirst):
    fmt = "dayfirst" if dayfirst else "monthfirst"
    first, second = (int(part) for part in re.split(r"[/.\-]", value.split()[0])[:2])
    if max(first, second) > 12 and (first > 12) != dayfirst:
        # dateutil silently swaps day and month when the asked order is impossible; we refuse instead.
        with pytest.raises(DateParseError):
            parse_date(value, fmt)
        return
    # Reference: dateutil.parser.parse(dayfirst=...), naive read as UTC.
    ref = du_parser.parse(value, dayfirst=dayfirst).replace(tzinfo=UTC)
    assert parse_date(value, fmt) == ref


@settings(max_examples=200, deadline=None)
@given(
    moment=st.datetimes(min_value=datetime(1990, 1, 1), max_value=datetime(2099, 12, 31)),
    sep=st.sampled_from(["/", ".", "-"]),
)
def test_day_month_round_trip_against_dateutil(moment, sep):
    moment = moment.replace(microsecond=0)
    day_first = moment.strftime(f"%d{sep}%m{sep}%Y %H:%M:%S")
    month_first = moment.strftime(f"%m{sep}%d{sep}%Y %H:%M:%S")
    expected = moment.replace(tzinfo=UTC)
    assert parse_date(day_first, "dayfirst") == expected
    assert parse_date(month_first, "monthfirst") == expected
    # Reference: dateutil reads the same strings to the same instants.
    assert du_parser.parse(day_first, dayfirst=True).replace(tzinfo=UTC) == expected


def test_strptime_format_and_zone():
    assert parse_date("03-Apr-2026 10:15", "%d-%b-%Y %H:%M") == datetime(2026, 4, 3, 10, 15, tzinfo=UTC)
    # An aware strptime result is converted to UTC (ISO 8601 offset arithmetic).
    assert parse_date("2026/04/03 10:15 +0200", "%Y/%m/%d %H:%M %z") == datetime(
        2026, 4, 3, 8, 15, tzinfo=UTC
    )


@pytest.mark.parametrize(
    ("value", "fmt"),
    [
        ("2026-13-01", "iso"),
        ("31/02/2026", "dayfirst"),
        ("yesterday", "epoch_s"),
        ("13/25/2026", "monthfirst"),
    ],
)
def test_unparsable_value_names_value_and_format(value, fmt):
    with pytest.raises(DateParseError) as info:
        parse_date(value, fmt)
    assert str(info.value) == UNPARSABLE_DATE_MSG.format(value=value, expected=describe_date_format(fmt))


@pytest.mark.parametrize(
    ("values", "expected"),
    [
        (["2026-04-03", "2026-04-05T10:00:00Z", ""], "iso"),
        (["1775174400", "1775260800"], "epoch_s"),
        (["1775174400000", 1775260800000], "epoch_ms"),
        (["03/04/2026", "25/03/2026"], "dayfirst"),  # 25 can only be a day
        (["04/03/2026", "03/25/2026"], "monthfirst"),
        (["01/01/2026", "02/02/2026"], "dayfirst"),  # day == month: both readings agree
        ([], None),
        (["", "  "], None),
    ],
)
def test_resolve_date_format(values, expected):
    assert resolve_date_format(values) == expected


def test_one_bad_value_does_not_decide_the_column():
    # The best-fitting format wins; the odd value later becomes a row error.
    assert resolve_date_format(["2026-04-03", "2026-04-04", "soon"]) == "iso"


def test_ambiguous_column_is_refused_with_both_readings():
    values = ["03/04/2026", "05/06/2026", "01/01/2026", "03/04/2026"]
    with pytest.raises(AmbiguousDatesError) as info:
        resolve_date_format(values, column="Opened On", filename="desk.csv")
    # Both readings of each example, cross-checked with dateutil.parser.parse(dayfirst=True/False).
    for value in ("03/04/2026", "05/06/2026"):
        assert du_parser.parse(value, dayfirst=True).strftime("%-d %B %Y") in str(info.value)
        assert du_parser.parse(value, dayfirst=False).strftime("%-d %B %Y") in str(info.value)
    examples = "; ".join(
        [
            AMBIGUOUS_EXAMPLE_MSG.format(
                value="03/04/2026", dayfirst="3 April 2026", monthfirst="4 March 2026"
            ),
            AMBIGUOUS_EXAMPLE_MSG.format(value="05/06/2026", dayfirst="5 June 2026", monthfirst="6 May 2026"),
        ]
    )
    assert str(info.value) == AMBIGUOUS_DATES_MSG.format(
        source="desk.csv: ", column="Opened On", examples=examples
    )
    assert "03/04/2026 could be 3 April 2026 (day first) or 4 March 2026 (month first)" in str(info.value)
    assert "date_format" in str(info.value)
    assert isinstance(info.value, DefectExportError)


def test_ambiguity_settled_by_preference():
    resolver = DateFormatResolver(column="Closed")
    resolver.add("03/04/2026")
    assert resolver.resolve(prefer="monthfirst") == "monthfirst"


def test_column_with_no_readable_value_is_refused():
    with pytest.raises(DefectExportError) as info:
        resolve_date_format(["next week", "soon"], column="Opened", filename="x.csv")
    assert str(info.value) == NO_DATE_FORMAT_MSG.format(
        source="x.csv: ", column="Opened", example="next week"
    )


def test_values_are_consumed_lazily():
    # Constant memory: a generator is accepted and read once.
    def gen():
        for day in range(1, 29):
            yield f"2026-02-{day:02d}"

    assert resolve_date_format(gen()) == "iso"
