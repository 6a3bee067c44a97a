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

from .metrics import flip_rate, outcome_entropy, runs_test, weighted_flakiness

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


def _validated(runs: pd.DataFrame, now: pd.Timestamp) -> tuple[pd.DataFrame, pd.Timestamp]:
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
    frame = pd.DataFrame(
        {
            "test_id": runs["test_id"].to_numpy(),
            "build_id": runs["build_id"].to_numpy(),
            "commit": runs["commit"].fillna("").astype(str).to_numpy(),
            "branch": runs["branch"].fillna("").astype(str).to_numpy(),
            "started_at": pd.to_datetime(runs["started_at"], utc=True).dt.tz_localize(None).array,
            "attempt": runs["attempt"].to_numpy(),
            "outcome": outcome.to_numpy(),
            "duration": pd.to_numeric(runs["duration"], errors="coerce").to_numpy(dtype=float),
            "failure_type": runs["failure_type"].fillna("").astype(str).to_numpy(),
            "message": runs["message"].fillna("").astype(str).to_numpy(),
        }
    )
    return frame, now


def _episodes(fail_touching: np.ndarray) -> np.ndarray:
    """Lengths of the maximal blocks of ``True`` in a boolean sequence."""
    if not fail_touching.any():
        return np.zeros(0, dtype=int)
    padded = np.concatenate(([0], fail_touching.astype(np.int8), [0]))
    edges = np.diff(padded)
    return np.flatnonzero(edges == -1) - np.flatnonzero(edges == 1)


