"""Date parsing for defect exports, with per-column format inference.

Pure module: plain Python in, plain Python out; no Django, no I/O.

A defect export writes its dates in one of a handful of shapes. Barometer names them:

``"iso"``
    ISO 8601 as accepted by :meth:`datetime.datetime.fromisoformat` (``2026-04-03``,
    ``2026-04-03T10:15:00+02:00``, ``2026-04-03 10:15Z``, ...).
``"epoch_s"`` / ``"epoch_ms"``
    Seconds / milliseconds since 1970-01-01T00:00:00Z, integer or decimal.
``"dayfirst"`` / ``"monthfirst"``
    ``D/M/YYYY`` or ``M/D/YYYY`` with ``/``, ``.`` or ``-`` between the parts, optionally followed by a
    time ``H:MM[:SS[.ffffff]]`` and ``AM``/``PM``. Two-digit years are not inferred (set a strptime
    format such as ``"%d/%m/%y"``).
any other string containing ``%``
    A :meth:`datetime.datetime.strptime` format.

Every parsed date is returned as an aware datetime in UTC; a value without a zone is taken as UTC.

Inference (:func:`resolve_date_format`) counts, for each shape, how many values of a column it reads, and
picks the shape that reads the most. During inference a purely numeric value counts only as an epoch
(never as a basic-format ISO date such as ``20260403``), and epoch values below 1e11 count as seconds,
values from 1e11 up as milliseconds (1e11 s is in the year 5138; 1e11 ms is in 1973). When day-first and
month-first read equally many values and at least one value gives two different dates, the column is
refused with :data:`AMBIGUOUS_DATES_MSG`: guessing would silently swap day and month.
"""

from __future__ import annotations

import re
from collections.abc import Iterable
from datetime import UTC, date, datetime, timedelta
from decimal import ROUND_HALF_EVEN, Decimal

__all__ = [
    "AMBIGUOUS_DATES_MSG",
    "AMBIGUOUS_EXAMPLE_MSG",
    "BAD_DATE_FORMAT_MSG",
    "DATE_KINDS",
    "NO_DATE_FORMAT_MSG",
    "UNPARSABLE_DATE_MSG",
    "AmbiguousDatesError",
    "DateFormatResolver",
    "DateParseError",
    "DefectExportError",
    "describe_date_format",
    "is_valid_date_format",
    "parse_date",
    "resolve_date_format",
]

DATE_KINDS: tuple[str, ...] = ("iso", "epoch_s", "epoch_ms", "dayfirst", "monthfirst")

# Messages that tests check.
AMBIGUOUS_DATES_MSG = (
    "{source}column {column!r}: the dates can be read day first or month first: {examples}. "
    'Set "date_format" in the column map to "dayfirst" or "monthfirst" '
    '(or to a strptime format such as "%d/%m/%Y").'
)
AMBIGUOUS_EXAMPLE_MSG = "{value} could be {dayfirst} (day first) or {monthfirst} (month first)"
NO_DATE_FORMAT_MSG = (
    "{source}column {column!r}: no known date format reads any value (e.g. {example!r}). "
    'Set "date_format" in the column map to "iso", "epoch_s", "epoch_ms", "dayfirst", "monthfirst" '
    "or a strptime format."
)
UNPARSABLE_DATE_MSG = "unparsable date {value!r}: expected {expected}"
BAD_DATE_FORMAT_MSG = (
    'date_format {value!r} is not one of "iso", "epoch_s", "epoch_ms", "dayfirst", "monthfirst" '
    "and is not a strptime format (it has no %)"
)

_DESCRIPTIONS = {
    "iso": "an ISO 8601 date such as 2026-04-03 or 2026-04-03T10:15:00+02:00",
    "epoch_s": "seconds since 1970-01-01 UTC",
    "epoch_ms": "milliseconds since 1970-01-01 UTC",
    "dayfirst": "a day-first date such as 03/04/2026 for 3 April 2026",
    "monthfirst": "a month-first date such as 04/03/2026 for 3 April 2026",
}
_MONTHS = (
    "January",
    "February",
    "March",
    "April",
    "May",
    "June",
    "July",
    "August",
    "September",
    "October",
    "November",
    "December",
)
_EPOCH = datetime(1970, 1, 1, tzinfo=UTC)
_EPOCH_MS_THRESHOLD = 1e11
_NUMERIC_RE = re.compile(r"^[+-]?\d+(?:\.\d+)?$")
_DAY_MONTH_RE = re.compile(
    r"^(\d{1,2})([/.\-])(\d{1,2})\2(\d{4})"
    r"(?:[ T]+(\d{1,2}):(\d{2})(?::(\d{2})(?:\.(\d{1,6}))?)?\s*([AaPp][Mm])?)?$"
)


