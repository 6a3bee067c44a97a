"""Page time vs history: server time of each dashboard page and list API at the small and the large history
(requests alternate between the two databases), and the SQL queries each one issues."""

from __future__ import annotations

import time

from bench.common import log, result_write, section_args
from bench.config import PROJECT_SLUG, db_name
from bench.db import django_setup, use_database

#: URL names of the dashboard pages (each takes the project slug).
PAGE_NAMES = ("overview", "flaky-list", "causes-list", "forecasts", "imports")
#: List APIs, relative to /api/v1/projects/<slug>/.
API_PATHS = ("flaky-tests/", "quarantine/", "failure-clusters/", "forecasts/")
#: Seconds of requests per page (both sizes together) the run aims at.
PAGE_BUDGET = {"quick": 12.0, "mid": 30.0, "full": 45.0}


def targets(slug: str) -> tuple[dict[str, str], list[str]]:
    """{label: url} of the pages and APIs that resolve now, and the labels that do not."""
    from django.urls import NoReverseMatch, Resolver404, resolve, reverse

    found, missing = {}, []
    for name in PAGE_NAMES:
        try:
            found[f"page {name}"] = reverse(name, kwargs={"slug": slug})
        except NoReverseMatch:
            missing.append(f"page {name}")
    for rel in API_PATHS:
        url = f"/api/v1/projects/{slug}/{rel}"
        try:
            resolve(url)
            found[f"api {rel}"] = url
        except Resolver404:
            missing.append(f"api {rel}")
    return found, missing


def main() -> None:
    args, scale = section_args(__doc__)
    django_setup()
    from django.contrib.auth import get_user_model
    from django.db import connection
    from django.test import Client
    from django.test.utils import CaptureQueriesContext, setup_test_environment

    from bench.sections.prepare import BENCH_USER

    setup_test_environment()
    found, missing = targets(PROJECT_SLUG)
    sizes = {"small": db_name(scale.name, "small"), "large": db_name(scale.name, "large")}
    clients = {}
    for which, name in sizes.items():
        use_database(name)
        user, _ = get_user_model().objects.get_or_create(username=BENCH_USER, defaults={"is_staff": True})
        client = Client()
        client.force_login(user)
        clients[which] = client
    out: dict = {"missing": missing, "pages": {}}
    for label, url in found.items():
        entry: dict = {"url": url, "status": {}, "queries": {}, "seconds": {"small": [], "large": []}}
        warm = 0.0
        for which, name in sizes.items():  # warm-up, status and query count
            use_database(name)
            started = time.perf_counter()
            clients[which].get(url)
            warm += time.perf_counter() - started
            with CaptureQueriesContext(connection) as ctx:
                response = clients[which].get(url)
            entry["status"][which] = response.status_code
            entry["queries"][which] = len(ctx.captured_queries)
        # A page that takes seconds gets fewer requests (at least 5 per size), so that one slow page cannot
        # eat the run; the number actually made is recorded.
        n = max(5, min(scale.page_requests, int(PAGE_BUDGET[scale.name] / max(warm, 1e-3))))
        entry["requests"] = n
        for _ in range(n):
            for which, name in sizes.items():
                use_database(name)
                started = time.perf_counter()
                response = clients[which].get(url)
                entry["seconds"][which].append(time.perf_counter() - started)
                if response.status_code != 200:
                    entry["status"][which] = response.status_code
        out["pages"][label] = entry
        log(f"pages: {label} queries {entry['queries']} status {entry['status']}")
    result_write(args.out, out)


if __name__ == "__main__":
    main()
