"""Scales, paths and the environment every benchmark process runs with (no Django import here)."""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
BENCH_DIR = ROOT / "bench"
DATA_DIR = BENCH_DIR / "data"
PYTHON = str(ROOT / ".venv" / "bin" / "python")
PG_BASE = "postgres://barometer@127.0.0.1:5432/"
PROJECT_SLUG = "berthwise"


@dataclass(frozen=True)
class Scale:
    """Sizes of one benchmark run.

    ``large`` holds overrides of the generator's ``bench`` preset (``ScenarioParams.for_scale``): the large
    history. The small history is the most recent builds of the same history holding ``small_results``
    results (same project, same tests, a shorter past), so both sizes serve the same pages.
    """

    name: str
    large: dict
    small_results: int
    ingest_results: int  # the ingest-throughput corpus: the first builds holding this many results
    repeats: int  # repeats of each timed figure
    page_requests: int  # requests per page and size (sizes alternate)
    memory_file_mb: int
    cluster_failures: int
    uploads: int
    upload_results: int
    new_build_results: int
    notes: tuple[str, ...] = field(default_factory=tuple)


SCALES = {
    "quick": Scale(
        name="quick",
        large={"n_tests": 2_000, "n_days": 90, "builds_per_day": 10.0, "n_defects": 1_000},
        small_results=10_000,
        ingest_results=20_000,
        repeats=3,
        page_requests=20,
        memory_file_mb=200,
        cluster_failures=100_000,
        uploads=20,
        upload_results=2_000,
        new_build_results=2_000,
        notes=(
            "quick scale: the history pair is about 10 thousand vs 0.15 million results (not 50 thousand vs "
            "5 million), the ingest corpora hold about 20 000 results each, and clustering gets the failures "
            "this history holds (fewer than 100 000); `make bench` runs the full sizes",
        ),
    ),
    "mid": Scale(
        name="mid",
        large={"n_tests": 5_000, "n_days": 200, "builds_per_day": 15.0, "n_defects": 5_000},
        small_results=50_000,
        ingest_results=100_000,
        repeats=3,
        page_requests=30,
        memory_file_mb=200,
        cluster_failures=100_000,
        uploads=20,
        upload_results=2_000,
        new_build_results=2_000,
        notes=(
            "mid scale (python -m bench.run --scale mid): the full scale's 200 days of history with a quarter "
            "of its tests, about 1.25 million results, so each test has as many runs as at full size; the "
            "small history is the most recent 50 thousand results as at full size",
        ),
    ),
    "full": Scale(
        name="full",
        large={},  # the generator's bench preset: 20 000 tests, about 3 000 builds, 5 million results
        small_results=50_000,
        ingest_results=200_000,
        repeats=3,
        page_requests=60,
        memory_file_mb=200,
        cluster_failures=100_000,
        uploads=20,
        upload_results=2_000,
        new_build_results=2_000,
    ),
}


def db_name(scale: str, which: str) -> str:
    return f"barometer_bench_{scale}_{which}"


def database_url(scale: str, which: str, vendor: str = "postgresql") -> str:
    if vendor == "sqlite":
        return f"sqlite:///{DATA_DIR / scale / f'{which}.sqlite3'}"
    return PG_BASE + db_name(scale, which)


def django_env(database_url: str, **extra: str) -> dict[str, str]:
    """Environment of a benchmark process: production-like settings (DEBUG off, no query log), eager tasks."""
    env = dict(os.environ)
    for key in ("CELERY_BROKER_URL", "CACHE_URL", "DJANGO_SETTINGS_MODULE"):
        env.pop(key, None)
    env.update(
        {
            "DJANGO_SETTINGS_MODULE": "config.settings.base",
            "DATABASE_URL": database_url,
            "SECRET_KEY": "bench-only-key-not-a-secret",
            "DEBUG": "0",
            "ALLOWED_HOSTS": "127.0.0.1,localhost,testserver",
            "SESSION_COOKIE_SECURE": "0",
            "CSRF_COOKIE_SECURE": "0",
            "BAROMETER_EAGER_IN_THREAD": "0",
            "MEDIA_ROOT": str(DATA_DIR / "media"),
            "STATIC_ROOT": str(DATA_DIR / "static"),
            "LOG_LEVEL": "WARNING",
            "PYTHONPATH": str(ROOT),
        }
    )
    env.update(extra)
    return env
