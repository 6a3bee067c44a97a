"""Per-test evidence table built from a frame of test runs.

One row per test; each row depends only on that test's own runs, so a caller may score any subset of
tests with only their runs and get the same numbers.

References
----------
.. [1] E. Kowalczyk, K. Nair, Z. Gao, L. Silberstein, T. Long, A. Memon, "Modeling and Ranking Flaky
   Tests at Apple", ICSE-SEIP 2020, doi:10.1145/3377813.3381370.
.. [2] NIST/SEMATECH e-Handbook of Statistical Methods, section 1.3.5.13.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats

from .metrics import _RUNS_CORRECTION_BELOW

__all__ = [
    "BAD_CONFIG",
    "BAD_NOW",
    "BAD_OUTCOME_VALUE",
    "DEFAULT_EVIDENCE_CONFIG",
    "EVIDENCE_COLUMNS",
    "MISSING_COLUMNS",
    "OUTCOMES",
    "RUN_COLUMNS",
    "EvidenceConfig",
    "evidence_frame",
    "normalise_message",
]

OUTCOMES = ("passed", "failed", "error", "skipped")
FAILED_OUTCOMES = ("failed", "error")
RUN_COLUMNS = (
    "test_id",
    "build_id",
    "commit",
    "branch",
    "started_at",
    "attempt",
    "outcome",
    "duration",
    "failure_type",
    "message",
)
MISSING_COLUMNS = "runs frame is missing column(s): "
BAD_OUTCOME_VALUE = "runs frame field 'outcome' holds a value outside passed/failed/error/skipped: "
BAD_NOW = "now must be a pandas Timestamp"
BAD_CONFIG = "EvidenceConfig field out of range: "

EVIDENCE_COLUMNS = (
    "runs",
    "failures",
    "passes",
    "skipped",
    "builds",
    "versions",
    "sufficient",
    "first_failure_at",
    "last_failure_at",
    "first_failure_commit",
    "streak_start_commit",
    "same_commit_contradictions",
    "contradiction_commits",
    "pass_on_rerun",
    "rerun_pass_builds",
    "flip_rate",
    "entropy",
    "history_flip_rate",
    "history_entropy",
    "runs_z",
    "runs_p",
    "failure_rate",
    "failure_rate_low",
    "failure_rate_high",
    "message_diversity",
    "duration_cv",
    "timeout_failures",
    "longest_failure_streak",
    "failing_now",
    "failure_episodes",
    "short_episodes",
    "long_episodes",
    "longest_episode",
    "scattered_episodes",
)

# Evidence of a test without any counted run (see metrics: flip rate, entropy and runs test of an empty
# sequence are 0, 0 and (0, 1)).
_EMPTY_HISTORY: dict[str, object] = {
    "first_failure_at": np.datetime64("NaT"),
    "last_failure_at": np.datetime64("NaT"),
    "first_failure_commit": "",
    "streak_start_commit": "",
    "runs_p": 1.0,
    "duration_cv": np.nan,
    "sufficient": False,
    "failing_now": False,
}
_TIMEOUT = re.compile(r"time[d\s_-]*out", re.IGNORECASE)
_HEX = re.compile(r"0x[0-9a-f]+")
_DIGITS = re.compile(r"\d+")
_SPACE = re.compile(r"\s+")


@dataclass(frozen=True)
class EvidenceConfig:
    """Parameters of :func:`evidence_frame`.

    Attributes
    ----------
    window_days : int, default 90
        Only runs whose build started in ``(now - window_days, now]`` count.
    max_runs : int, default 300
        Of those, only the latest ``max_runs`` non-skipped runs per test count.
    min_runs : int, default 8
        Tests with fewer non-skipped runs get the verdict ``'insufficient data'``.
    failing_now_runs : int, default 3
        ``failing_now`` is true when the latest this-many runs all failed.
    short_episode_max_versions : int, default 2
        A failure episode (consecutive code versions on one branch with at least one failed run) spanning
        at most this many versions is "short", as an intermittent failure is; longer ones look like a
        change in the code that was later undone (or not yet).
    lam : float, default 0.1
        Decay of the exponentially weighted average across versions (Kowalczyk et al. 2020 [1]_).
    level : float, default 0.95
        Credible level of the failure-rate interval.
    prior : tuple of float, default (1.0, 1.0)
        Beta prior ``(alpha, beta)`` on the failure probability (uniform).
    """

    window_days: int = 90
    max_runs: int = 300
    min_runs: int = 8
    failing_now_runs: int = 3
    short_episode_max_versions: int = 2
    lam: float = 0.1
    level: float = 0.95
    prior: tuple[float, float] = (1.0, 1.0)

    def validate(self) -> None:
        """Raise ``ValueError`` naming the first field that is out of range."""
        checks = {
            "window_days": self.window_days > 0,
            "max_runs": self.max_runs >= 1,
            "min_runs": self.min_runs >= 1,
            "failing_now_runs": self.failing_now_runs >= 1,
            "short_episode_max_versions": self.short_episode_max_versions >= 1,
            "lam": 0.0 <= self.lam < 1.0,
            "level": 0.0 < self.level < 1.0,
            "prior": len(self.prior) == 2 and all(v > 0 for v in self.prior),
        }
        for name, ok in checks.items():
            if not ok:
                raise ValueError(f"{BAD_CONFIG}{name}={getattr(self, name)!r}")


DEFAULT_EVIDENCE_CONFIG = EvidenceConfig()


def normalise_message(message: object) -> str:
    """Failure message with case, hexadecimal addresses, digits and repeated spaces removed.

    Examples
    --------
    >>> normalise_message("Timed out after 30s at 0x7f3a  (berth 12)")
    'timed out after s at (berth )'
    """
    if not isinstance(message, str):
        return ""
    text = _HEX.sub("", message.lower())
    text = _DIGITS.sub("", text)
    return _SPACE.sub(" ", text).strip()


def _validated(runs: pd.DataFrame, now: pd.Timestamp) -> tuple[dict[str, np.ndarray], pd.Timestamp]:
    if not isinstance(runs, pd.DataFrame):
        raise TypeError("runs must be a pandas DataFrame")
    missing = [c for c in RUN_COLUMNS if c not in runs.columns]
    if missing:
        raise ValueError(MISSING_COLUMNS + ", ".join(missing))
    if not isinstance(now, pd.Timestamp) or pd.isna(now):
        raise ValueError(BAD_NOW)
    now = now.tz_localize("UTC") if now.tzinfo is None else now.tz_convert("UTC")
    outcome = runs["outcome"]
    bad = ~outcome.isin(OUTCOMES)
    if bad.any():
        first = runs.index[bad.to_numpy()][0]
        values = sorted({repr(v) for v in outcome[bad]})[:5]
        raise ValueError(f"{BAD_OUTCOME_VALUE}{', '.join(values)} (first at row {first!r})")
    columns = {
        "test_id": runs["test_id"].to_numpy(),
        "build_id": runs["build_id"].to_numpy(),
        "commit": runs["commit"].fillna("").astype(str).to_numpy(dtype=object),
        "branch": runs["branch"].fillna("").astype(str).to_numpy(dtype=object),
        "started_at": pd.to_datetime(runs["started_at"], utc=True).dt.tz_localize(None).to_numpy(),
        "attempt": runs["attempt"].to_numpy(),
        "outcome": outcome.to_numpy(dtype=object),
        "duration": pd.to_numeric(runs["duration"], errors="coerce").to_numpy(dtype=float),
        "failure_type": runs["failure_type"].fillna("").astype(str).to_numpy(dtype=object),
        "message": runs["message"].fillna("").astype(str).to_numpy(dtype=object),
    }
    return columns, now


def _pair_codes(outer: np.ndarray, inner: np.ndarray) -> np.ndarray:
    """Codes of the distinct ``(outer, inner)`` pairs of two non-negative integer arrays, numbered in
    order of first appearance (so, for rows sorted by ``outer``, each outer value gets a contiguous range
    of codes, ordered by first appearance within it)."""
    if outer.size == 0:
        return np.zeros(0, dtype=np.int64)
    width = np.int64(inner.max()) + 1
    codes, _ = pd.factorize(outer.astype(np.int64) * width + inner.astype(np.int64))
    return codes.astype(np.int64)


def _owner(codes: np.ndarray, values: np.ndarray, size: int) -> np.ndarray:
    """``values`` of one row of each code (all rows of a code share the value)."""
    out = np.zeros(size, dtype=values.dtype)
    out[codes] = values
    return out


def _first_row(codes: np.ndarray, size: int) -> np.ndarray:
    """Index of the first row of each code."""
    first = np.zeros(size, dtype=np.int64)
    rows = np.arange(codes.size, dtype=np.int64)
    first[codes[::-1]] = rows[::-1]  # the last write, i.e. the smallest row index, wins
    return first


def _blocks(flag: np.ndarray, group: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Start and end (inclusive) positions of the maximal blocks of ``True`` in ``flag`` that do not
    cross a change of ``group`` (both arrays in sequence order)."""
    if flag.size == 0:
        return np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64)
    new_group = np.concatenate(([True], group[1:] != group[:-1]))
    last_of_group = np.concatenate((new_group[1:], [True]))
    prev = np.concatenate(([False], flag[:-1]))
    nxt = np.concatenate((flag[1:], [False]))
    starts = np.flatnonzero(flag & (~prev | new_group))
    ends = np.flatnonzero(flag & (~nxt | last_of_group))
    return starts, ends


