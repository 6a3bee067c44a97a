"""Browser tests: Playwright driving the system Chromium against a live demo installation.

Skipped, with the reason shown, only when no Chromium is found (``CHROMIUM_PATH``, default /usr/bin/chromium);
``.ci/run`` installs it so they always run in CI. Recipe: /work/shared/NOTES.md ("Browser tests").
"""

from __future__ import annotations

import os
import socket
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

import pytest

from tests.browser import demo_site

os.environ.setdefault("DJANGO_ALLOW_ASYNC_UNSAFE", "true")  # playwright's event loop in the test thread

REPO = Path(__file__).resolve().parents[2]
ARTIFACTS = REPO / "test-artifacts"
CHROMIUM = os.environ.get("CHROMIUM_PATH", "/usr/bin/chromium")
HAVE_CHROMIUM = os.path.isfile(CHROMIUM) and os.access(CHROMIUM, os.X_OK)
NO_CHROMIUM = (f"browser tests skipped: no Chromium at {CHROMIUM} (apt-get install chromium fonts-liberation, "
               "or set CHROMIUM_PATH)")
# Keep Chromium from reaching the (closed) network; see /work/shared/NOTES.md.
ARGS = ["--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage", "--disable-background-networking",
        "--disable-component-update", "--no-first-run", "--disable-sync"]
SERVER_START_TIMEOUT = 120


def pytest_collection_modifyitems(config, items):
    here = Path(__file__).parent
    for item in items:
        if here in Path(str(item.fspath)).parents:
            item.add_marker(pytest.mark.browser)
            if not HAVE_CHROMIUM:
                item.add_marker(pytest.mark.skip(reason=NO_CHROMIUM))


def pytest_terminal_summary(terminalreporter, exitstatus, config):
    skipped = terminalreporter.stats.get("skipped", [])
    if not HAVE_CHROMIUM and any("tests/browser/" in getattr(r, "nodeid", "") for r in skipped):
        terminalreporter.write_line(NO_CHROMIUM, yellow=True, bold=True)


@pytest.fixture(scope="session")
def browser_type_launch_args(browser_type_launch_args):
    return {**browser_type_launch_args, "executable_path": CHROMIUM, "args": ARGS}


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class DemoSite:
    def __init__(self, root: Path, url: str):
        self.root = root
        self.url = url
        self.slug = (root / "slug").read_text()
        self.token = (root / "token").read_text()

    def page_url(self, path: str) -> str:
        return self.url + path


@pytest.fixture(scope="session")
def demo_site_server(tmp_path_factory):
    """Prepare the demo database in a subprocess, then serve it with ``runserver`` until the session ends."""
    root = tmp_path_factory.mktemp("browser-site")
    site_environment = demo_site.site_environment(root)
    env = {**site_environment, "BAROMETER_EAGER_IN_THREAD": "0"}  # while loading, run the tasks inline
    log = open(root / "prepare.log", "w")
    subprocess.run([sys.executable, "-m", "tests.browser.demo_site", str(root)], cwd=REPO, env=env,
                   stdout=log, stderr=subprocess.STDOUT, check=True)
    port = _free_port()
    server_log = open(root / "server.log", "w")
    proc = subprocess.Popen([sys.executable, "manage.py", "runserver", f"127.0.0.1:{port}", "--noreload",
                             "--skip-checks"], cwd=REPO, env=site_environment, stdout=server_log,
                            stderr=subprocess.STDOUT)
    url = f"http://127.0.0.1:{port}"
    deadline = time.monotonic() + SERVER_START_TIMEOUT
    while True:
        try:
            urllib.request.urlopen(url + "/accounts/login/", timeout=2).read()
            break
        except OSError:
            if proc.poll() is not None or time.monotonic() > deadline:
                proc.kill()
                raise RuntimeError(f"the demo server did not start; see {root / 'server.log'}") from None
            time.sleep(0.3)
    yield DemoSite(root, url)
    proc.terminate()
    try:
        proc.wait(timeout=10)
    except subprocess.TimeoutExpired:
        proc.kill()


@pytest.fixture(scope="session")
def admin_state(browser, demo_site_server, tmp_path_factory):
    """A signed-in admin's cookies, saved once for the session."""
    path = tmp_path_factory.mktemp("state") / "admin.json"
    context = browser.new_context()
    page = context.new_page()
    page.goto(demo_site_server.page_url("/accounts/login/"))
    page.fill("#id_username", demo_site.ADMIN[0])
    page.fill("#id_password", demo_site.ADMIN[1])
    page.click("button[type=submit]")
    page.wait_for_url("**/p/**")
    context.storage_state(path=str(path))
    context.close()
    return str(path)


class Watch:
    """Console errors, uncaught page errors and dialogs seen by a page (dialogs are dismissed)."""

    def __init__(self, page):
        self.errors: list[str] = []
        self.dialogs: list[str] = []
        page.on("console", lambda m: self.errors.append(f"console: {m.text} @ {m.location.get('url')}")
                if m.type == "error" else None)
        page.on("pageerror", lambda exc: self.errors.append(f"pageerror: {exc}"))

        def on_dialog(dialog):
            self.dialogs.append(f"{dialog.type}: {dialog.message}")
            dialog.dismiss()

        page.on("dialog", on_dialog)


@pytest.fixture
def site(demo_site_server):
    return demo_site_server


@pytest.fixture
def admin_page(browser, admin_state):
    context = browser.new_context(storage_state=admin_state, viewport={"width": 1280, "height": 900})
    page = context.new_page()
    page.watch = Watch(page)
    yield page
    context.close()


def screenshot(page, name: str) -> Path:
    ARTIFACTS.mkdir(exist_ok=True)
    path = ARTIFACTS / f"{name}.png"
    page.screenshot(path=str(path), full_page=True)
    return path
