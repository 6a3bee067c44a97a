"""Software reliability growth models: Goel–Okumoto and Yamada delayed S-shaped NHPP.

Both are non-homogeneous Poisson processes with mean-value function m(t) = a F(t; b):

- Goel–Okumoto (exponential): F(t) = 1 - exp(-b t);
- Yamada delayed S-shaped: F(t) = 1 - (1 + b t) exp(-b t).

``a`` is the expected total number of defects that will ever be found, ``b`` the detection
rate per period. Fitting is by maximum likelihood, either on grouped counts (counts per
period, periods of unit length, time 0 at the start of the first period) or on failure
times. ``a`` is profiled out (a = N / F(T; b) at the optimum), leaving a one-dimensional
search over log b: a coarse grid then a bounded Brent refinement (scipy.optimize).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import Any

import numpy as np
import pandas as pd
from scipy import optimize, stats

from analytics.core.forecast.predictive import CountForecastResults, check_counts, check_level

SRGM_NO_DEFECTS = "a reliability growth model needs at least one defect; the history holds none"
BAD_TIMES = "failure times must be finite, positive and non-decreasing; time #{index} is {value!r}"
END_BEFORE_LAST = "the observation end ({end}) is before the last failure time ({last})"

_GRID = 81
_LOG_B_SPAN = (1e-4, 1e3)  # search b in [1e-4 / T, 1e3 / T]
_TINY = 1e-300


def _maximise(fun: Callable[[float], float], lo: float, hi: float) -> tuple[float, float]:
    """Maximise a function of one variable on [lo, hi]: grid, then bounded Brent near the best point."""
    xs = np.linspace(lo, hi, _GRID)
    vals = np.array([fun(x) for x in xs])
    vals = np.where(np.isfinite(vals), vals, -np.inf)
    i = int(np.argmax(vals))
    left, right = xs[max(i - 1, 0)], xs[min(i + 1, _GRID - 1)]
    res = optimize.minimize_scalar(
        lambda x: -fun(x), bounds=(left, right), method="bounded", options={"xatol": 1e-11}
    )
    if np.isfinite(res.fun) and -res.fun >= vals[i]:
        return float(res.x), float(-res.fun)
    return float(xs[i]), float(vals[i])


class _NHPPModel:
    """Shared fitting code; subclasses define the shape F(t; b) and its density."""

    name = "nhpp"

    @staticmethod
    def cdf(t: np.ndarray, b: float) -> np.ndarray:  # pragma: no cover - abstract
        raise NotImplementedError

    @staticmethod
    def survival(t: np.ndarray, b: float) -> np.ndarray:  # pragma: no cover - abstract
        raise NotImplementedError

    @staticmethod
    def log_density(t: np.ndarray, b: float) -> np.ndarray:  # pragma: no cover - abstract
        raise NotImplementedError

    def increments(self, t0: np.ndarray, t1: np.ndarray, b: float) -> np.ndarray:
        """F(t1) - F(t0), computed from whichever side keeps precision."""
        f0, f1 = self.cdf(t0, b), self.cdf(t1, b)
        s0, s1 = self.survival(t0, b), self.survival(t1, b)
        return np.where(f0 < 0.5, f1 - f0, s0 - s1)

    def fit(self, y: pd.Series) -> NHPPResults:
        """Fit on grouped counts: ``y[i]`` defects found in period (i, i+1].

        Parameters
        ----------
        y : Series
            Counts per period (index kept for the forecast index).

        Returns
        -------
        NHPPResults
        """
        y = check_counts(y)
        counts = y.to_numpy()
        total = float(counts.sum())
        if total <= 0:
            raise ValueError(SRGM_NO_DEFECTS)
        t_end = float(len(counts))
        edges = np.arange(len(counts) + 1, dtype=float)
        used = counts > 0

        def core(b: float) -> float:
            inc = self.increments(edges[:-1][used], edges[1:][used], b)
            return float(np.sum(counts[used] * np.log(np.maximum(inc, _TINY))))

        return self._finish(core, total=total, t_end=t_end, y=y, data="grouped")

    def fit_times(self, times: Sequence[float] | np.ndarray, *, end: float | None = None) -> NHPPResults:
        """Fit on failure times (ages since the start of observation).

        Parameters
        ----------
        times : sequence of float
            Cumulative failure times, positive and non-decreasing.
        end : float, optional
            End of observation; default the last failure time (failure-truncated).

        Returns
        -------
        NHPPResults
        """
        ages = np.asarray(times, dtype=float)
        if ages.size == 0:
            raise ValueError(SRGM_NO_DEFECTS)
        prev = np.concatenate([[0.0], ages[:-1]])
        bad = ~np.isfinite(ages) | (ages <= 0) | (ages < prev)
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise ValueError(BAD_TIMES.format(index=i + 1, value=float(ages[i])))
        t_end = float(ages[-1] if end is None else end)
        if t_end < ages[-1]:
            raise ValueError(END_BEFORE_LAST.format(end=t_end, last=float(ages[-1])))

        def core(b: float) -> float:
            return float(np.sum(self.log_density(ages, b)))

        y = pd.Series(ages, name="failure_time")
        return self._finish(core, total=float(ages.size), t_end=t_end, y=y, data="times")

    def _finish(
        self, core: Callable[[float], float], *, total: float, t_end: float, y: pd.Series, data: str
    ) -> NHPPResults:
        lo, hi = np.log(_LOG_B_SPAN[0] / t_end), np.log(_LOG_B_SPAN[1] / t_end)

        def profile(log_b: float) -> float:
            b = float(np.exp(log_b))
            f_end = float(self.cdf(np.array([t_end]), b)[0])
            return core(b) + total * np.log(total / max(f_end, _TINY)) - total

        log_b, loglik = _maximise(profile, lo, hi)
        b = float(np.exp(log_b))
        a = total / max(float(self.cdf(np.array([t_end]), b)[0]), _TINY)

        def loglik_full(theta: np.ndarray) -> float:
            aa, bb = float(np.exp(theta[0])), float(np.exp(theta[1]))
            f_end = float(self.cdf(np.array([t_end]), bb)[0])
            return core(bb) + total * np.log(aa) - aa * f_end

        cov = _inverse_information(loglik_full, np.array([np.log(a), log_b]))
        at_bound = min(log_b - lo, hi - log_b) < 1e-3
        return NHPPResults(
            model=self,
            y=y,
            params=pd.Series({"a": a, "b": b}),
            cov_log=cov,
            t_end=t_end,
            total=total,
            loglik=loglik,
            core=core,
            data=data,
            at_bound=bool(at_bound),
        )


def _inverse_information(fun: Callable[[np.ndarray], float], theta: np.ndarray) -> np.ndarray:
    """Inverse of the observed information (minus the numerical Hessian), eigenvalues floored."""
    step = 1e-4
    k = theta.size
    hess = np.zeros((k, k))
    for i in range(k):
        for j in range(k):
            ei, ej = np.eye(k)[i] * step, np.eye(k)[j] * step
            hess[i, j] = (
                fun(theta + ei + ej) - fun(theta + ei - ej) - fun(theta - ei + ej) + fun(theta - ei - ej)
            ) / (4 * step**2)
    info = -(hess + hess.T) / 2
    if not np.isfinite(info).all():
        return np.zeros((k, k))
    w, v = np.linalg.eigh(info)
    w = np.maximum(w, 1e-8 * max(float(np.abs(w).max()), 1e-12))
    return (v / w) @ v.T


class GoelOkumoto(_NHPPModel):
    """Goel–Okumoto exponential NHPP, m(t) = a (1 - exp(-b t)).

    Examples
    --------
    >>> import numpy as np
    >>> gaps = [9, 12, 11, 4, 7, 2, 5, 8, 5, 7, 1, 6, 1, 9, 4, 1, 3, 3, 6, 1, 11, 33, 7, 91, 2, 1]
    >>> res = GoelOkumoto().fit_times(np.cumsum(gaps))
    >>> round(float(res.params["a"]), 2), round(float(res.params["b"]), 5)
    (33.99, 0.00579)

    References
    ----------
    A. L. Goel and K. Okumoto, "Time-dependent error-detection rate model for software
    reliability and other performance measures", IEEE Trans. Reliability R-28(3), 1979.
    """

    name = "goel_okumoto"

    @staticmethod
    def cdf(t: np.ndarray, b: float) -> np.ndarray:
        return -np.expm1(-b * np.asarray(t, dtype=float))

    @staticmethod
    def survival(t: np.ndarray, b: float) -> np.ndarray:
        return np.exp(-b * np.asarray(t, dtype=float))

    @staticmethod
    def log_density(t: np.ndarray, b: float) -> np.ndarray:
        return np.log(b) - b * np.asarray(t, dtype=float)


class DelayedSShaped(_NHPPModel):
    """Yamada delayed S-shaped NHPP, m(t) = a (1 - (1 + b t) exp(-b t)).

    References
    ----------
    S. Yamada, M. Ohba and S. Osaki, "S-shaped reliability growth modeling for software
    error detection", IEEE Trans. Reliability R-32(5), 1983.
    """

    name = "delayed_s_shaped"

    @staticmethod
    def cdf(t: np.ndarray, b: float) -> np.ndarray:
        x = b * np.asarray(t, dtype=float)
        return -np.expm1(-x) - x * np.exp(-x)

    @staticmethod
    def survival(t: np.ndarray, b: float) -> np.ndarray:
        x = b * np.asarray(t, dtype=float)
        return (1 + x) * np.exp(-x)

    @staticmethod
    def log_density(t: np.ndarray, b: float) -> np.ndarray:
        t = np.asarray(t, dtype=float)
        return 2 * np.log(b) + np.log(np.maximum(t, _TINY)) - b * t


class NHPPResults(CountForecastResults):
    """A fitted reliability growth model.

    Attributes
    ----------
    params : Series
        ``a`` (expected defects ever found) and ``b`` (detection rate per period / time unit).
    bse : Series
        Asymptotic standard errors of ``a`` and ``b`` (delta method from the observed
        information of (log a, log b)).
    t_end : float
        End of observation ("now").
    loglik : float
        Maximised log-likelihood (without the constant - sum log n_i!).
    at_bound : bool
        True when b hit its search bound: the data show no saturation (b -> 0) or every
        defect in the first period (b -> inf); the remaining-defect estimate is then not identified.
    """

    def __init__(
        self,
        *,
        model: _NHPPModel,
        y: pd.Series,
        params: pd.Series,
        cov_log: np.ndarray,
        t_end: float,
        total: float,
        loglik: float,
        core: Callable[[float], float],
        data: str,
        at_bound: bool,
    ) -> None:
        super().__init__(y=y, params=params)
        self.model = model
        self.model_name = model.name
        self.cov_log = cov_log
        self.t_end = t_end
        self.total = total
        self.loglik = loglik
        self._core = core
        self.data = data
        self.at_bound = at_bound

    @property
    def bse(self) -> pd.Series:
        se_log = np.sqrt(np.maximum(np.diag(self.cov_log), 0.0))
        return pd.Series({"a": self.params["a"] * se_log[0], "b": self.params["b"] * se_log[1]})

    def mean_value(self, t: float | np.ndarray) -> np.ndarray:
        """Expected cumulative number of defects found by time ``t``."""
        return self.params["a"] * self.model.cdf(np.asarray(t, dtype=float), self.params["b"])

    def _future(self, h: int) -> pd.Index:
        if self.data == "times":
            return pd.Index(self.t_end + np.arange(1, h + 1, dtype=float), name="period_end")
        return super()._future(h)

    def _moments(self, h: int) -> tuple[np.ndarray, np.ndarray]:
        a, b = float(self.params["a"]), float(self.params["b"])
        t0 = self.t_end + np.arange(h, dtype=float)
        t1 = t0 + 1
        mean = a * self.model.increments(t0, t1, b)
        # Delta method on (log a, log b): d mean / d log a = mean; d mean / d log b numerically.
        eps = 1e-5
        d_log_b = (
            a
            * (
                self.model.increments(t0, t1, b * np.exp(eps))
                - self.model.increments(t0, t1, b * np.exp(-eps))
            )
        ) / (2 * eps)
        grad = np.column_stack([mean, d_log_b])
        var_mean = np.einsum("ij,jk,ik->i", grad, self.cov_log, grad)
        # Law of total variance: Poisson count noise plus the uncertainty of the fitted mean.
        return mean, mean + np.maximum(var_mean, 0.0)

    def residual(self, *, level: float = 0.95) -> dict[str, Any]:
        """Expected number of defects not yet found, a - m(t_end), with a profile-likelihood interval.

        The interval holds every value R whose profile log-likelihood is within
        chi2_1(level) / 2 of the maximum (Wilks). The profile over R reparametrises
        a = R / (1 - F(t_end; b)) and maximises over b.

        Returns
        -------
        dict
            ``expected``, ``lower``, ``upper`` (``upper`` is None when the likelihood does not
            bound it), ``level``, ``model``, ``identified`` (False when b is at its bound or the
            upper limit is unbounded).
        """
        level = check_level(level)
        a, b = float(self.params["a"]), float(self.params["b"])
        t_end, total = self.t_end, self.total
        surv_end = float(self.model.survival(np.array([t_end]), b)[0])
        r_hat = a * surv_end
        lo, hi = np.log(_LOG_B_SPAN[0] / t_end), np.log(_LOG_B_SPAN[1] / t_end)
        threshold = stats.chi2.ppf(level, df=1) / 2

        def profile_r(r: float) -> float:
            def inner(log_b: float) -> float:
                bb = float(np.exp(log_b))
                s = max(float(self.model.survival(np.array([t_end]), bb)[0]), _TINY)
                f = float(self.model.cdf(np.array([t_end]), bb)[0])
                return self._core(bb) + total * np.log(r) - total * np.log(s) - r * f / s

            return _maximise(inner, lo, hi)[1]

        def gap(r: float) -> float:
            return self.loglik - profile_r(r) - threshold

        result: dict[str, Any] = {
            "expected": r_hat,
            "lower": 0.0,
            "upper": None,
            "level": level,
            "model": self.model_name,
            "identified": False,
        }
        if self.at_bound or not np.isfinite(r_hat) or gap(r_hat) > 0:
            # gap(r_hat) > 0 would mean the profile missed the maximum: do not trust an interval then.
            return result
        try:
            if r_hat > 1e-9:
                r_small = r_hat * 1e-6
                if gap(r_small) > 0:
                    result["lower"] = float(optimize.brentq(gap, r_small, r_hat, xtol=1e-6))
            cap = 1e3 * (total + 1)
            inside, outside = r_hat, max(2 * r_hat, r_hat + 1.0)
            while outside < cap:
                if gap(outside) > 0:
                    result["upper"] = float(optimize.brentq(gap, inside, outside, xtol=1e-6))
                    result["identified"] = True
                    break
                inside, outside = outside, outside * 2
        except ValueError:
            result["lower"], result["upper"], result["identified"] = 0.0, None, False
        return result
        if r_hat > 1e-9:
            r_small = r_hat * 1e-6
            if gap(r_small) > 0:
                result["lower"] = float(optimize.brentq(gap, r_small, r_hat, xtol=1e-6))
        cap = 1e3 * (total + 1)
        r_up = max(r_hat, 1.0)
        while r_up < cap:
            r_next = r_up * 2
            if gap(r_next) > 0:
                result["upper"] = float(optimize.brentq(gap, r_up, r_next, xtol=1e-6))
                result["identified"] = True
                break
            r_up = r_next
        return result
