"""The benchmark harness's pure parts: summaries, percentiles, ratios against targets, the report.

Timings here are numbers the test constructs (no clock is read), so every expected ratio is known exactly.
"""

from __future__ import annotations

import numpy as np
import pytest

from bench import report
from bench.stats import (
    ERR_EMPTY,
    ERR_PAIRS,
    ERR_ZERO,
    paired_ratios,
    percentile,
    rows_per_second,
    summarise,
    target_check,
)


@pytest.mark.parametrize("q", [50, 90, 95, 99, 100])
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_percentile_is_numpy_nearest_rank(q, seed):
    # Reference: numpy.percentile(method="inverted_cdf") is Hyndman & Fan (1996) definition 1, the
    # nearest-rank percentile (numpy documentation, "method" parameter).
    values = np.random.default_rng(seed).lognormal(size=37).tolist()
    assert percentile(values, q) == pytest.approx(float(np.percentile(values, q, method="inverted_cdf")))


def test_percentile_nearest_rank_worked_example():
    # NIST/SEMATECH e-Handbook of Statistical Methods 7.2.6.2 describes percentiles by rank; with the
    # nearest-rank rule the 95th percentile of 1..20 is the 19th value (ceil(0.95 * 20) = 19).
    assert percentile(list(range(1, 21)), 95) == 19
    assert percentile([5.0], 95) == 5.0


def test_summarise_matches_statistics_module_and_refuses_nothing():
    import statistics

    values = [3.0, 1.0, 4.0, 1.5, 9.0, 2.5]
    s = summarise(values)
    assert (s.n, s.min, s.max) == (6, 1.0, 9.0)
    assert s.median == statistics.median(values)  # reference: the standard library
    with pytest.raises(ValueError, match=ERR_EMPTY):
        summarise([])


def test_paired_ratios_and_their_errors():
    assert paired_ratios([2.0, 9.0], [1.0, 3.0]) == [2.0, 3.0]
    with pytest.raises(ValueError, match=ERR_PAIRS.format(n=1, d=2).replace("(", r"\(").replace(")", r"\)")):
        paired_ratios([1.0], [1.0, 2.0])
    with pytest.raises(ValueError, match="not positive"):
        paired_ratios([1.0], [0.0])
    assert "denominator" in ERR_ZERO


@pytest.mark.parametrize(
    ("ratios", "op", "target", "met"),
    [([1.0, 1.4, 2.0], "<=", 1.5, True), ([1.6, 1.4, 2.0], "<=", 1.5, False),
     ([3.5, 2.0, 4.0], ">=", 3.0, True), ([2.9, 3.5, 1.0], ">=", 3.0, False)],
)
def test_target_judges_the_median_ratio(ratios, op, target, met):
    check = target_check(key="k", title="t", numerator="n", denominator="d", ratios=ratios, op=op, target=target)
    assert check.met is met
    assert check.ratio.median == sorted(ratios)[1]
    assert (check.ratio.min, check.ratio.max) == (min(ratios), max(ratios))


def test_target_refuses_unknown_operator():
    with pytest.raises(ValueError, match="operator"):
        target_check(key="k", title="t", numerator="n", denominator="d", ratios=[1.0], op="<", target=1)


def test_rows_per_second():
    s = rows_per_second(1000, [2.0, 4.0, 5.0])
    assert (s.median, s.min, s.max) == (250.0, 200.0, 500.0)


def _timing(values):
    return {"wall": list(values), "cpu": [v / 2 for v in values]}


def test_ingest_checks_compare_full_ingest_with_parse_plus_bulk_and_the_parser_speed_up():
    data = {"results": 1000, "timings": {
        "parse": _timing([1.0, 1.0, 2.0]), "bulk": _timing([1.0, 2.0, 2.0]),
        "full": _timing([2.0, 6.0, 5.0]), "junitparser": _timing([4.0, 2.0, 6.0])}}
    checks = {c.key: c for c in report.ingest_checks(data, label="pg")}
    limit = checks["ingest_vs_limit_pg_wall"]
    assert limit.ratio.median == pytest.approx(1.25)  # ratios 1.0, 2.0, 1.25
    assert limit.met is True
    speed = checks["parser_speedup_pg_wall"]
    assert speed.ratio.median == pytest.approx(3.0)  # ratios 4, 2, 3
    assert speed.met is True
    assert checks["ingest_vs_limit_pg_cpu"].ratio.median == pytest.approx(1.25)  # cpu halves both sides
    figures = report.ingest_figures(data, label="pg")
    parse = next(f for f in figures if "(a)" in f["figure"])
    assert parse["rows_per_s"]["median"] == 1000.0


