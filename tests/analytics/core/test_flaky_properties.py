"""Properties of the flaky-test score that must hold for any history (hypothesis)."""

from __future__ import annotations

import pandas as pd
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from analytics.core.flaky import score_tests

NOW = pd.Timestamp("2024-06-30 12:00", tz="UTC")
COMMITS = ["1a2b3c4d", "5e6f7a8b", "9c0d1e2f", "3a4b5c6d", "7e8f9a0b", ""]
BRANCHES = ["main", "feature/waitlist"]
PROPERTY_SETTINGS = settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])

# One build: (commit index, branch index, outcomes of its attempts; 0 passed, 1 failed, 2 skipped).
build_strategy = st.tuples(
    st.integers(0, len(COMMITS) - 1),
    st.integers(0, len(BRANCHES) - 1),
    st.lists(st.integers(0, 2), min_size=1, max_size=3),
)
history_strategy = st.lists(build_strategy, min_size=1, max_size=30)


def to_runs(test_id: int, builds, *, first_build_id: int = 0) -> list[dict]:
    rows = []
    for k, (commit, branch, attempts) in enumerate(builds):
        for attempt, outcome in enumerate(attempts, start=1):
            rows.append(
                {
                    "test_id": test_id,
                    "build_id": first_build_id + k,
                    "commit": COMMITS[commit],
                    "branch": BRANCHES[branch],
                    "started_at": NOW - pd.Timedelta(hours=200 - 2 * k),
                    "attempt": attempt,
                    "outcome": ("passed", "failed", "skipped")[outcome],
                    "duration": 1.0,
                    "failure_type": "",
                    "message": "boom 1" if outcome == 1 else "",
                }
            )
    return rows


@PROPERTY_SETTINGS
@given(
    histories=st.lists(history_strategy, min_size=1, max_size=4),
    new_ids=st.lists(st.integers(1, 10_000), min_size=4, max_size=4, unique=True),
)
def test_renaming_tests_changes_nothing(histories, new_ids):
    # Relabelling test ids (and listing them in another order) must not change any test's row.
    old_ids = list(range(1, len(histories) + 1))
    frame = pd.DataFrame([r for tid, h in zip(old_ids, histories) for r in to_runs(tid, h, first_build_id=0)])
    renamed = frame.assign(test_id=frame["test_id"].map(dict(zip(old_ids, new_ids))))
    before = score_tests(frame, now=NOW)
    after = score_tests(renamed.iloc[::-1], now=NOW)
    for old, new in zip(old_ids, new_ids):
        a, b = before.loc[old], after.loc[new]
        pd.testing.assert_series_equal(a.drop("explanation"), b.drop("explanation"), check_names=False)
        assert a["explanation"] == b["explanation"]


@PROPERTY_SETTINGS
@given(builds=history_strategy, pick=st.integers(0, 10_000), as_rerun=st.booleans(), branch=st.integers(0, 1))
def test_adding_a_same_commit_contradiction_never_lowers_the_score(builds, pick, as_rerun, branch):
    rows = to_runs(1, builds)
    frame = pd.DataFrame(rows)
    counted = frame[frame["outcome"] != "skipped"]
    # Versions (a commit, or a build without one) whose runs all have the same outcome.
    version = counted["commit"].where(counted["commit"] != "", "build " + counted["build_id"].astype(str))
    outcomes = counted.groupby(version)["outcome"].agg(set)
    pure = sorted(v for v, seen in outcomes.items() if len(seen) == 1)
    if not pure:
        return
    chosen = pure[pick % len(pure)]
    opposite = "failed" if outcomes[chosen] == {"passed"} else "passed"
    on_version = counted[version == chosen]
    if as_rerun or chosen.startswith("build "):
        # One more attempt at the end of the latest build of that version.
        last = on_version.iloc[-1]
        build = frame[frame["build_id"] == last["build_id"]]
        extra = dict(last.to_dict(), attempt=int(build["attempt"].max()) + 1, outcome=opposite)
    else:
        # A new build of that commit, after every other build.
        extra = dict(
            on_version.iloc[-1].to_dict(),
            build_id=int(frame["build_id"].max()) + 1,
            branch=BRANCHES[branch],
            started_at=NOW - pd.Timedelta(hours=1),
            attempt=1,
            outcome=opposite,
        )
    extra["message"] = "boom 2" if opposite == "failed" else ""
    before = score_tests(frame, now=NOW).loc[1]
    after = score_tests(pd.concat([frame, pd.DataFrame([extra])], ignore_index=True), now=NOW).loc[1]
    assert after["same_commit_contradictions"] == before["same_commit_contradictions"] + 1
    assert after["score"] >= before["score"] - 1e-12, (before.to_dict(), after.to_dict())