def _tuples(owner: np.ndarray, items: list[object], size: int) -> list[tuple[object, ...]]:
    """One tuple per owner in ``range(size)``, holding its ``items`` in order (``owner`` sorted)."""
    out: list[tuple[object, ...]] = [()] * size
    if not items:
        return out
    bounds = np.flatnonzero(owner[1:] != owner[:-1]) + 1
    for s, e in zip(np.concatenate(([0], bounds)), np.concatenate((bounds, [owner.size])), strict=True):
        out[int(owner[s])] = tuple(items[s:e])
    return out


def _per_test(columns: dict[str, np.ndarray], config: EvidenceConfig) -> tuple[np.ndarray, dict[str, object]]:
    """Evidence columns (without ``skipped`` and the failure-rate interval) of every test with runs.

    ``columns`` hold the counted runs, sorted by test and then in run order. Returns the test ids and one
    array (or list) per column, in the same order. Everything is computed on whole columns with per-test
    group codes, so the cost per run is a few vectorised operations.
    """
    tid = columns["test_id"]
    n_rows = tid.size
    if n_rows:
        boundaries = np.flatnonzero(tid[1:] != tid[:-1]) + 1
        starts = np.concatenate(([0], boundaries)).astype(np.int64)
    else:
        starts = np.zeros(0, dtype=np.int64)
    n_tests = starts.size
    ends = np.concatenate((starts[1:], [n_rows])).astype(np.int64)
    n = ends - starts
    group = np.repeat(np.arange(n_tests, dtype=np.int64), n)
    outcome = columns["outcome"]
    y = (pd.Series(outcome, dtype=object).isin(FAILED_OUTCOMES)).to_numpy().astype(np.int8)
    failures = np.bincount(group, weights=y, minlength=n_tests).astype(np.int64)
    out: dict[str, object] = {
        "runs": n,
        "failures": failures,
        "passes": n - failures,
        "sufficient": n >= config.min_runs,
    }

    # Versions: a run without a commit is its own build's version.
    commit, build_id = columns["commit"], columns["build_id"]
    keys = commit.astype(object).copy()
    no_commit = keys == ""
    if no_commit.any():
        keys[no_commit] = ("build " + pd.Series(build_id[no_commit]).astype(str)).to_numpy(dtype=object)
    key_codes, _ = pd.factorize(keys)
    version = _pair_codes(group, key_codes)  # per test, in order of first run
    n_all_versions = int(version.max()) + 1 if n_rows else 0
    version_test = _owner(version, group, n_all_versions)
    versions = np.bincount(version_test, minlength=n_tests)
    build = _pair_codes(group, pd.factorize(build_id)[0])
    n_all_builds = int(build.max()) + 1 if n_rows else 0
    build_test = _owner(build, group, n_all_builds)
    out["builds"] = np.bincount(build_test, minlength=n_tests)
    out["versions"] = versions

    # Within-version flip rate and entropy, then the across-version weighted average [1].
    counts = np.bincount(version, minlength=n_all_versions)
    fails_v = np.bincount(version, weights=y, minlength=n_all_versions)
    order = np.argsort(version, kind="stable")
    ys, cs = y[order], version[order]
    changed = (np.diff(ys) != 0) & (np.diff(cs) == 0)
    flips_v = np.bincount(cs[1:][changed], minlength=n_all_versions)
    flip_v = np.divide(flips_v, counts - 1, out=np.zeros(n_all_versions), where=counts > 1)
    p_v = fails_v / np.maximum(counts, 1)
    with np.errstate(divide="ignore", invalid="ignore"):
        ent_v = -(p_v * np.log2(p_v) + (1 - p_v) * np.log2(1 - p_v))
    ent_v = np.nan_to_num(ent_v, nan=0.0)
    # weighted_flakiness per test: weight (1 - lam) ** (versions after this one).
    first_version = np.concatenate(([0], np.cumsum(versions)[:-1])).astype(np.int64)
    position = np.arange(n_all_versions, dtype=np.int64) - first_version[version_test]
    weights = (1.0 - config.lam) ** (versions[version_test] - 1 - position)
    weight_sum = np.bincount(version_test, weights=weights, minlength=n_tests)
    with np.errstate(divide="ignore", invalid="ignore"):
        for name, values in (("flip_rate", flip_v), ("entropy", ent_v)):
            total = np.bincount(version_test, weights=weights * values, minlength=n_tests)
            out[name] = np.where(versions > 0, total / weight_sum, 0.0)

    # Whole-history flip rate, entropy and runs test (see metrics.flip_rate, outcome_entropy, runs_test).
    same_test = group[1:] == group[:-1]
    changes = np.bincount(group[1:][(y[1:] != y[:-1]) & same_test], minlength=n_tests)
    nf = n.astype(float)
    with np.errstate(divide="ignore", invalid="ignore"):
        out["history_flip_rate"] = np.where(n >= 2, changes / (nf - 1), 0.0)
        p = failures / nf
        mixed_history = (failures > 0) & (failures < n)
        entropy = -p * np.log2(p) - (1.0 - p) * np.log2(1.0 - p)
        out["history_entropy"] = np.where(mixed_history, entropy, 0.0)
        product = (failures * (n - failures)).astype(float)
        mean = 2.0 * product / nf + 1.0
        var = 2.0 * product * (2.0 * product - nf) / nf**2 / (nf - 1.0)
        deviation = (1 + changes) - mean
        corrected = np.where(
            deviation > 0.5, deviation - 0.5, np.where(deviation < 0.5, deviation + 0.5, 0.0)
        )
        numerator = np.where(nf >= _RUNS_CORRECTION_BELOW, deviation, corrected)
        testable = mixed_history & (var > 0.0)
        z = np.where(testable, numerator / np.sqrt(np.where(testable, var, 1.0)), 0.0)
    out["runs_z"] = z
    out["runs_p"] = np.where(testable, 2.0 * stats.norm.sf(np.abs(z)), 1.0)

    mixed = (fails_v > 0) & (fails_v < counts)
    out["same_commit_contradictions"] = np.bincount(version_test[mixed], minlength=n_tests)
    labels = keys[_first_row(version, n_all_versions)[mixed]]
    out["contradiction_commits"] = _tuples(version_test[mixed], [str(v) for v in labels], n_tests)

    # Builds where a failed attempt was followed by a passed one.
    attempt = columns["attempt"].astype(float)
    failed = y == 1
    first_fail = np.full(n_all_builds, np.inf)
    last_pass = np.full(n_all_builds, -np.inf)
    np.minimum.at(first_fail, build[failed], attempt[failed])
    np.maximum.at(last_pass, build[~failed], attempt[~failed])
    rerun = first_fail < last_pass
    out["pass_on_rerun"] = np.bincount(build_test[rerun], minlength=n_tests)
    rerun_ids = build_id[_first_row(build, n_all_builds)[rerun]]
    out["rerun_pass_builds"] = _tuples(build_test[rerun], [int(b) for b in rerun_ids], n_tests)

    # Failure episodes per branch over (branch, version) in time order. A short episode counts as
    # evidence of flakiness only when passing versions of the same branch lie on both sides of it: a
    # short-lived branch that failed from its first to its last build (it was based on broken code) or
    # an episode still open at the end says nothing about intermittency.
    branch_codes, _ = pd.factorize(columns["branch"])
    on_branch = _pair_codes(group, branch_codes)  # one code per (test, branch)
    cell = _pair_codes(on_branch, version)  # one code per (test, branch, version), in order of first run
    n_cells = int(cell.max()) + 1 if n_rows else 0
    cell_branch = _owner(cell, on_branch, n_cells)
    touched = np.bincount(cell, weights=y, minlength=n_cells) > 0
    seq = np.lexsort((np.arange(n_cells), cell_branch))
    seq_branch = cell_branch[seq]
    e_start, e_end = _blocks(touched[seq], seq_branch)
    lengths = e_end - e_start + 1
    branch_first = np.concatenate(([True], seq_branch[1:] != seq_branch[:-1])) if n_cells else np.zeros(0, bool)
    branch_last = np.concatenate((branch_first[1:], [True])) if n_cells else np.zeros(0, bool)
    bounded = ~branch_first[e_start] & ~branch_last[e_end]
    episode_test = _owner(cell, group, n_cells)[seq][e_start]
    limit = config.short_episode_max_versions
    short = np.bincount(episode_test[bounded & (lengths <= limit)], minlength=n_tests)
    out["failure_episodes"] = np.bincount(episode_test, minlength=n_tests)
    out["short_episodes"] = short
    out["long_episodes"] = np.bincount(episode_test[lengths > limit], minlength=n_tests)
    longest_episode = np.zeros(n_tests, dtype=np.int64)
    np.maximum.at(longest_episode, episode_test, lengths)
    out["longest_episode"] = longest_episode
    out["scattered_episodes"] = np.maximum(0, short - 1)

    # Streaks of failed runs, and whether the latest failing_now_runs runs all failed.
    s_start, s_end = _blocks(failed, group)
    streak_test = group[s_start]
    longest = np.zeros(n_tests, dtype=np.int64)
    np.maximum.at(longest, streak_test, s_end - s_start + 1)
    out["longest_failure_streak"] = longest
    last_start = np.full(n_tests, -1, dtype=np.int64)
    np.maximum.at(last_start, streak_test, s_start)
    k = config.failing_now_runs
    cum = np.concatenate(([0], np.cumsum(y, dtype=np.int64)))
    out["failing_now"] = (n >= k) & (cum[ends] - cum[np.maximum(ends - k, 0)] == k)
    fail_rows = np.flatnonzero(failed)
    fail_test = group[fail_rows]
    first_fail_row = np.full(n_tests, -1, dtype=np.int64)
    last_fail_row = np.full(n_tests, -1, dtype=np.int64)
    if fail_rows.size:
        first_fail_row[fail_test[::-1]] = fail_rows[::-1]
        last_fail_row[fail_test] = fail_rows
    has_failure = failures > 0
    started_at = columns["started_at"]
    for name, rows in (("first_failure_at", first_fail_row), ("last_failure_at", last_fail_row)):
        at = started_at[np.maximum(rows, 0)]
        out[name] = np.where(has_failure, at, np.array("NaT", dtype=started_at.dtype))
    commit_str = commit.astype(object)
    out["first_failure_commit"] = np.where(has_failure, commit_str[np.maximum(first_fail_row, 0)], "")
    out["streak_start_commit"] = np.where(has_failure, commit_str[np.maximum(last_start, 0)], "")

    # Failure messages: distinct normalised messages per failure, and time-outs (each distinct text once).
    message, failure_type = columns["message"][fail_rows], columns["failure_type"][fail_rows]
    message_codes, distinct_messages = pd.factorize(pd.Series(message, dtype=object))
    normalised_codes, _ = pd.factorize(np.array([normalise_message(m) for m in distinct_messages], dtype=object))
    distinct = _pair_codes(fail_test, normalised_codes[message_codes]) if fail_rows.size else fail_test
    n_distinct = np.bincount(_owner(distinct, fail_test, int(distinct.max()) + 1 if distinct.size else 0),
                             minlength=n_tests)
    with np.errstate(divide="ignore", invalid="ignore"):
        out["message_diversity"] = np.where(has_failure, n_distinct / failures, 0.0)
    type_codes, distinct_types = pd.factorize(pd.Series(failure_type, dtype=object))
    timeout_message = np.array([bool(_TIMEOUT.search(m)) for m in distinct_messages], dtype=bool)
    timeout_type = np.array([bool(_TIMEOUT.search(t)) for t in distinct_types], dtype=bool)
    is_timeout = timeout_type[type_codes] | timeout_message[message_codes] if fail_rows.size else failed[:0]
    out["timeout_failures"] = np.bincount(fail_test[is_timeout], minlength=n_tests)

    # Coefficient of variation of the known durations.
    duration = columns["duration"].astype(float)
    known = np.isfinite(duration)
    known_count = np.bincount(group[known], minlength=n_tests)
    with np.errstate(divide="ignore", invalid="ignore"):
        mean_duration = np.bincount(group[known], weights=duration[known], minlength=n_tests) / known_count
        deviation_sq = (duration[known] - mean_duration[group[known]]) ** 2
        std = np.sqrt(np.bincount(group[known], weights=deviation_sq, minlength=n_tests) / known_count)
        out["duration_cv"] = np.where((known_count >= 2) & (mean_duration > 0), std / mean_duration, np.nan)
    return tid[starts], out