class DefectExportError(ValueError):
    """A whole defect export cannot be read as mapped; the message names the file and column."""


class AmbiguousDatesError(DefectExportError):
    """A date column reads equally well day first and month first."""


class DateParseError(ValueError):
    """One value does not fit its column's date format; the message names the value and the format."""


def is_valid_date_format(value: str) -> bool:
    """Return whether *value* is a named date format or a strptime format."""
    return value in DATE_KINDS or "%" in value


def describe_date_format(date_format: str) -> str:
    """Return a short human description of *date_format* for error messages."""
    return _DESCRIPTIONS.get(date_format, f"the format {date_format!r}")


def _as_utc(moment: datetime) -> datetime:
    if moment.tzinfo is None:
        return moment.replace(tzinfo=UTC)
    return moment.astimezone(UTC)


def _epoch(text: str, *, scale: int) -> datetime:
    if not _NUMERIC_RE.match(text):
        raise ValueError(text)
    # Decimal keeps sub-second digits exact; float would blur microseconds on millisecond stamps.
    micro = (Decimal(text) * 1_000_000 / scale).to_integral_value(rounding=ROUND_HALF_EVEN)
    return _EPOCH + timedelta(microseconds=int(micro))


def _day_month(text: str, *, dayfirst: bool) -> datetime:
    match = _DAY_MONTH_RE.match(text)
    if not match:
        raise ValueError(text)
    first, _, second, year, hour, minute, second_s, frac, ampm = match.groups()
    day, month = (int(first), int(second)) if dayfirst else (int(second), int(first))
    h = int(hour or 0)
    if ampm:
        if not 1 <= h <= 12:
            raise ValueError(text)
        h = h % 12 + (12 if ampm.lower() == "pm" else 0)
    micro = int(frac.ljust(6, "0")) if frac else 0
    return datetime(
        int(year),
        month,
        day,
        h,
        int(minute or 0),
        int(second_s or 0),
        micro,
        tzinfo=UTC,
    )


def parse_date(value: str | float, date_format: str) -> datetime:
    """Parse one date value in *date_format* and return an aware datetime in UTC.

    Parameters
    ----------
    value : str, int or float
        The cell text (surrounding blanks ignored) or a JSON number.
    date_format : str
        One of :data:`DATE_KINDS` or a strptime format.

    Raises
    ------
    DateParseError
        The value does not fit; the message (:data:`UNPARSABLE_DATE_MSG`) names the value and format.

    Examples
    --------
    >>> parse_date("2026-04-03T12:00:00+02:00", "iso").isoformat()
    '2026-04-03T10:00:00+00:00'
    >>> parse_date("03/04/2026", "dayfirst").date().isoformat()
    '2026-04-03'
    """
    text = str(value).strip()
    try:
        if date_format == "iso":
            return _as_utc(datetime.fromisoformat(text))
        if date_format == "epoch_s":
            return _epoch(text, scale=1)
        if date_format == "epoch_ms":
            return _epoch(text, scale=1000)
        if date_format in ("dayfirst", "monthfirst"):
            return _day_month(text, dayfirst=date_format == "dayfirst")
        if "%" in date_format:
            return _as_utc(datetime.strptime(text, date_format))
    except (ValueError, OverflowError):
        pass
    else:
        raise ValueError(BAD_DATE_FORMAT_MSG.format(value=date_format))
    raise DateParseError(UNPARSABLE_DATE_MSG.format(value=text, expected=describe_date_format(date_format)))


def _spoken(day: date) -> str:
    return f"{day.day} {_MONTHS[day.month - 1]} {day.year}"


