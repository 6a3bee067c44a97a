"""Incremental analytics: the post-ingest refresh for one new build at the small vs the large history, and
the full refresh at both sizes split by detector (as the AnalyticsRun rows record it)."""

from __future__ import annotations

import os

from bench.common import Clock, log, result_write, section_args, timed
from bench.config import PROJECT_SLUG, db_name
from bench.db import django_setup, use_database

NEW_BUILD = "bench-new-build"


def _new_build(path: str):
    from ingest.models import Build, Project
    from ingest.services.results import BuildMeta, results_job_create, results_job_run

    project = Project.objects.get(slug=PROJECT_SLUG)
    Build.objects.filter(project=project, external_id=NEW_BUILD).delete()
    with open(path, "rb") as fh:
        job = results_job_create(project=project, files=[("new-build.xml", fh)],
                                 meta=BuildMeta(build=NEW_BUILD, commit="b" * 40, branch="main", ci_job="pr-checks",
                                                started="2026-11-30T06:00:00Z"), via="cli")
    counts = results_job_run(job=job, refresh=False)
    return project.pk, job.build_id, counts.tests


def _drop_new_build(project_id: int) -> None:
    from ingest.models import Build
    from ingest.services.results import build_results_reset

    build = Build.objects.filter(project_id=project_id, external_id=NEW_BUILD).first()
    if build is not None:
        build_results_reset(build=build)
        build.delete()


def main() -> None:
    args, scale = section_args(__doc__)
    django_setup()
    from analytics.models import AnalyticsRun
    from analytics.services.refresh import analytics_refresh, analytics_refresh_after_build

    sizes = {"small": db_name(scale.name, "small"), "large": db_name(scale.name, "large")}
    out: dict = {"full": {}, "incremental": {}, "new_build": {}}
    for which, name in sizes.items():
        use_database(name)
        from ingest.models import Project

        project_id = Project.objects.get(slug=PROJECT_SLUG).pk
        first_run = AnalyticsRun.objects.order_by("-id").values_list("id", flat=True).first() or 0
        with Clock() as c:
            steps = analytics_refresh(project_id=project_id)
        runs = list(AnalyticsRun.objects.filter(id__gt=first_run, scope="full").values("detector", "ok", "details"))
        out["full"][which] = {"wall": c.wall, "cpu": c.cpu, "steps": {k: {"rows": v[0], "seconds": v[1]}
                                                                      for k, v in steps.items()},
                              "analytics_runs": runs}
        log(f"analytics[{which}]: full refresh {c.wall:.1f} s: {steps}")
        pid, build_id, n = _new_build(os.environ["BENCH_NEW_BUILD"])
        out["new_build"][which] = {"project_id": pid, "build_id": build_id, "results": n}
    timings: dict = {name: {} for name in sizes}
    for rep in range(scale.repeats):
        for which, name in sizes.items():
            use_database(name)
            nb = out["new_build"][which]
            with Clock() as c:
                steps = analytics_refresh_after_build(project_id=nb["project_id"], build_id=nb["build_id"])
            timed(timings[which], "after_build", c)
            for step, (_, seconds) in steps.items():
                out.setdefault("after_build_steps", {}).setdefault(which, {}).setdefault(step, []).append(seconds)
        log(f"analytics repeat {rep + 1}: small {timings['small']['after_build']['wall'][-1]:.2f}s, "
            f"large {timings['large']['after_build']['wall'][-1]:.2f}s")
    out["incremental"] = {w: t["after_build"] for w, t in timings.items()}
    for which, name in sizes.items():
        use_database(name)
        _drop_new_build(out["new_build"][which]["project_id"])
    result_write(args.out, out)


if __name__ == "__main__":
    main()
