"""Laplace trend test for defect arrivals, continuous-time and grouped-counts forms."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy import stats

BAD_AGES = "failure ages must be finite, positive and non-decreasing; age #{index} is {value!r}"
END_BEFORE_LAST_AGE = "the observation end ({end}) is before the last failure age ({last})"
BAD_GROUPED = "grouped counts must be finite and non-negative; interval #{index} holds {value!r}"

SIGNIFICANCE = 0.05


@dataclass(frozen=True)
class TrendTest:
    """Result of a Laplace trend test.

    Attributes
    ----------
    u : float
        The Laplace factor, approximately standard normal under a homogeneous Poisson process.
    p_value : float
        Two-sided p-value.
    reading : str
        Plain-words reading: growth (u significantly < 0), decay (> 0) or no significant trend.
    """

    u: float
    p_value: float
    reading: str

    def as_dict(self) -> dict[str, float | str]:
        return {"u": self.u, "p_value": self.p_value, "reading": self.reading}


def _reading(u: float, p_value: float) -> str:
    if p_value < SIGNIFICANCE and u < 0:
        return f"reliability growth: defects are arriving less often (u = {u:.1f})"
    if p_value < SIGNIFICANCE and u > 0:
        return f"reliability decay: defects are arriving more often (u = {u:.1f})"
    return f"no significant trend (u = {u:.1f})"


def _result(u: float) -> TrendTest:
    p_value = float(2 * stats.norm.sf(abs(u)))
    return TrendTest(u=float(u), p_value=p_value, reading=_reading(float(u), p_value))


def laplace_trend_times(ages: Sequence[float] | np.ndarray, *, end: float | None = None) -> TrendTest:
    """Laplace test on failure ages (continuous time).

    Parameters
    ----------
    ages : sequence of float
        Failure ages t_1 <= ... <= t_n measured from the start of observation.
    end : float, optional
        End of observation T (time-truncated). When omitted the test is failure-truncated:
        T = t_n and only the first n - 1 ages are used.

    Returns
    -------
    TrendTest
        U = (sum t_i / n - T/2) / (T sqrt(1 / (12 n))).

    References
    ----------
    D. R. Cox and P. A. W. Lewis, *The Statistical Analysis of Series of Events*, Methuen, 1966;
    H. Ascher and H. Feingold, *Repairable Systems Reliability*, Marcel Dekker, 1984.
    """
    t = np.asarray(ages, dtype=float)
    prev = np.concatenate([[0.0], t[:-1]]) if t.size else t
    bad = ~np.isfinite(t) | (t <= 0) | (t < prev)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise ValueError(BAD_AGES.format(index=i + 1, value=float(t[i])))
    if end is None:
        if t.size < 2:
            return TrendTest(u=0.0, p_value=1.0, reading="too few defects for a trend test")
        t_end, t = float(t[-1]), t[:-1]
    else:
        t_end = float(end)
        if t.size and t_end < t[-1]:
            raise ValueError(END_BEFORE_LAST_AGE.format(end=t_end, last=float(t[-1])))
        if t.size == 0:
            return TrendTest(u=0.0, p_value=1.0, reading="no defects: no trend can be tested")
    n = t.size
    u = (t.sum() / n - t_end / 2) / (t_end * np.sqrt(1 / (12 * n)))
    return _result(float(u))


def laplace_trend_counts(counts: Sequence[float] | np.ndarray) -> TrendTest:
    """Laplace test on counts n(1), ..., n(k) in k equal consecutive intervals.

    u(k) = [sum (i-1) n(i) - ((k-1)/2) sum n(i)] / sqrt(((k^2 - 1)/12) sum n(i)).

    References
    ----------
    K. Kanoun and J.-C. Laprie, "Trend analysis", ch. 10 in M. R. Lyu (ed.), *Handbook of
    Software Reliability Engineering*, McGraw-Hill, 1996.

    Examples
    --------
    >>> round(laplace_trend_counts([10, 8, 6, 4, 2]).u, 3)
    -2.582
    """
    n = np.asarray(counts, dtype=float)
    bad = ~np.isfinite(n) | (n < 0)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise ValueError(BAD_GROUPED.format(index=i + 1, value=float(n[i])))
    k = n.size
    total = float(n.sum())
    if total == 0:
        return TrendTest(u=0.0, p_value=1.0, reading="no defects: no trend can be tested")
    if k < 2:
        return TrendTest(u=0.0, p_value=1.0, reading="a single period of history: no trend can be tested")
    index = np.arange(k, dtype=float)
    u = (np.sum(index * n) - (k - 1) / 2 * total) / np.sqrt((k**2 - 1) / 12 * total)
    return _result(float(u))
