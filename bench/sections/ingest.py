"""Ingest throughput vs the limit: (a) parse-only, (b) the database's bulk load of the same rows,
(c) Barometer's full ingest, (d) junitparser reading the same files into the same tuples."""

from __future__ import annotations

import io
import os
from collections import Counter

from bench.common import Clock, ingest_rows, ingest_tables_empty, log, result_write, section_args, timed
from bench.data import dataset_ensure, manifest_rows, rows_prefix
from bench.db import django_setup, project_ensure

_BEFORE = {"flakyFailure": "failed", "flakyError": "error"}
_AFTER = {"rerunFailure": "failed", "rerunError": "error"}


def parse_ours(paths: list[str]) -> int:
    """(a): our streaming reader into plain tuples (what ingest needs of each attempt)."""
    from ingest.parsers.junit import JUnitReader

    n = 0
    for path in paths:
        rows = [
            (p.classname, p.name, p.outcome, p.duration, p.attempt, p.failure_type, p.message, p.details,
             p.system_out, p.system_err)
            for p in JUnitReader(path)
        ]
        n += len(rows)
    return n


def _local(tag) -> str:
    return tag.rsplit("}", 1)[-1] if isinstance(tag, str) else ""


def _rerun_tuple(elem, outcome: str) -> tuple:
    trace = "\n".join(c.text or "" for c in elem if _local(c.tag) == "stackTrace")
    out = "".join(c.text or "" for c in elem if _local(c.tag) == "system-out")
    err = "".join(c.text or "" for c in elem if _local(c.tag) == "system-err")
    t = elem.get("time")
    return (outcome, float(t) if t else None, elem.get("type", ""), elem.get("message", ""), trace, out, err)


def _junitparser_cases(suite):
    """Every testcase of a suite; junitparser's own iteration already descends into nested suites."""
    yield from suite


def parse_junitparser(paths: list[str]) -> int:
    """(d): the general-purpose junitparser library reading the same files into the same tuples.

    junitparser models failure/error/skipped; the Surefire rerun elements (``flakyFailure`` …) are read from
    the element it wraps, so both readers yield one tuple per attempt.
    """
    from junitparser import Error, Failure, JUnitXml, Skipped, TestSuite

    n = 0
    for path in paths:
        xml = JUnitXml.fromfile(path)
        suites = [xml] if isinstance(xml, TestSuite) else list(xml)
        attempts: Counter = Counter()
        rows = []
        for suite in suites:
            for case in _junitparser_cases(suite):
                key = (case.classname or "", case.name or "")
                results = case.result
                if any(isinstance(r, (Failure, Error)) for r in results):
                    first = next(r for r in results if isinstance(r, (Failure, Error)))
                    main = ("failed" if isinstance(first, Failure) else "error", first.type or "",
                            first.message or "", first.text or "")
                elif any(isinstance(r, Skipped) for r in results):
                    first = next(r for r in results if isinstance(r, Skipped))
                    main = ("skipped", first.type or "", first.message or "", first.text or "")
                else:
                    main = ("passed", "", "", "")
                before, after = [], []
                for child in case._elem:
                    tag = _local(child.tag)
                    if tag in _BEFORE:
                        before.append(_rerun_tuple(child, _BEFORE[tag]))
                    elif tag in _AFTER:
                        after.append(_rerun_tuple(child, _AFTER[tag]))
                out, err = case.system_out or "", case.system_err or ""
                main_t = (main[0], case.time, main[1], main[2], main[3], out, err)
                for outcome, duration, ftype, message, details, o, e in [*before, main_t, *after]:
                    attempts[key] += 1
                    rows.append((key[0], key[1], outcome, duration, attempts[key], ftype, message, details, o, e))
        n += len(rows)
    return n


