"""Turn the sections' raw measurements into target checks and figures, and render RESULTS.md.

Pure: dictionaries in, dictionaries and text out (tests/bench checks the computations)."""

from __future__ import annotations

from bench.stats import (
    TargetCheck,
    fmt_summary,
    paired_ratios,
    percentile,
    rows_per_second,
    summarise,
    target_check,
)

INGEST_TARGET = 1.5
PARSER_TARGET = 3.0
PAGE_TARGET = 1.5
INCREMENTAL_TARGET = 2.0
CLUSTER_TARGET = 3.0
MEMORY_EXTRA_MB = 100.0


def _sum(a: list[float], b: list[float]) -> list[float]:
    return [x + y for x, y in zip(a, b)]


def ingest_checks(data: dict, *, label: str) -> list[TargetCheck]:
    t = data["timings"]
    checks = []
    for kind in ("wall", "cpu"):
        limit = _sum(t["parse"][kind], t["bulk"][kind])
        checks.append(target_check(
            key=f"ingest_vs_limit_{label}_{kind}",
            title=f"full ingest vs parse + bulk load ({label}, {kind} time)",
            numerator="(c) full ingest", denominator="(a) parse + (b) bulk load",
            ratios=paired_ratios(t["full"][kind], limit), op="<=", target=INGEST_TARGET))
        n = min(len(t["junitparser"][kind]), len(t["parse"][kind]))
        checks.append(target_check(
            key=f"parser_speedup_{label}_{kind}",
            title=f"junitparser time / our parse time ({label} run, {kind} time)",
            numerator="(d) junitparser", denominator="(a) our reader",
            ratios=paired_ratios(t["junitparser"][kind][:n], t["parse"][kind][:n]), op=">=", target=PARSER_TARGET))
    return checks


def ingest_figures(data: dict, *, label: str) -> list[dict]:
    rows = data["results"]
    out = []
    names = {"parse": "(a) parse only, our reader", "bulk": "(b) bulk load of the same rows",
             "full": "(c) full ingest", "junitparser": "(d) junitparser into the same tuples"}
    for key, title in names.items():
        t = data["timings"].get(key)
        if not t:
            continue
        out.append({"figure": f"ingest {label}: {title}", "wall": summarise(t["wall"]).as_dict(),
                    "cpu": summarise(t["cpu"]).as_dict(),
                    "rows_per_s": rows_per_second(rows, t["wall"]).as_dict(), "rows": rows})
    return out


def ingest_overhead_fact(data: dict, *, label: str) -> str:
    """What the full ingest spends beyond parse + bulk load, per build (median over the repeats)."""
    t = data["timings"]
    extra = [c - a - b for c, a, b in zip(t["full"]["wall"], t["parse"]["wall"], t["bulk"]["wall"])]
    per_build = summarise([e / data["files"] for e in extra])
    per_row = data["results"] / data["files"]
    return (f"ingest {label}: the corpus has {data['files']} builds of {per_row:,.0f} results on average; the full "
            f"ingest spends {per_build.median * 1000:.0f} ms per build ({per_build.min * 1000:.0f}–"
            f"{per_build.max * 1000:.0f}) beyond parsing and bulk-loading its rows (storing the raw file, the job, "
            f"build and report rows, test-case ids, the weekly rollup, the commit)")


def memory_check(idle: dict, ingest: dict) -> TargetCheck:
    limit = 2 * idle["rss_mb"] + MEMORY_EXTRA_MB
    return target_check(
        key="memory_peak", title=f"peak RSS ingesting a {ingest['file_mb']:.0f} MB report / (2 × idle RSS + 100 MB)",
        numerator=f"peak RSS {ingest['peak_mb']:.0f} MB", denominator=f"2 × {idle['rss_mb']:.0f} MB + 100 MB",
        ratios=[ingest["peak_mb"] / limit], op="<=", target=1.0)


