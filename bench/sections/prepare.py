"""Load one history (small: the most recent builds; large: all of it) through the real ingest code, then
run the full analytics refresh once, so that the pages have something to show."""

from __future__ import annotations

from bench.common import Clock, ingest_rows, log, result_write, section_args
from bench.data import dataset_ensure, manifest_rows, rows_prefix
from bench.db import django_setup, pg_analyze, project_ensure

BENCH_USER = "bench-viewer"


def main() -> None:
    args, scale = section_args(__doc__)
    django_setup()
    from django.contrib.auth import get_user_model

    from analytics.services.refresh import analytics_refresh

    history, info = dataset_ensure(scale)
    rows = manifest_rows(history)
    if args.which == "small":
        rows, _ = rows_prefix(rows, min_results=scale.small_results, from_end=True)
    project_id = project_ensure(history / "components.json")
    get_user_model().objects.get_or_create(username=BENCH_USER, defaults={"is_staff": True})
    log(f"prepare[{args.which}]: importing {len(rows)} builds")
    with Clock() as load:
        done = ingest_rows(project_id, rows)
    log(f"prepare[{args.which}]: {done['results']} results in {load.wall:.0f} s; full analytics refresh")
    from django.db import connection

    if connection.vendor == "postgresql":  # statistics first, as autovacuum would have them (this server: off)
        pg_analyze(connection.settings_dict["NAME"])
    with Clock() as refresh:
        steps = analytics_refresh(project_id=project_id)
    result_write(args.out, {
        "which": args.which, "builds": done["builds"], "results": done["results"],
        "load": {"wall": load.wall, "cpu": load.cpu, "store": done["store_seconds"], "run": done["run_seconds"]},
        "refresh": {"wall": refresh.wall, "cpu": refresh.cpu,
                    "steps": {k: {"rows": v[0], "seconds": v[1]} for k, v in steps.items()}},
    })


if __name__ == "__main__":
    main()
