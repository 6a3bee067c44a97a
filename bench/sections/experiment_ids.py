"""What-if experiment for FINDINGS.md §1 (not part of ``make bench``): the full ingest with the test-case id
look-up as it is, vs. with a process-level id cache and one look-up per batch by the indexed
(classname, name) pair. The variant is patched in for this process only; ingest/services/results.py is not
changed. Same corpus, runs alternate, each on emptied tables."""

from __future__ import annotations

import os

from bench.common import Clock, ingest_rows, ingest_tables_empty, log, result_write, section_args, timed
from bench.data import dataset_ensure, manifest_rows, rows_prefix
from bench.db import django_setup, project_ensure

_IDS: dict[int, dict[tuple[str, str], int]] = {}


def _patched_cache_class(original):
    from django.db import connection

    from ingest.models import TestCase

    class ProcessCache(original):
        """The proposal: ids kept per project for the life of the process, looked up by the indexed pair."""

        def __init__(self, project):
            super().__init__(project)
            self.ids = _IDS.setdefault(project.pk, {})

        def _lookup(self, keys):
            if connection.vendor != "postgresql":
                raise RuntimeError("the experiment runs on PostgreSQL only")
            with connection.cursor() as cur:
                cur.execute(
                    "SELECT t.id, t.classname, t.name FROM ingest_testcase t "
                    "JOIN unnest(%s::text[], %s::text[]) AS k(c, n) ON t.classname = k.c AND t.name = k.n "
                    "WHERE t.project_id = %s",
                    [[k[0] for k in keys], [k[1] for k in keys], self.project.pk],
                )
                for tc_id, classname, name in cur.fetchall():
                    self.ids[(classname, name)] = tc_id

        def resolve(self, parsed):
            missing = {(p.classname, p.name): p for p in parsed if (p.classname, p.name) not in self.ids}
            if not missing:
                return
            self._lookup(list(missing))
            new = [k for k in missing if k not in self.ids]
            if new:
                TestCase.objects.bulk_create(
                    [TestCase(project=self.project, classname=k[0][:500], name=k[1][:500],
                              file=missing[k].file[:500], suite=missing[k].suite[:500],
                              component_id=self.rules.component_id_for(k[0])) for k in new],
                    batch_size=1000, ignore_conflicts=True)
                self.created += len(new)
                self._lookup(new)

    return ProcessCache


def main() -> None:
    args, scale = section_args(__doc__)
    django_setup()
    import ingest.services.results as results_module

    history, _ = dataset_ensure(scale)
    rows = manifest_rows(history)
    job = os.environ.get("BENCH_CI_JOB")  # e.g. nightly-full: only the large builds
    if job:
        rows = [r for r in rows if r["ci_job"] == job]
    corpus, n = rows_prefix(rows, min_results=scale.ingest_results)
    project_id = project_ensure(history / "components.json")
    original = results_module._TestCaseCache
    variant = _patched_cache_class(original)
    timings: dict = {}
    counts = {}
    for rep in range(scale.repeats):
        for label, cls in (("as_is", original), ("process_cache_pair_lookup", variant)):
            results_module._TestCaseCache = cls
            _IDS.clear()  # the first build of each run starts cold, as a fresh worker would
            ingest_tables_empty()
            with Clock() as c:
                done = ingest_rows(project_id, corpus)
            timed(timings, label, c)
            counts[label] = done["results"]
        results_module._TestCaseCache = original
        log(f"experiment repeat {rep + 1}: " + ", ".join(f"{k} {v['wall'][-1]:.2f}s" for k, v in timings.items()))
    result_write(args.out, {"ci_job": job or "all", "builds": len(corpus), "results": n, "counts": counts, "timings": timings})


if __name__ == "__main__":
    main()
