"""Memory: peak RSS of ingesting one large JUnit file vs the RSS of an idle Django process.

``--which idle``: set Django up, load the URLconf, run one query, report RSS. ``--which ingest``: import the
big file (path in BENCH_BIG_FILE) as one build and report the peak RSS (getrusage) and the RSS before."""

from __future__ import annotations

import os
import resource
import time

from bench.common import log, result_write, section_args
from bench.db import django_setup


def rss_mb() -> float:
    import psutil

    return psutil.Process().memory_info().rss / 2**20


def main() -> None:
    args, _scale = section_args(__doc__)
    django_setup()
    from django.urls import get_resolver

    from ingest.models import Project

    get_resolver().url_patterns  # noqa: B018 - import every view, as a serving process has
    Project.objects.count()
    if args.which == "idle":
        result_write(args.out, {"rss_mb": rss_mb(), "peak_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024})
        return
    from ingest.services.results import BuildMeta, results_job_create, results_job_run

    path = os.environ["BENCH_BIG_FILE"]
    project = Project.objects.get(slug=os.environ.get("BENCH_PROJECT", "berthwise"))
    before = rss_mb()
    peak_before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    started = time.perf_counter()
    with open(path, "rb") as fh:
        job = results_job_create(project=project, files=[(os.path.basename(path), fh)],
                                 meta=BuildMeta(build=f"bench-big-{int(time.time())}", started="2026-11-30T03:00:00Z"),
                                 via="cli")
    counts = results_job_run(job=job, refresh=False)
    seconds = time.perf_counter() - started
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    log(f"memory: {counts.tests} results from {os.path.getsize(path) / 2**20:.0f} MB in {seconds:.0f} s, "
        f"peak RSS {peak:.0f} MB (before {before:.0f} MB)")
    result_write(args.out, {"file_mb": os.path.getsize(path) / 2**20, "results": counts.tests, "seconds": seconds,
                            "rss_before_mb": before, "peak_before_mb": peak_before, "peak_mb": peak})


if __name__ == "__main__":
    main()