def _episodes_with_starts(fail_touching: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Lengths and start indices of the maximal blocks of ``True`` in a boolean sequence."""
    if not fail_touching.any():
        return np.zeros(0, dtype=int), np.zeros(0, dtype=int)
    padded = np.concatenate(([0], fail_touching.astype(np.int8), [0]))
    edges = np.diff(padded)
    starts = np.flatnonzero(edges == 1)
    return np.flatnonzero(edges == -1) - starts, starts


def _longest_streak(y: np.ndarray) -> tuple[int, int]:
    """Length of the longest block of failures and start index of the last block (-1 if none)."""
    lengths = _episodes(y.astype(bool))
    if lengths.size == 0:
        return 0, -1
    padded = np.concatenate(([0], y, [0]))
    starts = np.flatnonzero(np.diff(padded) == 1)
    return int(lengths.max()), int(starts[-1])


def _version_keys(commit: np.ndarray, build_id: np.ndarray) -> np.ndarray:
    # A run without a commit is its own build's version.
    return np.array([c if c else f"build {b}" for c, b in zip(commit, build_id, strict=True)], dtype=object)


def _one_test(g: dict[str, np.ndarray], skipped: int, config: EvidenceConfig) -> dict[str, object]:
    y = np.isin(g["outcome"], FAILED_OUTCOMES).astype(np.int8)
    n = int(y.size)
    failures = int(y.sum())
    row: dict[str, object] = {
        "runs": n,
        "failures": failures,
        "passes": n - failures,
        "skipped": skipped,
        "sufficient": n >= config.min_runs,
    }
    versions = _version_keys(g["commit"], g["build_id"])
    codes, labels = pd.factorize(versions)  # codes follow first appearance, i.e. time order
    n_versions = len(labels)
    builds, _ = pd.factorize(g["build_id"])
    n_builds = int(builds.max() + 1) if n else 0
    row["builds"] = n_builds
    row["versions"] = n_versions

    # Within-version flip rate and entropy, then the across-version weighted average [1].
    counts = np.bincount(codes, minlength=n_versions)
    fails_v = np.bincount(codes, weights=y, minlength=n_versions)
    order = np.argsort(codes, kind="stable")
    ys, cs = y[order], codes[order]
    changed = (np.diff(ys) != 0) & (np.diff(cs) == 0)
    flips_v = np.bincount(cs[1:][changed], minlength=n_versions)
    flip_v = np.divide(flips_v, counts - 1, out=np.zeros(n_versions), where=counts > 1)
    p_v = fails_v / np.maximum(counts, 1)
    with np.errstate(divide="ignore", invalid="ignore"):
        ent_v = -(p_v * np.log2(p_v) + (1 - p_v) * np.log2(1 - p_v))
    ent_v = np.nan_to_num(ent_v, nan=0.0)
    row["flip_rate"] = weighted_flakiness(flip_v, lam=config.lam)
    row["entropy"] = weighted_flakiness(ent_v, lam=config.lam)
    row["history_flip_rate"] = flip_rate(y)
    row["history_entropy"] = outcome_entropy(y)
    row["runs_z"], row["runs_p"] = runs_test(y)

    mixed = (fails_v > 0) & (fails_v < counts)
    row["same_commit_contradictions"] = int(mixed.sum())
    row["contradiction_commits"] = tuple(str(v) for v in labels[mixed])

    # Builds where a failed attempt was followed by a passed one.
    attempt = g["attempt"].astype(float)
    first_fail = np.full(n_builds, np.inf)
    last_pass = np.full(n_builds, -np.inf)
    np.minimum.at(first_fail, builds[y == 1], attempt[y == 1])
    np.maximum.at(last_pass, builds[y == 0], attempt[y == 0])
    rerun = first_fail < last_pass
    build_ids = pd.unique(g["build_id"])
    row["pass_on_rerun"] = int(rerun.sum())
    row["rerun_pass_builds"] = tuple(int(b) for b in build_ids[rerun])

    # Failure episodes per branch over (branch, version) in time order. A short episode counts as
    # evidence of flakiness only when passing versions of the same branch lie on both sides of it: a
    # short-lived branch that failed from its first to its last build (it was based on broken code) or
    # an episode still open at the end says nothing about intermittency.
    episode_lengths, short = [], 0
    for branch in pd.unique(g["branch"]):
        on_branch = g["branch"] == branch
        b_codes, b_labels = pd.factorize(versions[on_branch])
        touched = np.bincount(b_codes, weights=y[on_branch], minlength=len(b_labels)) > 0
        lengths_b, starts_b = _episodes_with_starts(touched)
        episode_lengths.append(lengths_b)
        bounded = (starts_b > 0) & (starts_b + lengths_b < touched.size)
        short += int((bounded & (lengths_b <= config.short_episode_max_versions)).sum())
    lengths = np.concatenate(episode_lengths) if episode_lengths else np.zeros(0, dtype=int)
    row["failure_episodes"] = int(lengths.size)
    row["short_episodes"] = short
    row["long_episodes"] = int((lengths > config.short_episode_max_versions).sum())
    row["longest_episode"] = int(lengths.max()) if lengths.size else 0
    row["scattered_episodes"] = max(0, short - 1)

    longest, last_start = _longest_streak(y)
    row["longest_failure_streak"] = longest
    k = config.failing_now_runs
    row["failing_now"] = bool(n >= k and y[-k:].all())
    fail_idx = np.flatnonzero(y)
    if failures:
        row["first_failure_at"] = pd.Timestamp(g["started_at"][fail_idx[0]], tz="UTC")
        row["last_failure_at"] = pd.Timestamp(g["started_at"][fail_idx[-1]], tz="UTC")
        row["first_failure_commit"] = str(g["commit"][fail_idx[0]])
        row["streak_start_commit"] = str(g["commit"][last_start])
    else:
        row["first_failure_at"] = pd.NaT
        row["last_failure_at"] = pd.NaT
        row["first_failure_commit"] = ""
        row["streak_start_commit"] = ""

    normalised = {normalise_message(m) for m in g["message"][fail_idx]}
    row["message_diversity"] = len(normalised) / failures if failures else 0.0
    timeouts = [
        bool(_TIMEOUT.search(t) or _TIMEOUT.search(m))
        for t, m in zip(g["failure_type"][fail_idx], g["message"][fail_idx], strict=True)
    ]
    row["timeout_failures"] = int(sum(timeouts))
    durations = g["duration"][np.isfinite(g["duration"])]
    mean = durations.mean() if durations.size else 0.0
    row["duration_cv"] = float(durations.std() / mean) if durations.size >= 2 and mean > 0 else np.nan
    return row


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
    frame, now = _validated(runs, now)
    test_ids = np.sort(pd.unique(frame["test_id"]))
    now = now.tz_localize(None)
    start = now - pd.Timedelta(days=config.window_days)
    in_window = (frame["started_at"] > start) & (frame["started_at"] <= now)
    frame = frame[in_window]
    skipped_counts = frame.loc[frame["outcome"] == "skipped", "test_id"].value_counts()
    frame = frame[frame["outcome"] != "skipped"]
    frame = frame.sort_values(["test_id", "started_at", "build_id", "attempt"], kind="stable")
    frame = frame.groupby("test_id", sort=False).tail(config.max_runs)

    columns = {c: frame[c].to_numpy() for c in frame.columns}  # started_at: naive UTC datetime64
    tid = columns["test_id"]
    boundaries = np.flatnonzero(tid[1:] != tid[:-1]) + 1
    starts = np.concatenate(([0], boundaries)) if tid.size else np.zeros(0, dtype=int)
    ends = np.concatenate((boundaries, [tid.size])) if tid.size else np.zeros(0, dtype=int)
    rows = {}
    for s, e in zip(starts, ends, strict=True):
        g = {c: v[s:e] for c, v in columns.items()}
        test_id = g["test_id"][0]
        rows[test_id] = _one_test(g, int(skipped_counts.get(test_id, 0)), config)
    empty = {c: np.zeros(0, dtype=v.dtype) for c, v in columns.items()} if columns else None
    for test_id in test_ids:
        if test_id not in rows:
            g = empty or {c: np.zeros(0) for c in RUN_COLUMNS}
            rows[test_id] = _one_test(g, int(skipped_counts.get(test_id, 0)), config)

    row_columns = [c for c in EVIDENCE_COLUMNS if not c.startswith("failure_rate")]
    result = pd.DataFrame.from_dict(rows, orient="index", columns=row_columns).reindex(test_ids)
    result.index.name = "test_id"
    a = config.prior[0] + result["failures"].to_numpy(dtype=float)
    b = config.prior[1] + result["passes"].to_numpy(dtype=float)
    tail = (1.0 - config.level) / 2.0
    result.insert(result.columns.get_loc("message_diversity"), "failure_rate", a / (a + b))
    result.insert(result.columns.get_loc("message_diversity"), "failure_rate_low", stats.beta.ppf(tail, a, b))
    result.insert(
        result.columns.get_loc("message_diversity"), "failure_rate_high", stats.beta.ppf(1.0 - tail, a, b)
    )
    for col in ("first_failure_at", "last_failure_at"):
        result[col] = pd.to_datetime(result[col], utc=True)
    return result
