"""Benchmark data: the generated history (cached by parameters), its subsets, and JUnit files written for
single benchmarks (a new 2 000-result build, the uploads, one 200 MB report). No Django import."""

from __future__ import annotations

import csv
import hashlib
import json
from collections.abc import Iterator
from dataclasses import asdict
from pathlib import Path
from xml.sax.saxutils import escape, quoteattr

from bench.config import DATA_DIR, Scale


def dataset_ensure(scale: Scale) -> tuple[Path, dict]:
    """Generate the large history of ``scale`` once; reused while its parameters are unchanged."""
    from demo_fixtures.generate import generate
    from demo_fixtures.scenario import ScenarioParams

    params = ScenarioParams.for_scale("bench", **scale.large)
    stamp_value = hashlib.sha256(json.dumps(asdict(params), default=str, sort_keys=True).encode()).hexdigest()
    out = DATA_DIR / scale.name / "history"
    stamp = out / "bench.stamp.json"
    if stamp.exists():
        info = json.loads(stamp.read_text())
        if info.get("params_sha") == stamp_value:
            return out, info
    summary = generate(out, params=params)
    info = {
        "params_sha": stamp_value,
        "params": {k: str(v) for k, v in asdict(params).items()},
        "builds": summary.builds,
        "test_cases": summary.test_cases,
        "results": summary.results,
        "failed_results": summary.failed_results,
        "defects": summary.defects,
        "megabytes": round(summary.bytes_written / 1e6, 1),
    }
    stamp.write_text(json.dumps(info, indent=1))
    return out, info


def manifest_rows(history: Path) -> list[dict]:
    with open(history / "manifest.csv", newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    for row in rows:
        row["_path"] = str(history / row["file"])
    return rows


def _results_in(path: str) -> int:
    from ingest.parsers.junit import JUnitReader

    return sum(1 for _ in JUnitReader(path))


def rows_prefix(rows: list[dict], *, min_results: int, from_end: bool = False) -> tuple[list[dict], int]:
    """The first (or last) builds of ``rows`` holding at least ``min_results`` results, in manifest order."""
    ordered = list(reversed(rows)) if from_end else list(rows)
    picked, total = [], 0
    for row in ordered:
        if total >= min_results:
            break
        picked.append(row)
        total += _results_in(row["_path"])
    if from_end:
        picked.reverse()
    return picked, total


# --------------------------------------------------------------------------------------------- writing JUnit
def _case_xml(r, *, name_suffix: str = "", out_text: str = "") -> str:
    attrs = f"classname={quoteattr(r.classname)} name={quoteattr(r.name + name_suffix)}"
    if r.duration is not None:
        attrs += f' time="{r.duration:.3f}"'
    body = ""
    if r.outcome in ("failed", "error"):
        tag = "failure" if r.outcome == "failed" else "error"
        body += (
            f"<{tag} type={quoteattr(r.failure_type or 'AssertionError')} message={quoteattr(r.message)}>"
            f"{escape(r.details)}</{tag}>"
        )
    elif r.outcome == "skipped":
        body += f"<skipped message={quoteattr(r.message)}/>"
    text = out_text or r.system_out
    if text:
        body += f"<system-out>{escape(text)}</system-out>"
    return f"<testcase {attrs}>{body}</testcase>\n" if body else f"<testcase {attrs}/>\n"


def distinct_results(paths: list[str], limit: int) -> list:
    """Up to ``limit`` parsed results with distinct (classname, name), latest reports first."""
    from ingest.parsers.junit import JUnitReader

    seen: dict[tuple[str, str], object] = {}
    for path in paths:
        for r in JUnitReader(path):
            key = (r.classname, r.name)
            if key not in seen:
                seen[key] = r
                if len(seen) >= limit:
                    return list(seen.values())
    return list(seen.values())


def junit_build_write(path: Path, results: list, *, count: int, variant: str = "") -> int:
    """Write one report of exactly ``count`` testcases (no reruns) cycling through ``results``.

    When ``results`` holds fewer distinct tests than ``count``, later rounds get a ``[n]`` suffix (a
    parametrised test), so every testcase stays one result. ``variant`` changes nothing but the suite name,
    so that otherwise identical uploads have different content hashes.
    """
    path.parent.mkdir(parents=True, exist_ok=True)
    with open(path, "w", encoding="utf-8") as fh:
        fh.write('<?xml version="1.0" encoding="UTF-8"?>\n')
        fh.write(f'<testsuite name={quoteattr("bench " + variant)} tests="{count}">\n')
        for i in range(count):
            r = results[i % len(results)]
            rnd = i // len(results)
            fh.write(_case_xml(r, name_suffix=f"[{rnd}]" if rnd else ""))
        fh.write("</testsuite>\n")
    return count


def junit_big_write(path: Path, results: list, *, megabytes: int) -> tuple[int, int]:
    """Write one report of at least ``megabytes`` MB: every result repeated with a new name and ~1 KB of
    captured output per testcase (a large monorepo's nightly run). Returns (testcases, bytes)."""
    path.parent.mkdir(parents=True, exist_ok=True)
    target = megabytes * 1024 * 1024
    line = "INFO  berth allocator: checked slot {i} of pier {p}; tide window ok; sensor reading 0.{i:04d} m\n"
    written = cases = 0
    with open(path, "w", encoding="utf-8") as fh:
        head = '<?xml version="1.0" encoding="UTF-8"?>\n<testsuites name="nightly-monorepo">\n<testsuite name="all">\n'
        fh.write(head)
        written += len(head)
        rnd = 0
        while written < target:
            for r in results:
                out = "".join(line.format(i=(cases + k) % 10_000, p=k) for k in range(10))
                chunk = _case_xml(r, name_suffix=f"[r{rnd}]", out_text=out)
                fh.write(chunk)
                written += len(chunk.encode("utf-8"))
                cases += 1
                if written >= target:
                    break
            rnd += 1
        tail = "</testsuite>\n</testsuites>\n"
        fh.write(tail)
        written += len(tail)
    return cases, written


def failures_iter(paths: list[str], limit: int) -> Iterator[tuple[str, str, str]]:
    """(failure_type, message, details) of up to ``limit`` failed/error attempts from the reports."""
    from ingest.parsers.junit import JUnitReader

    n = 0
    for path in paths:
        for r in JUnitReader(path):
            if r.outcome in ("failed", "error"):
                yield r.failure_type, r.message, r.details
                n += 1
                if n >= limit:
                    return