def _chunks(values: list[float], n: int) -> list[list[float]]:
    size = max(1, len(values) // n)
    return [values[i : i + size] for i in range(0, size * n, size) if values[i : i + size]]


def page_checks(pages: dict, *, rounds: int) -> tuple[list[TargetCheck], list[dict]]:
    """p95 ratio large/small per page (min–max over ``rounds`` consecutive blocks of requests), and the
    query-count check (the same number of SQL queries at both sizes)."""
    checks, figures = [], []
    for label, entry in pages.items():
        small, large = entry["seconds"]["small"], entry["seconds"]["large"]
        whole = percentile(large, 95) / percentile(small, 95)
        per_round = [percentile(lg, 95) / percentile(sm, 95) for sm, lg in
                     zip(_chunks(small, rounds), _chunks(large, rounds))]
        spread = summarise(per_round)
        ratio = type(spread)(n=len(small), median=whole, min=min(spread.min, whole), max=max(spread.max, whole),
                             p95=whole)
        ok_status = all(code == 200 for code in entry["status"].values())
        note = "" if ok_status else f"non-200 answers: {entry['status']}"
        checks.append(TargetCheck(
            key=f"page_p95_{label}", title=f"{label}: p95 at large / p95 at small history",
            numerator="p95 large", denominator="p95 small", op="<=", target=PAGE_TARGET, ratio=ratio,
            met=whole <= PAGE_TARGET and ok_status, note=note))
        q = entry["queries"]
        same = q["small"] == q["large"]
        checks.append(TargetCheck(
            key=f"page_queries_{label}", title=f"{label}: SQL queries at large / at small history",
            numerator=f"{q['large']} queries", denominator=f"{q['small']} queries", op="<=", target=1.0,
            ratio=summarise([q["large"] / max(q["small"], 1)]), met=same,
            note="" if same else "the query count depends on the data size"))
        figures.append({"figure": label, "url": entry["url"], "queries": q,
                        "small": summarise(small).as_dict(), "large": summarise(large).as_dict()})
    return checks, figures


def incremental_check(data: dict) -> list[TargetCheck]:
    inc = data["incremental"]
    return [target_check(
        key=f"incremental_refresh_{kind}", title=f"refresh after one new build: large / small history ({kind} time)",
        numerator="after-build refresh, large", denominator="after-build refresh, small",
        ratios=paired_ratios(inc["large"][kind], inc["small"][kind]), op="<=", target=INCREMENTAL_TARGET)
        for kind in ("wall", "cpu")]


def clustering_check(data: dict) -> list[TargetCheck]:
    t = data["timings"]
    return [target_check(
        key=f"clustering_{kind}",
        title=f"clustering {data['failures']:,} failures / TF-IDF of their {data['distinct_signatures']:,} "
              f"distinct signatures ({kind} time)",
        numerator="FailureClusterer.fit", denominator="TF-IDF of distinct signatures",
        ratios=paired_ratios(t["cluster_fit"][kind], t["tfidf_distinct"][kind]), op="<=", target=CLUSTER_TARGET)
        for kind in ("wall", "cpu")]


def load_checks(data: dict, *, expected_rows: int) -> list[dict]:
    """Pass/fail facts of the load run (not ratios: errors must be 0, every job done with its rows)."""
    return [
        {"check": "upload answers other than 202", "value": data["upload_errors"], "met": data["upload_errors"] == 0},
        {"check": f"jobs done with {expected_rows} rows", "value": f"{data['jobs_ok']}/{data['uploads']}",
         "met": data["jobs_ok"] == data["uploads"]},
        {"check": "page read errors", "value": data.get("read_errors", 0), "met": data.get("read_errors", 0) == 0},
        {"check": "after-build refreshes left in the queue", "value": data.get("queue_left", "not measured"),
         "met": data.get("queue_left") == 0},
    ]


# ----------------------------------------------------------------------------------------------- rendering
def _ratio_line(c: dict) -> str:
    r = c["ratio"]
    met = "met" if c["met"] else "**not met**"
    spread = f"{r['min']:.2f}–{r['max']:.2f}" if r["n"] > 1 else "one sample"
    note = f" {c['note']}" if c.get("note") else ""
    return (f"| {c['title']} | {r['median']:.2f} ({spread}) | {c['op']} {c['target']:g} | {met}{note} |")


def render(results: dict, findings: str = "") -> str:
    meta = results["meta"]
    lines = [
        "# Barometer benchmark results",
        "",
        f"Scale **{meta['scale']}**, run {meta['started']} – {meta['finished']} (UTC), git {meta['git']}.",
        "",
        "Every target is a ratio of two figures measured in the same run; each figure is the median over the "
        "repeats with min–max in brackets. Wall time is what a user waits; CPU time (this process plus its "
        "PostgreSQL backend) leaves out waiting for other people's processes on this shared machine, so both "
        "are shown and each is judged.",
        "",
        "## Machine",
        "",
    ]
    lines += [f"- {k}: {v}" for k, v in meta["machine"].items()]
    lines += ["", "## Sizes", ""]
    lines += [f"- {k}: {v}" for k, v in meta["sizes"].items()]
    for note in meta.get("notes", []):
        lines.append(f"- note: {note}")
    lines += ["", "## Targets", "", "| ratio | median (min–max) | target | verdict |", "| --- | --- | --- | --- |"]
    lines += [_ratio_line(c) for c in results["targets"]]
    if results.get("load_checks"):
        lines += ["", "## Load", "", "| check | value | verdict |", "| --- | --- | --- |"]
        lines += [f"| {c['check']} | {c['value']} | {'met' if c['met'] else '**not met**'} |"
                  for c in results["load_checks"]]
    for extra in results.get("load_figures", []):
        lines.append(f"- {extra}")
    lines += ["", "## Figures", "", "| figure | wall | CPU | rows/s (wall) |", "| --- | --- | --- | --- |"]
    for f in results["figures"]:
        if "wall" in f:
            rps = fmt_summary(f["rows_per_s"], unit="rows/s") if f.get("rows_per_s") else ""
            cpu = fmt_summary(f["cpu"]) if f.get("cpu") else ""
            lines.append(f"| {f['figure']} | {fmt_summary(f['wall'])} | {cpu} | {rps} |")
    if results.get("page_figures"):
        lines += ["", "### Pages and list APIs (server time through the Django test client)", "",
                  "| page | queries small / large | median small | p95 small | median large | p95 large |",
                  "| --- | --- | --- | --- | --- | --- |"]
        for f in results["page_figures"]:
            s, lg = f["small"], f["large"]
            lines.append(f"| {f['figure']} | {f['queries']['small']} / {f['queries']['large']} | "
                         f"{s['median'] * 1000:.1f} ms | {s['p95'] * 1000:.1f} ms | {lg['median'] * 1000:.1f} ms | "
                         f"{lg['p95'] * 1000:.1f} ms |")
    if results.get("not_measured"):
        lines += ["", "## Not measured", ""]
        lines += [f"- {item}" for item in results["not_measured"]]
    if results.get("facts"):
        lines += ["", "## Other facts of this run", ""]
        lines += [f"- {item}" for item in results["facts"]]
    if results.get("errors"):
        lines += ["", "## Sections that failed", ""]
        lines += [f"- {name}: {text}" for name, text in results["errors"].items()]
    if findings:
        lines += ["", findings.strip()]
    return "\n".join(lines) + "\n"
