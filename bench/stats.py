"""Pure helpers of the benchmark harness: summaries of repeated timings, ratios against targets.

No Django, no I/O: the harness measures, these functions only compute (and tests/bench checks them).
"""

from __future__ import annotations

import math
import statistics
from collections.abc import Sequence
from dataclasses import asdict, dataclass

ERR_EMPTY = "no samples to summarise"
ERR_PAIRS = "ratio needs as many numerator as denominator samples (got {n} and {d})"
ERR_ZERO = "the denominator sample {value!r} is not positive; a ratio of timings needs a positive denominator"
ERR_OP = "target operator must be '<=' or '>=', got {op!r}"


@dataclass(frozen=True)
class Summary:
    """Median, min, max and p95 of a set of samples (p95: nearest-rank, see :func:`percentile`)."""

    n: int
    median: float
    min: float
    max: float
    p95: float

    def as_dict(self) -> dict:
        return asdict(self)


def percentile(samples: Sequence[float], q: float) -> float:
    """Nearest-rank percentile: the smallest sample with at least ``q`` % of the samples at or below it.

    Nearest-rank is the definition in NIST/SEMATECH e-Handbook §7.2.6.2 (method "R1" of Hyndman and Fan,
    1996); it always returns an observed value, which is what a latency p95 should be.
    """
    if not samples:
        raise ValueError(ERR_EMPTY)
    if not 0 < q <= 100:
        raise ValueError(f"q must be in (0, 100], got {q!r}")
    ordered = sorted(samples)
    rank = math.ceil(q / 100 * len(ordered))
    return float(ordered[max(rank, 1) - 1])


def summarise(samples: Sequence[float]) -> Summary:
    if not samples:
        raise ValueError(ERR_EMPTY)
    values = [float(v) for v in samples]
    return Summary(
        n=len(values),
        median=float(statistics.median(values)),
        min=min(values),
        max=max(values),
        p95=percentile(values, 95),
    )


def paired_ratios(numerator: Sequence[float], denominator: Sequence[float]) -> list[float]:
    """Per-repeat ratios numerator[i] / denominator[i] (both measured in repeat i of the same run)."""
    if len(numerator) != len(denominator) or not numerator:
        raise ValueError(ERR_PAIRS.format(n=len(numerator), d=len(denominator)))
    out = []
    for num, den in zip(numerator, denominator):
        if not den > 0:
            raise ValueError(ERR_ZERO.format(value=den))
        out.append(float(num) / float(den))
    return out


@dataclass(frozen=True)
class TargetCheck:
    """One target: ``ratio op target`` where ratio is the median of the per-repeat ratios."""

    key: str
    title: str
    numerator: str
    denominator: str
    op: str
    target: float
    ratio: Summary
    met: bool
    note: str = ""

    def as_dict(self) -> dict:
        data = asdict(self)
        data["ratio"] = self.ratio.as_dict()
        return data


def target_check(
    *,
    key: str,
    title: str,
    numerator: str,
    denominator: str,
    ratios: Sequence[float],
    op: str,
    target: float,
    note: str = "",
) -> TargetCheck:
    """Judge the median of ``ratios`` against ``target`` (``<=``: at most, ``>=``: at least)."""
    if op not in ("<=", ">="):
        raise ValueError(ERR_OP.format(op=op))
    summary = summarise(ratios)
    met = summary.median <= target if op == "<=" else summary.median >= target
    return TargetCheck(key, title, numerator, denominator, op, float(target), summary, met, note)


def rows_per_second(rows: int, seconds: Sequence[float]) -> Summary:
    """Throughput of each repeat (rows / seconds), summarised."""
    return summarise([rows / s for s in seconds if s > 0] or [0.0])


def fmt_seconds(value: float) -> str:
    if value >= 100:
        return f"{value:.0f} s"
    if value >= 1:
        return f"{value:.2f} s"
    return f"{value * 1000:.1f} ms"


def fmt_summary(summary: Summary | dict, *, unit: str = "s") -> str:
    """``median (min–max)`` in seconds/milliseconds, or plain numbers with another unit."""
    s = summary if isinstance(summary, dict) else summary.as_dict()
    if unit == "s":
        return f"{fmt_seconds(s['median'])} ({fmt_seconds(s['min'])}–{fmt_seconds(s['max'])})"
    return f"{_num(s['median'])} {unit} ({_num(s['min'])}–{_num(s['max'])})"


def _num(value: float) -> str:
    if abs(value) >= 1000:
        return f"{value:,.0f}"
    if abs(value) >= 10:
        return f"{value:.1f}"
    return f"{value:.3g}"
