"""Turn a defect export into per-period counts: created, resolved and open backlog.

Pure module: pandas in, pandas out, no Django import.
"""

from __future__ import annotations

from collections.abc import Iterable

import numpy as np
import pandas as pd

TOTAL = "__total__"
"""Series name of the all-components total."""

FREQS = ("W-MON", "D")

MISSING_COLUMNS = "defects frame is missing required column(s): {columns}"
UNKNOWN_FREQ = "freq must be one of {allowed}, got {freq!r}"
BAD_DATE = "defect {key!r} (row {row}): field {field!r} is not a valid date: {value!r}"
BAD_COMPONENTS = "defect {key!r} (row {row}): field 'components' must be a tuple of names, got {value!r}"
FILTER_COLUMN_MISSING = "cannot filter on {field!r}: the defects frame has no {field!r} column"
START_AFTER_END = "start ({start}) is after end ({end})"

REQUIRED_COLUMNS = ("key", "created", "components")


def to_utc_naive(value: object) -> pd.Timestamp:
    """Return ``value`` as a timezone-naive UTC timestamp (naive input is taken to be UTC)."""
    ts = pd.Timestamp(value)
    if ts.tzinfo is not None:
        ts = ts.tz_convert("UTC").tz_localize(None)
    return ts


def period_floor(ts: pd.Series | pd.Timestamp, *, freq: str) -> pd.Series | pd.Timestamp:
    """Start of the period holding ``ts``: Monday 00:00 UTC for ``'W-MON'``, midnight for ``'D'``."""
    if isinstance(ts, pd.Timestamp):
        day = ts.normalize()
        return day - pd.Timedelta(days=day.day_of_week) if freq == "W-MON" else day
    day = ts.dt.normalize()
    if freq == "W-MON":
        return day - pd.to_timedelta(day.dt.day_of_week, unit="D")
    return day


def period_step(freq: str) -> pd.Timedelta:
    """Length of one period."""
    return pd.Timedelta(days=7) if freq == "W-MON" else pd.Timedelta(days=1)


def _parse_dates(defects: pd.DataFrame, field: str, *, required: bool) -> pd.Series:
    out = pd.to_datetime(defects[field], errors="coerce", utc=True).dt.tz_localize(None)
    raw = defects[field]
    # A missing resolution date is fine (still open); a present but unreadable one is not.
    bad = out.isna()
    if not required:
        bad &= raw.notna() & (raw.astype("string").str.strip() != "")
    if bad.any():
        row = int(np.flatnonzero(bad.to_numpy())[0])
        raise ValueError(
            BAD_DATE.format(key=defects["key"].iloc[row], row=row, field=field, value=raw.iloc[row])
        )
    return out.astype("datetime64[ns]")


def _normalise_components(defects: pd.DataFrame) -> list[tuple[str, ...]]:
    result: list[tuple[str, ...]] = []
    for row, value in enumerate(defects["components"].tolist()):
        if isinstance(value, str):
            names: tuple[str, ...] = (value,) if value.strip() else ()
        elif isinstance(value, (tuple, list, frozenset, set)) and all(isinstance(v, str) for v in value):
            names = tuple(dict.fromkeys(v for v in value if v.strip()))
        elif value is None or (isinstance(value, float) and np.isnan(value)):
            names = ()
        else:
            raise ValueError(BAD_COMPONENTS.format(key=defects["key"].iloc[row], row=row, value=value))
        result.append(names)
    return result


def _apply_filter(defects: pd.DataFrame, field: str, wanted: str | Iterable[str] | None) -> pd.DataFrame:
    if wanted is None:
        return defects
    if field not in defects.columns:
        raise ValueError(FILTER_COLUMN_MISSING.format(field=field))
    values = {wanted} if isinstance(wanted, str) else set(wanted)
    return defects[defects[field].isin(values)]


