"""A small demo installation for the browser tests, in its own SQLite file, served by its own process.

The live server runs in a subprocess (``manage.py runserver``) on a database of its own: pytest-django's
live_server would flush the data after every test (it forces ``transactional_db``), and the demo load is
too slow to repeat per test. Data arrives through the real ingest paths: the demo generator at a reduced
size, ``load_demo``, a JUnit report whose test name is an HTML payload (``ingest_results``), then
``refresh_analytics``. Run as ``python -m tests.browser.demo_site <dir>`` with the environment of
:func:`site_environment`.
"""

from __future__ import annotations

import os
import sys
from datetime import timedelta
from pathlib import Path

XSS = "<img src=x onerror=alert(1)>"
XSS_CLASS = "berthwise.xss.Payload"
XSS_COMPONENT = f"Harbour {XSS}"
ADMIN = ("demo", "harbour-demo-2026")  # created by load_demo (see ingest/management/commands/load_demo.py)
VIEWER = ("vera", "vera-viewer-2026")
SCALE = {"n_tests": 60, "n_days": 28, "n_defects": 40}


def site_environment(root: Path) -> dict[str, str]:
    env = {k: v for k, v in os.environ.items() if not k.startswith(("DATABASE_", "CELERY_", "CACHE_"))}
    env.update(
        DJANGO_SETTINGS_MODULE="config.settings.base",
        DEBUG="1",  # runserver serves the static files (plotly.js) itself
        DATABASE_URL=f"sqlite:///{root / 'site.sqlite3'}",
        MEDIA_ROOT=str(root / "media"),
        BAROMETER_EAGER_IN_THREAD="1",  # imports run in a thread of the server: progress is visible
        PYTHONUNBUFFERED="1",
    )
    env.pop("SECRET_KEY", None)
    return env


def xss_report(n_cases: int = 3) -> bytes:
    """A pytest-style JUnit report whose failing test is named with an HTML payload (escaped as XML requires)."""
    esc = XSS.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
    cases = [f'<testcase classname="{XSS_CLASS}" name="{esc}" time="0.5">'
             f'<failure message="{esc}">assert {esc}</failure></testcase>']
    cases += [f'<testcase classname="{XSS_CLASS}" name="test_ok_{i}" time="0.01"/>' for i in range(n_cases - 1)]
    return (f'<?xml version="1.0" encoding="utf-8"?><testsuites><testsuite name="xss" tests="{n_cases}" '
            f'failures="1" errors="0" skipped="0">{"".join(cases)}</testsuite></testsuites>').encode()


def big_report(n_cases: int) -> bytes:
    """A large passing report: its import takes long enough for the progress bar to be seen moving."""
    cases = "".join(f'<testcase classname="berthwise.bulk.Case{i // 100}" name="test_{i}" time="0.001"/>'
                    for i in range(n_cases))
    return (f'<?xml version="1.0" encoding="utf-8"?><testsuites><testsuite name="bulk" tests="{n_cases}" '
            f'failures="0" errors="0" skipped="0">{cases}</testsuite></testsuites>').encode()


def prepare(root: Path) -> None:
    import django

    django.setup()
    from django.contrib.auth import get_user_model
    from django.core.management import call_command

    from demo_fixtures.generate import generate
    from demo_fixtures.scenario import END_DATE, ScenarioParams
    from ingest.models import ApiToken, Component, ComponentRule, Project
    from ingest.services.components import components_apply_rules

    call_command("migrate", verbosity=0, interactive=False)
    data = root / "demo"
    generate(data, params=ScenarioParams.for_scale("demo", **SCALE))
    call_command("load_demo", data=data, skip_analytics=True, stdout=open(os.devnull, "w"))
    project = Project.objects.get()
    component = Component.objects.create(project=project, name=XSS_COMPONENT)
    ComponentRule.objects.create(project=project, classname_prefix=XSS_CLASS, component=component)
    report = root / "xss.xml"
    report.write_bytes(xss_report())
    started = (END_DATE - timedelta(days=3)).isoformat() + "T10:00:00Z"
    call_command("ingest_results", str(report), project=project.slug, build="xss-1", commit="bad0c0de",
                 branch="feature/payload", started=started, no_progress=True, stdout=open(os.devnull, "w"))
    components_apply_rules(project=project)
    call_command("refresh_analytics", project=project.slug, stdout=open(os.devnull, "w"))
    get_user_model().objects.create_user(VIEWER[0], password=VIEWER[1])
    _, key = ApiToken.issue(project=project, name="browser tests")
    (root / "token").write_text(key)
    (root / "slug").write_text(project.slug)


if __name__ == "__main__":
    sys.path.insert(0, str(Path(__file__).resolve().parents[2]))
    prepare(Path(sys.argv[1]))
