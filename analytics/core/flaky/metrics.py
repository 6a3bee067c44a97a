"""Sequence statistics behind the flaky-test evidence.

Every function here takes plain Python / numpy values and returns floats; none of them knows about
tests, builds or commits. Outcomes are coded ``1`` for a failed run and ``0`` for a passed run.

References
----------
.. [1] E. Kowalczyk, K. Nair, Z. Gao, L. Silberstein, T. Long, A. Memon, "Modeling and Ranking Flaky
   Tests at Apple", ICSE-SEIP 2020, doi:10.1145/3377813.3381370.
.. [2] NIST/SEMATECH e-Handbook of Statistical Methods, section 1.3.5.13, "Runs Test for Detecting
   Non-randomness".
.. [3] A. Gelman et al., *Bayesian Data Analysis*, 3rd ed., CRC Press, 2013, section 2.4 (beta-binomial
   model, posterior intervals).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from scipy import stats

__all__ = [
    "BAD_FAILURE_COUNT",
    "BAD_LAMBDA",
    "BAD_LEVEL",
    "BAD_OUTCOMES",
    "BAD_PRIOR",
    "failure_rate_interval",
    "flip_rate",
    "outcome_entropy",
    "runs_test",
    "weighted_flakiness",
]

BAD_OUTCOMES = "outcomes must be a one-dimensional sequence of 0 (passed) and 1 (failed)"
BAD_LAMBDA = "lam must lie in [0, 1)"
BAD_LEVEL = "level must lie strictly between 0 and 1"
BAD_PRIOR = "prior must be two positive numbers (alpha, beta)"
BAD_FAILURE_COUNT = "failures and runs must be integers with 0 <= failures <= runs"

Outcomes = Sequence[int] | np.ndarray
Values = Sequence[float] | np.ndarray

# Below this many observations the runs statistic gets the 0.5 continuity correction (SAS practice,
# followed by statsmodels' runstest_1samp).
_RUNS_CORRECTION_BELOW = 50


def _binary(outcomes: Outcomes) -> np.ndarray:
    arr = np.asarray(outcomes)
    if arr.ndim != 1:
        raise ValueError(BAD_OUTCOMES)
    if arr.size and not np.isin(arr, (0, 1)).all():
        raise ValueError(BAD_OUTCOMES)
    return arr.astype(np.int8)


def flip_rate(outcomes: Outcomes) -> float:
    """Share of consecutive runs whose outcome differs.

    Parameters
    ----------
    outcomes : sequence of {0, 1}
        Outcomes in run order, ``1`` = failed, ``0`` = passed.

    Returns
    -------
    float
        ``(number of changes between neighbouring runs) / (len(outcomes) - 1)``; ``0.0`` for fewer than
        two runs (nothing can flip).

    References
    ----------
    Kowalczyk et al. 2020 [1]_ (within-version flip rate).

    Examples
    --------
    >>> flip_rate([0, 0, 1, 1])
    0.3333333333333333
    """
    arr = _binary(outcomes)
    if arr.size < 2:
        return 0.0
    return float(np.count_nonzero(np.diff(arr)) / (arr.size - 1))


def outcome_entropy(outcomes: Outcomes) -> float:
    """Binary (Shannon, base 2) entropy of the failure fraction.

    ``H = -p log2 p - (1 - p) log2 (1 - p)`` with ``p`` the share of failed runs and ``0 log 0 = 0``;
    ``0.0`` for an empty sequence.

    References
    ----------
    Kowalczyk et al. 2020 [1]_ (within-version entropy).

    Examples
    --------
    >>> outcome_entropy([1, 0, 1, 0])
    1.0
    """
    arr = _binary(outcomes)
    if arr.size == 0:
        return 0.0
    p = float(arr.mean())
    if p in (0.0, 1.0):
        return 0.0
    return float(-p * np.log2(p) - (1.0 - p) * np.log2(1.0 - p))


def weighted_flakiness(per_version_values: Values, *, lam: float = 0.1) -> float:
    """Exponentially weighted average of per-version flakiness values, newest version weighted most.

    ``Z_1 = f(v_1)``, ``Z_n = f(v_n) + (1 - lam) Z_{n-1}``, result ``Z_n / sum_{i=0}^{n-1} (1 - lam)^i``.

    Parameters
    ----------
    per_version_values : sequence of float
        One value (flip rate or entropy) per code version, oldest first.
    lam : float, default 0.1
        Decay; ``lam = 0`` gives the unweighted mean.

    Returns
    -------
    float
        The weighted average, ``0.0`` for an empty sequence.

    References
    ----------
    Kowalczyk et al. 2020 [1]_ (flakiness across versions).

    Examples
    --------
    >>> round(weighted_flakiness([1 / 3, 0.0, 1.0, 1.0]), 4)
    0.6231
    """
    if not 0.0 <= lam < 1.0:
        raise ValueError(BAD_LAMBDA)
    values = np.asarray(per_version_values, dtype=float)
    if values.size == 0:
        return 0.0
    weights = (1.0 - lam) ** np.arange(values.size - 1, -1, -1)
    return float(np.dot(weights, values) / weights.sum())


def runs_test(outcomes: Outcomes) -> tuple[float, float]:
    """Wald–Wolfowitz runs test on a pass/fail sequence.

    The statistic compares the number of runs (maximal blocks of equal outcomes) with its expectation
    under exchangeability: ``E[R] = 2 n1 n2 / n + 1``, ``Var[R] = 2 n1 n2 (2 n1 n2 - n) / (n^2 (n - 1))``.
    ``z < 0`` means fewer runs than chance (failures clustered in blocks, as after a regression),
    ``z > 0`` means more (outcomes alternate).

    Parameters
    ----------
    outcomes : sequence of {0, 1}
        Outcomes in run order.

    Returns
    -------
    z, p : float
        Normal statistic and two-sided p-value. When the sequence holds both outcomes these equal
        ``statsmodels.sandbox.stats.runs.runstest_1samp(x, cutoff='mean', correction=True)``, including
        its continuity correction below 50 observations (subtract 0.5 from ``R - E[R]`` when that exceeds
        0.5, otherwise add 0.5; exactly 0.5 gives 0). When every outcome is the same (or there are fewer
        than two runs) nothing can be said about ordering and the function returns ``(0.0, 1.0)``;
        statsmodels instead reports a binomial tail for a single run, which would mark every stable test
        as "non-random". The same ``(0.0, 1.0)`` is returned for one pass and one failure, where the
        number of runs is forced and its variance is zero (statsmodels divides by zero there).

    References
    ----------
    NIST/SEMATECH e-Handbook [2]_.

    Examples
    --------
    >>> z, p = runs_test([0, 0, 0, 1, 1, 1, 0, 0])
    >>> round(z, 3), round(p, 3)
    (-1.03, 0.303)
    """
    arr = _binary(outcomes)
    n = arr.size
    n_fail = int(arr.sum())
    n_pass = n - n_fail
    if n_fail == 0 or n_pass == 0:
        return 0.0, 1.0
    n_runs = 1 + int(np.count_nonzero(np.diff(arr)))
    product = float(n_fail * n_pass)
    mean = 2.0 * product / n + 1.0
    var = 2.0 * product * (2.0 * product - n) / n**2 / (n - 1.0)
    if var <= 0.0:
        return 0.0, 1.0
    deviation = n_runs - mean
    if n >= _RUNS_CORRECTION_BELOW:
        numerator = deviation
    elif deviation > 0.5:
        numerator = deviation - 0.5
    elif deviation < 0.5:
        numerator = deviation + 0.5
    else:
        numerator = 0.0
    z = numerator / np.sqrt(var)
    return float(z), float(2.0 * stats.norm.sf(abs(z)))


def failure_rate_interval(
    failures: int, runs: int, *, level: float = 0.95, prior: tuple[float, float] = (1.0, 1.0)
) -> tuple[float, float, float]:
    """Posterior mean and equal-tailed credible interval of the failure probability.

    With a ``Beta(alpha, beta)`` prior and ``failures`` out of ``runs`` the posterior is
    ``Beta(alpha + failures, beta + runs - failures)``.

    Returns
    -------
    mean, low, high : float
        Posterior mean and the ``(1 - level) / 2`` and ``(1 + level) / 2`` posterior quantiles.

    References
    ----------
    Gelman et al. [3]_.

    Examples
    --------
    >>> [round(v, 4) for v in failure_rate_interval(0, 0)]
    [0.5, 0.025, 0.975]
    """
    if not 0.0 < level < 1.0:
        raise ValueError(BAD_LEVEL)
    if len(prior) != 2 or not all(np.isfinite(v) and v > 0 for v in prior):
        raise ValueError(BAD_PRIOR)
    if int(failures) != failures or int(runs) != runs or not 0 <= failures <= runs:
        raise ValueError(BAD_FAILURE_COUNT)
    a = prior[0] + failures
    b = prior[1] + runs - failures
    tail = (1.0 - level) / 2.0
    low, high = stats.beta.ppf([tail, 1.0 - tail], a, b)
    return float(a / (a + b)), float(low), float(high)