def test_memory_check_uses_twice_idle_plus_100_mb():
    ok = report.memory_check({"rss_mb": 100.0}, {"peak_mb": 290.0, "file_mb": 200.0})
    bad = report.memory_check({"rss_mb": 100.0}, {"peak_mb": 310.0, "file_mb": 200.0})
    assert ok.met and not bad.met
    assert ok.ratio.median == pytest.approx(290 / 300)


def test_page_checks_p95_ratio_and_query_count():
    small = [0.010] * 19 + [0.020]  # p95 (nearest rank, 19th of 20) = 0.010
    large = [0.012] * 19 + [0.100]  # p95 = 0.012
    pages = {
        "page overview": {"url": "/p/x/", "status": {"small": 200, "large": 200},
                          "queries": {"small": 7, "large": 7}, "seconds": {"small": small, "large": large}},
        "api flaky-tests/": {"url": "/api/", "status": {"small": 200, "large": 500},
                             "queries": {"small": 3, "large": 4}, "seconds": {"small": small, "large": small}},
    }
    checks, figures = report.page_checks(pages, rounds=2)
    by = {c.key: c for c in checks}
    assert by["page_p95_page overview"].ratio.median == pytest.approx(1.2)
    assert by["page_p95_page overview"].met is True
    assert by["page_queries_page overview"].met is True
    assert by["page_p95_api flaky-tests/"].met is False  # a 500 answer fails the page whatever its speed
    assert "500" in by["page_p95_api flaky-tests/"].note
    assert by["page_queries_api flaky-tests/"].met is False  # query count grew with the data
    assert {f["figure"] for f in figures} == set(pages)


def test_incremental_and_clustering_checks():
    inc = report.incremental_check({"incremental": {"small": _timing([1.0, 2.0]), "large": _timing([3.0, 2.0])}})
    assert inc[0].ratio.median == pytest.approx(2.0) and inc[0].met
    cl = report.clustering_check({"failures": 10, "distinct_signatures": 2, "timings": {
        "cluster_fit": _timing([3.0, 8.0, 9.0]), "tfidf_distinct": _timing([1.0, 2.0, 3.0])}})
    assert cl[0].ratio.median == pytest.approx(3.0) and cl[0].met  # ratios 3, 4, 3


def test_load_checks_need_zero_errors_and_every_job_done():
    data = {"upload_errors": 0, "jobs_ok": 19, "uploads": 20, "read_errors": 0, "queue_left": 0}
    facts = {c["check"]: c["met"] for c in report.load_checks(data, expected_rows=2000)}
    assert facts == {"upload answers other than 202": True, "jobs done with 2000 rows": False,
                     "page read errors": True, "after-build refreshes left in the queue": True}


def test_render_shows_target_beside_ratio_and_verdicts():
    check = target_check(key="k", title="full ingest vs limit", numerator="c", denominator="a+b",
                         ratios=[2.0, 2.5], op="<=", target=1.5, note="because of per-build queries")
    results = {"meta": {"scale": "quick", "started": "s", "finished": "f", "git": "abc", "machine": {"cpu": "x"},
                        "sizes": {"large": "1"}, "notes": []},
               "targets": [check.as_dict()], "figures": [], "not_measured": ["page overview: missing"]}
    text = report.render(results, "## Profile\nfound things")
    line = next(ln for ln in text.splitlines() if ln.startswith("| full ingest vs limit"))
    assert "2.25 (2.00–2.50)" in line and "<= 1.5" in line and "**not met**" in line
    assert "per-build queries" in line
    assert "page overview: missing" in text and "found things" in text


def test_ingest_overhead_per_build():
    data = {"files": 10, "results": 1000, "timings": {
        "parse": _timing([1.0, 1.0]), "bulk": _timing([1.0, 1.0]), "full": _timing([3.0, 4.0])}}
    text = report.ingest_overhead_fact(data, label="pg")
    # extra time 1 s and 2 s over 10 builds: 100 ms and 200 ms per build, median 150 ms
    assert "150 ms per build (100–200)" in text
    assert "100 results on average" in text
