"""What every benchmark section process shares: arguments, Django set-up, the ingest loop, writing JSON."""

from __future__ import annotations

import argparse
import dataclasses
import json
import os
import sys
import time
from pathlib import Path

from bench.config import SCALES, Scale


def section_args(description: str) -> tuple[argparse.Namespace, Scale]:
    p = argparse.ArgumentParser(description=description)
    p.add_argument("--scale", choices=sorted(SCALES), default="quick")
    p.add_argument("--out", type=Path, required=True, help="where to write this section's JSON")
    p.add_argument("--vendor", default="postgresql")
    p.add_argument("--which", default="")
    args = p.parse_args()
    scale = SCALES[args.scale]
    if os.environ.get("BENCH_REPEATS"):  # set by bench.run --repeats
        scale = dataclasses.replace(scale, repeats=int(os.environ["BENCH_REPEATS"]))
    return args, scale


def result_write(path: Path, data: dict) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(json.dumps(data, indent=1, default=str))


def log(text: str) -> None:
    print(f"[{time.strftime('%H:%M:%S')}] {text}", file=sys.stderr, flush=True)


def ingest_rows(project_id: int, rows: list[dict], *, build_prefix: str = "") -> dict:
    """Import manifest rows build by build, as ``ingest_results --manifest`` does (without its final refresh).

    Returns the number of results written and the seconds spent storing the raw files and importing them.
    """
    from ingest.models import Project
    from ingest.services.results import BuildMeta, results_job_create, results_job_run

    project = Project.objects.get(pk=project_id)
    builds: dict[str, list[dict]] = {}
    for row in rows:
        builds.setdefault(build_prefix + row["build"], []).append(row)
    written = 0
    store_s = run_s = 0.0
    for build_id, build_rows in builds.items():
        first = build_rows[0]
        meta = BuildMeta(build=build_id, commit=first.get("commit", ""), branch=first.get("branch", ""),
                         ci_job=first.get("ci_job", ""), started=first.get("started", ""))
        t0 = time.perf_counter()
        handles = [open(r["_path"], "rb") for r in build_rows]
        try:
            job = results_job_create(project=project, files=[(r["_path"], h) for r, h in zip(build_rows, handles)],
                                     meta=meta, via="cli")
        finally:
            for h in handles:
                h.close()
        t1 = time.perf_counter()
        counts = results_job_run(job=job, refresh=False)
        t2 = time.perf_counter()
        written += counts.tests
        store_s += t1 - t0
        run_s += t2 - t1
    return {"results": written, "builds": len(builds), "store_seconds": store_s, "run_seconds": run_s}


INGEST_TABLES = ("ingest_testresult", "ingest_testweek", "ingest_projectweek", "ingest_importedreport",
                 "ingest_storedfile", "ingest_importjob", "ingest_build", "ingest_testcase")


def ingest_tables_empty() -> None:
    """Empty the results side of the database (projects and components stay) before a timed import."""
    from django.db import connection, transaction

    from ingest.services.results import testcase_ids_forget

    testcase_ids_forget()  # the per-process test-case id cache must not outlive the emptied tables

    if connection.vendor == "postgresql":
        with connection.cursor() as cur:
            cur.execute("TRUNCATE " + ", ".join(INGEST_TABLES) + " RESTART IDENTITY CASCADE")
        return
    with connection.cursor() as cur:
        cur.execute("PRAGMA foreign_keys = OFF")
    try:
        with transaction.atomic(), connection.cursor() as cur:
            tables = connection.introspection.table_names()
            for table in tables:
                if table.startswith("analytics_") or table in INGEST_TABLES:
                    cur.execute(f'DELETE FROM "{table}"')
    finally:
        with connection.cursor() as cur:
            cur.execute("PRAGMA foreign_keys = ON")
        with connection.cursor() as cur:
            cur.execute("VACUUM")


class Clock:
    """Wall time, and CPU time of this process plus its PostgreSQL backend (robust to a busy machine).

    ``with Clock() as c: ...`` then ``c.wall``, ``c.cpu``. The CPU figure leaves out waiting for the disk and
    for other people's processes; on these shared 2-core machines it varies far less than wall time.
    """

    def __init__(self, *, database: bool = True) -> None:
        self.database = database
        self.wall = self.cpu = 0.0

    @staticmethod
    def _backend_cpu() -> float:
        from django.db import connection

        if connection.vendor != "postgresql":
            return 0.0
        import psutil

        connection.ensure_connection()
        pid = getattr(connection, "_bench_backend_pid", None)
        if pid is None or getattr(connection, "_bench_conn_id", None) != id(connection.connection):
            with connection.cursor() as cur:
                cur.execute("SELECT pg_backend_pid()")
                pid = cur.fetchone()[0]
            connection._bench_backend_pid = pid
            connection._bench_conn_id = id(connection.connection)
        try:
            t = psutil.Process(pid).cpu_times()
        except psutil.Error:
            return 0.0
        return t.user + t.system

    def __enter__(self) -> Clock:
        self._b0 = self._backend_cpu() if self.database else 0.0
        self._c0 = time.process_time()
        self._w0 = time.perf_counter()
        return self

    def __exit__(self, *exc) -> None:
        self.wall = time.perf_counter() - self._w0
        self.cpu = time.process_time() - self._c0
        if self.database:
            self.cpu += self._backend_cpu() - self._b0


def timed(store: dict, name: str, clock: Clock) -> None:
    store.setdefault(name, {"wall": [], "cpu": []})
    store[name]["wall"].append(clock.wall)
    store[name]["cpu"].append(clock.cpu)