class DateFormatResolver:
    """Infer one column's date format from its values, fed one at a time (constant memory).

    Parameters
    ----------
    column : str
        Source column name, used in messages.
    filename : str or None
        File name, used in messages.

    Examples
    --------
    >>> resolver = DateFormatResolver(column="Opened")
    >>> for value in ["25/03/2026", "03/04/2026"]:
    ...     resolver.add(value)
    >>> resolver.resolve()
    'dayfirst'
    """

    def __init__(self, *, column: str = "", filename: str | None = None) -> None:
        self.column = column
        self.filename = filename
        self.counts = dict.fromkeys(DATE_KINDS, 0)
        self.n_values = 0
        self.first_value: str | None = None
        self.examples: list[str] = []

    def add(self, value: str | float | None) -> None:
        """Count which formats read *value*; empty values are ignored."""
        if value is None:
            return
        text = str(value).strip()
        if not text:
            return
        self.n_values += 1
        if self.first_value is None:
            self.first_value = text
        if _NUMERIC_RE.match(text):
            kind = "epoch_ms" if abs(float(text)) >= _EPOCH_MS_THRESHOLD else "epoch_s"
            try:
                parse_date(text, kind)
            except DateParseError:
                return
            self.counts[kind] += 1
            return
        match = _DAY_MONTH_RE.match(text)
        if match:
            readings = {}
            for kind in ("dayfirst", "monthfirst"):
                try:
                    readings[kind] = parse_date(text, kind)
                except DateParseError:
                    continue
                self.counts[kind] += 1
            if (
                len(readings) == 2
                and readings["dayfirst"] != readings["monthfirst"]
                and len(self.examples) < 2
                and text not in self.examples
            ):
                self.examples.append(text)
            return
        try:
            parse_date(text, "iso")
        except DateParseError:
            return
        self.counts["iso"] += 1

    def _source(self) -> str:
        return f"{self.filename}: " if self.filename else ""

    def resolve(self, *, prefer: str | None = None) -> str | None:
        """Return the inferred format, or None when the column held no value.

        Parameters
        ----------
        prefer : {"dayfirst", "monthfirst"} or None
            Used to settle a day/month tie (e.g. the reading another date column of the same file proved).

        Raises
        ------
        AmbiguousDatesError
            Day first and month first read equally many values and they disagree on some value.
        DefectExportError
            No format reads any value.
        """
        if self.n_values == 0:
            return None
        best = max(self.counts.values())
        if best == 0:
            raise DefectExportError(
                NO_DATE_FORMAT_MSG.format(source=self._source(), column=self.column, example=self.first_value)
            )
        winners = [kind for kind in DATE_KINDS if self.counts[kind] == best]
        if "dayfirst" in winners and "monthfirst" in winners:
            if not self.examples:
                return "dayfirst"  # every value has day == month: both readings give the same dates
            if prefer in ("dayfirst", "monthfirst"):
                return prefer
            examples = "; ".join(
                AMBIGUOUS_EXAMPLE_MSG.format(
                    value=value,
                    dayfirst=_spoken(parse_date(value, "dayfirst")),
                    monthfirst=_spoken(parse_date(value, "monthfirst")),
                )
                for value in self.examples
            )
            raise AmbiguousDatesError(
                AMBIGUOUS_DATES_MSG.format(source=self._source(), column=self.column, examples=examples)
            )
        return winners[0]


def resolve_date_format(
    values: Iterable[str | int | float | None],
    *,
    column: str = "",
    filename: str | None = None,
) -> str | None:
    """Infer the date format of one column from all its values.

    Parameters
    ----------
    values : iterable of str, int, float or None
        The column's values; empty ones are skipped. Consumed once, in constant memory.
    column, filename : str
        Named in error messages.

    Returns
    -------
    str or None
        One of :data:`DATE_KINDS`, or None when there was no non-empty value.

    Raises
    ------
    AmbiguousDatesError
        Every value reads both day first and month first (see :data:`AMBIGUOUS_DATES_MSG`).
    DefectExportError
        No known format reads any value (see :data:`NO_DATE_FORMAT_MSG`).

    Examples
    --------
    >>> resolve_date_format(["2026-04-03", "2026-04-05T10:00:00Z"])
    'iso'
    >>> resolve_date_format(["1775174400000"])
    'epoch_ms'
    """
    resolver = DateFormatResolver(column=column, filename=filename)
    for value in values:
        resolver.add(value)
    return resolver.resolve()