def evidence_frame(
    runs: pd.DataFrame, *, now: pd.Timestamp, config: EvidenceConfig = EvidenceConfig()
) -> pd.DataFrame:
    """Evidence about every test in ``runs``, one row per test.

    Parameters
    ----------
    runs : DataFrame
        One row per attempt with the columns in :data:`RUN_COLUMNS`: ``test_id`` (int), ``build_id``
        (int), ``commit`` (str, may be empty), ``branch`` (str), ``started_at`` (the build's start,
        tz-aware or UTC), ``attempt`` (1-based within the build), ``outcome`` (one of :data:`OUTCOMES`;
        ``error`` counts as a failure, ``skipped`` is ignored for evidence), ``duration`` (seconds, may be
        NaN), ``failure_type`` and ``message`` (str). The frame is not modified.
    now : Timestamp
        End of the evidence window (naive values are taken as UTC).
    config : EvidenceConfig

    Returns
    -------
    DataFrame
        Indexed by ``test_id`` (sorted), one row for every test that appears in ``runs`` (also tests
        whose runs are all skipped or outside the window: they get ``runs == 0``). Runs are ordered by
        ``(started_at, build_id, attempt)``; a *version* is a commit, or the build itself when the
        commit is empty. Columns:

        - ``runs``, ``failures``, ``passes``: non-skipped runs in the window, after ``max_runs``;
          ``skipped``: skipped runs in the window; ``builds``, ``versions``: distinct ones among the runs.
        - ``sufficient``: ``runs >= min_runs``.
        - ``first_failure_at``, ``last_failure_at`` (NaT without failures), ``first_failure_commit``
          (commit of the first failed run), ``streak_start_commit`` (commit of the first run of the latest
          unbroken streak of failed runs; ``''`` without failures).
        - ``same_commit_contradictions``: versions with both a passed and a failed run, across builds
          or attempts and branches; ``contradiction_commits``: those versions, oldest first.
        - ``pass_on_rerun``: builds in which a failed attempt was followed by a passed one;
          ``rerun_pass_builds``: their build ids.
        - ``flip_rate``, ``entropy``: per-version flip rate and entropy of the runs on each version (in
          run order; 0 for a version with a single run) combined across versions, oldest first, with
          :func:`weighted_flakiness` (``lam`` from the config) as in Kowalczyk et al. 2020 [1]_.
        - ``history_flip_rate``, ``history_entropy``: the same two measures over the whole ordered history.
        - ``runs_z``, ``runs_p``: :func:`runs_test` over the ordered history [2]_.
        - ``failure_rate``, ``failure_rate_low``, ``failure_rate_high``: Beta posterior mean and
          equal-tailed ``level`` interval (see :func:`failure_rate_interval`).
        - ``message_diversity``: distinct normalised failure messages (:func:`normalise_message`) /
          failures, 0 without failures.
        - ``duration_cv``: standard deviation / mean of the known durations (NaN with fewer than two).
        - ``timeout_failures``: failures whose type or message mentions a time-out.
        - ``longest_failure_streak``: longest block of consecutive failed runs.
        - ``failing_now``: the latest ``failing_now_runs`` runs all failed.
        - ``failure_episodes``, ``short_episodes``, ``long_episodes``, ``longest_episode``: blocks of
          consecutive versions with a failed run, counted per branch (versions in order of their first run
          on that branch); long ones span more than ``short_episode_max_versions`` versions; short ones
          span at most that many *and* have a passing version of the same branch before and after them
          (an episode that opens or closes a branch's history, e.g. a short-lived branch based on broken
          code, is neither). ``scattered_episodes = max(0, short_episodes - 1)``: short episodes beyond
          the first.

    References
    ----------
    .. [1] Kowalczyk et al. 2020, see module references.
    .. [2] NIST/SEMATECH e-Handbook, section 1.3.5.13.
    """
    config.validate()
    validated, now = _validated(runs, now)
    tid = validated["test_id"]
    test_ids = np.sort(pd.unique(tid))
    now = now.tz_localize(None)
    start = now - pd.Timedelta(days=config.window_days)
    started_at = validated["started_at"]  # naive UTC datetime64
    in_window = (started_at > start.to_datetime64()) & (started_at <= now.to_datetime64())
    skipped = validated["outcome"] == "skipped"
    skipped_counts = pd.Series(tid[in_window & skipped]).value_counts()
    # Counted runs: in the window, not skipped, ordered by (test_id, started_at, build_id, attempt), the
    # latest max_runs per test. Only the sort keys are reordered until the final selection is known.
    kept = np.flatnonzero(in_window & ~skipped)
    keys = pd.DataFrame({c: validated[c][kept] for c in ("test_id", "started_at", "build_id", "attempt")})
    kept = kept[keys.sort_values(list(keys.columns), kind="stable").index.to_numpy()]
    sorted_tid = tid[kept]
    if kept.size:
        group_end = np.flatnonzero(np.concatenate((sorted_tid[1:] != sorted_tid[:-1], [True])))
        ends = np.repeat(group_end, np.diff(np.concatenate(([-1], group_end))))
        kept = kept[ends - np.arange(kept.size) < config.max_runs]
    columns = {c: v[kept] for c, v in validated.items()}
    present, values = _per_test(columns, config)
    # Tests with no counted run (all skipped or outside the window) get the values of an empty history.
    position = np.searchsorted(test_ids, present)
    data: dict[str, object] = {}
    for name in EVIDENCE_COLUMNS:
        if name.startswith("failure_rate"):
            continue
        if name == "skipped":
            data[name] = skipped_counts.reindex(test_ids, fill_value=0).to_numpy(dtype=np.int64)
            continue
        value = values[name]
        if isinstance(value, list):
            full: list[object] = [()] * test_ids.size
            for i, v in zip(position.tolist(), value, strict=True):
                full[i] = v
            data[name] = pd.Series(full, dtype=object).to_numpy()
            continue
        array = np.asarray(value)
        filled = np.full(test_ids.size, _EMPTY_HISTORY.get(name, 0), dtype=array.dtype)
        filled[position] = array
        data[name] = filled
    result = pd.DataFrame(data, index=pd.Index(test_ids, name="test_id"))
    a = config.prior[0] + result["failures"].to_numpy(dtype=float)
    b = config.prior[1] + result["passes"].to_numpy(dtype=float)
    tail = (1.0 - config.level) / 2.0
    result.insert(result.columns.get_loc("message_diversity"), "failure_rate", a / (a + b))
    result.insert(result.columns.get_loc("message_diversity"), "failure_rate_low", stats.beta.ppf(tail, a, b))
    result.insert(
        result.columns.get_loc("message_diversity"), "failure_rate_high", stats.beta.ppf(1.0 - tail, a, b)
    )
    for col in ("first_failure_at", "last_failure_at"):
        result[col] = result[col].dt.tz_localize("UTC")
    return result
