"""Laplace trend test against published check values and hand computations."""

import math

import numpy as np
import pytest
from scipy import stats

from analytics.core.forecast import laplace_trend_counts, laplace_trend_times
from analytics.core.forecast.trend import BAD_AGES, BAD_GROUPED, END_BEFORE_LAST_AGE


def test_reliasoft_system1_time_truncated():
    # ReliaSoft RGA reference, Appendix B, "System 1": T = 2000 h, U = -2.6121 (published value;
    # the ages are from memory and reproduce it), REFERENCES.md section 3.
    ages = [1.2, 55.6, 72.7, 111.9, 121.9, 303.6, 326.9, 1568.4, 1913.5]
    result = laplace_trend_times(ages, end=2000.0)
    assert result.u == pytest.approx(-2.6121, abs=5e-5)
    assert result.reading == "reliability growth: defects are arriving less often (u = -2.6)"
    assert result.p_value == pytest.approx(2 * stats.norm.sf(2.6121), rel=1e-3)


def test_reliability_package_rocof_example_failure_truncated():
    # Python package `reliability`, Repairable_systems.ROCOF documentation: U = 2.409, failure-truncated
    # form (REFERENCES.md section 3).
    gaps = [104, 131, 1597, 59, 4, 503, 157, 6, 118, 173, 114, 62, 101, 216, 106, 140, 1, 102, 3, 393]
    gaps += [96, 232, 89, 61, 37, 293, 7, 165, 87, 99]
    result = laplace_trend_times(np.cumsum(gaps))
    assert result.u == pytest.approx(2.409, abs=5e-4)
    assert result.reading.startswith("reliability decay")


def test_continuous_form_hand_example():
    # Cox & Lewis (1966): U = (sum t_i / n - T/2) / (T sqrt(1 / (12 n))). Ages 2 and 4, T = 10:
    # mean 3, T/2 = 5, denominator 10 * sqrt(1/24).
    expected = (3 - 5) / (10 * math.sqrt(1 / 24))
    assert laplace_trend_times([2.0, 4.0], end=10.0).u == pytest.approx(expected, rel=1e-12)
    # Failure-truncated: T = t_n = 8, the first n - 1 = 2 ages: (3 - 4) / (8 sqrt(1/24)).
    assert laplace_trend_times([2.0, 4.0, 8.0]).u == pytest.approx(-1 / (8 * math.sqrt(1 / 24)), rel=1e-12)


@pytest.mark.parametrize(
    ("counts", "u"),
    [
        ([5] * 10, 0.0),  # Kanoun & Laprie (1996), sanity value in REFERENCES.md section 3 (from memory)
        ([10, 8, 6, 4, 2], -2.582),  # same source
    ],
)
def test_grouped_sanity_values(counts, u):
    assert laplace_trend_counts(counts).u == pytest.approx(u, abs=5e-4)


def test_grouped_hand_example():
    # Kanoun & Laprie: u(k) = [sum (i-1) n(i) - (k-1)/2 sum n(i)] / sqrt((k^2 - 1)/12 sum n(i)).
    # Counts [1, 2, 3]: sum (i-1) n(i) = 0 + 2 + 6 = 8; (k-1)/2 * 6 = 6; sqrt(8/12 * 6) = 2 -> u = 1.
    result = laplace_trend_counts([1, 2, 3])
    assert result.u == pytest.approx(1.0, rel=1e-12)
    assert result.reading == "no significant trend (u = 1.0)"


def test_grouped_equals_continuous_limit_direction():
    # Common practice: decreasing arrivals read as growth, increasing as decay.
    assert laplace_trend_counts([1, 2, 4, 8, 16]).reading.startswith("reliability decay")
    assert laplace_trend_counts([16, 8, 4, 2, 1]).reading.startswith("reliability growth")


def test_degenerate_inputs_are_explained():
    assert laplace_trend_counts([0, 0, 0]).reading == "no defects: no trend can be tested"
    single = laplace_trend_counts([7])
    assert (single.u, single.p_value) == (0.0, 1.0)
    assert "single period" in single.reading
    assert laplace_trend_times([5.0]).reading == "too few defects for a trend test"


def test_bad_input_messages():
    with pytest.raises(ValueError) as err:
        laplace_trend_counts([1, -1])
    assert str(err.value) == BAD_GROUPED.format(index=2, value=-1.0)
    with pytest.raises(ValueError) as err:
        laplace_trend_times([3.0, 1.0])
    assert str(err.value) == BAD_AGES.format(index=2, value=1.0)
    with pytest.raises(ValueError) as err:
        laplace_trend_times([3.0, 5.0], end=4.0)
    assert str(err.value) == END_BEFORE_LAST_AGE.format(end=4.0, last=5.0)