def bulk_load(rows_dump: bytes | list, columns: tuple[str, ...]) -> Clock:
    """(b): load exactly the rows ingest wrote, from memory, with the database's own bulk path."""
    from django.db import connection, transaction

    table = "ingest_testresult"
    cols = ", ".join(columns)
    with connection.cursor() as cur:
        cur.execute(f"DELETE FROM {table}")
    if connection.vendor == "postgresql":
        with connection.cursor() as cur:
            cur.execute(f"TRUNCATE {table}")  # same empty table as the full ingest starts from
        with Clock() as clock, transaction.atomic(), connection.cursor() as cur:
            with cur.cursor.copy(f"COPY {table} ({cols}) FROM STDIN") as copy:
                view = memoryview(rows_dump)
                for start in range(0, len(view), 1 << 20):
                    copy.write(view[start : start + (1 << 20)])
        return clock
    placeholders = ", ".join(["%s"] * len(columns))
    with Clock() as clock, transaction.atomic(), connection.cursor() as cur:
        cur.executemany(f"INSERT INTO {table} ({cols}) VALUES ({placeholders})", rows_dump)
    return clock


def rows_dump(columns: tuple[str, ...]):
    """The rows the full ingest just wrote: COPY text (PostgreSQL) or a list of tuples (SQLite)."""
    from django.db import connection

    cols = ", ".join(columns)
    with connection.cursor() as cur:
        if connection.vendor == "postgresql":
            buf = io.BytesIO()
            with cur.cursor.copy(f"COPY (SELECT {cols} FROM ingest_testresult ORDER BY id) TO STDOUT") as copy:
                for chunk in copy:
                    buf.write(chunk)
            return buf.getvalue()
        cur.execute(f"SELECT {cols} FROM ingest_testresult ORDER BY id")
        return cur.fetchall()


#: The corpora: the first builds of the history (mostly pull-request builds of a few hundred results) and
#: only the nightly full runs (one result per test case), so the fixed cost per build shows.
CORPORA = {"first builds": None, "nightly builds": "nightly-full"}


def corpus_measure(project_id: int, corpus: list[dict], repeats: int, *, label: str) -> dict:
    from django.db import connection

    from ingest.services.results import RESULT_COLUMNS

    paths = [r["_path"] for r in corpus]
    size = sum(os.path.getsize(p) for p in paths)
    timings: dict = {}
    counts = {}
    for rep in range(repeats):
        with Clock(database=False) as c:
            counts["parse"] = parse_ours(paths)
        timed(timings, "parse", c)
        if connection.vendor == "postgresql" or rep == 0:
            with Clock(database=False) as c:
                counts["junitparser"] = parse_junitparser(paths)
            timed(timings, "junitparser", c)
        ingest_tables_empty()
        with Clock() as c:
            done = ingest_rows(project_id, corpus)
        timed(timings, "full", c)
        timings.setdefault("full_split", []).append(
            {"store": done["store_seconds"], "run": done["run_seconds"]})
        counts["full"] = done["results"]
        dump = rows_dump(RESULT_COLUMNS)
        timed(timings, "bulk", bulk_load(dump, RESULT_COLUMNS))
        with connection.cursor() as cur:
            cur.execute("SELECT COUNT(*) FROM ingest_testresult")
            counts["bulk"] = cur.fetchone()[0]
        del dump
        log(f"ingest[{connection.vendor}, {label}] repeat {rep + 1}: " + ", ".join(
            f"{k} {v['wall'][-1]:.2f}s/{v['cpu'][-1]:.2f}s cpu" for k, v in timings.items() if isinstance(v, dict)))
    return {"files": len(paths), "bytes": size, "results": counts["parse"], "counts": counts, "timings": timings}


def main() -> None:
    args, scale = section_args(__doc__)
    django_setup()
    from django.db import connection

    history, _ = dataset_ensure(scale)
    rows = manifest_rows(history)
    project_id = project_ensure(history / "components.json")
    out: dict = {"vendor": connection.vendor, "corpora": {}}
    for label, job in CORPORA.items():
        picked = [r for r in rows if job is None or r["ci_job"] == job]
        corpus, n_results = rows_prefix(picked, min_results=scale.ingest_results)
        log(f"ingest[{connection.vendor}, {label}]: {len(corpus)} files, {n_results} results")
        out["corpora"][label] = corpus_measure(project_id, corpus, scale.repeats, label=label)
    result_write(args.out, out)


if __name__ == "__main__":
    main()