def weekly_counts(
    defects: pd.DataFrame,
    *,
    freq: str = "W-MON",
    start: object | None = None,
    end: object | None = None,
    severity: str | Iterable[str] | None = None,
    type: str | Iterable[str] | None = None,  # the field is called "type" in defect exports
    components: Iterable[str] | None = None,
) -> pd.DataFrame:
    """Count defects created and resolved per period, per component and in total.

    Parameters
    ----------
    defects : DataFrame
        One row per defect with columns ``key``, ``created`` (date/time), ``components``
        (tuple of component names; a plain string is read as one name) and optionally
        ``resolved`` (date/time or empty), ``severity``, ``type``. Naive times are read as UTC.
    freq : {'W-MON', 'D'}
        ``'W-MON'``: weeks starting Monday 00:00 UTC; ``'D'``: UTC calendar days.
    start, end : date-like, optional
        First and last period to report (each is moved to the start of its period).
        Default: the period of the earliest creation and the period of the latest
        creation or resolution.
    severity, type : str or iterable of str, optional
        Keep only defects whose ``severity`` / ``type`` is one of these values.
    components : iterable of str, optional
        Component names to report even if no defect mentions them (their counts are zeros).

    Returns
    -------
    DataFrame
        Long format, one row per (period, series), columns ``period_start``, ``series``,
        ``created``, ``resolved``, ``open_backlog`` (integers). ``series`` is a component
        name or ``'__total__'``. Every period between ``start`` and ``end`` appears for every
        series: a period with no defect is a row of zeros, not a gap.

    Notes
    -----
    Counting rules:

    - A defect listed under several components counts once for each of its components
      and **once** in ``'__total__'``; the sum of component counts can therefore exceed
      the total. A defect with no component counts only in the total.
    - ``resolved`` counts a defect in the period of its resolution date; a resolution
      dated before the creation is counted in the creation period.
    - ``open_backlog`` is the number of defects created up to the end of the period and
      not resolved by then; defects created before ``start`` are included, resolutions
      after ``end`` are not.
    """
    missing = [c for c in REQUIRED_COLUMNS if c not in defects.columns]
    if missing:
        raise ValueError(MISSING_COLUMNS.format(columns=", ".join(missing)))
    if freq not in FREQS:
        raise ValueError(UNKNOWN_FREQ.format(allowed=", ".join(FREQS), freq=freq))
    frame = _apply_filter(defects, "severity", severity)
    frame = _apply_filter(frame, "type", type).reset_index(drop=True)

    created = _parse_dates(frame, "created", required=True)
    if "resolved" in frame.columns:
        resolved = _parse_dates(frame, "resolved", required=False)
    else:
        resolved = pd.Series(pd.NaT, index=frame.index, dtype="datetime64[ns]")
    resolved = resolved.where(resolved.isna() | (resolved >= created), created)
    names = _normalise_components(frame)

    created_p = period_floor(created, freq=freq)
    resolved_p = period_floor(resolved, freq=freq)
    step = period_step(freq)

    if start is not None:
        first = period_floor(to_utc_naive(start), freq=freq)
    elif len(frame):
        first = created_p.min()
    else:
        first = None
    if end is not None:
        last = period_floor(to_utc_naive(end), freq=freq)
    elif len(frame):
        last = max(created_p.max(), resolved_p.max() if resolved_p.notna().any() else created_p.max())
    else:
        last = None
    if first is not None and last is not None and first > last:
        raise ValueError(START_AFTER_END.format(start=first.date(), end=last.date()))

    all_names = sorted({n for tup in names for n in tup} | set(components or ()))
    series_names = [*all_names, TOTAL]
    if first is None or last is None:
        return pd.DataFrame(
            {
                "period_start": pd.Series([], dtype="datetime64[ns]"),
                "series": pd.Series([], dtype=object),
                "created": pd.Series([], dtype="int64"),
                "resolved": pd.Series([], dtype="int64"),
                "open_backlog": pd.Series([], dtype="int64"),
            }
        )
    periods = pd.date_range(first, last, freq=step).astype("datetime64[ns]")

    membership = pd.DataFrame(
        {
            "row": [i for i, tup in enumerate(names) for _ in tup] + list(range(len(names))),
            "series": [n for tup in names for n in tup] + [TOTAL] * len(names),
        }
    )
    membership["created_p"] = created_p.to_numpy()[membership["row"].to_numpy()]
    membership["resolved_p"] = resolved_p.to_numpy()[membership["row"].to_numpy()]

    frames = []
    for name in series_names:
        rows = membership[membership["series"] == name]
        c = rows["created_p"].value_counts()
        r = rows["resolved_p"].dropna().value_counts()
        created_n = c.reindex(periods, fill_value=0).to_numpy(dtype="int64")
        resolved_n = r.reindex(periods, fill_value=0).to_numpy(dtype="int64")
        opened_before = int((rows["created_p"] < periods[0]).sum())
        closed_before = int((rows["resolved_p"] < periods[0]).sum())
        backlog = opened_before - closed_before + np.cumsum(created_n) - np.cumsum(resolved_n)
        frames.append(
            pd.DataFrame(
                {
                    "period_start": periods,
                    "series": name,
                    "created": created_n,
                    "resolved": resolved_n,
                    "open_backlog": backlog.astype("int64"),
                }
            )
        )
    return pd.concat(frames, ignore_index=True)
