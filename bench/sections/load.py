"""Load: gunicorn (2 workers) and a real Celery worker (prefork, 2 processes) on a copy of the small history;
N concurrent CI uploads through the API while a small client reads the overview and flaky pages.

Run by bench.run with BENCH_LOAD_DB (database URL), BENCH_UPLOADS (folder of the upload files) set."""

from __future__ import annotations

import http.client
import json
import os
import signal
import socket
import subprocess
import threading
import time
import uuid
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from urllib.parse import urlencode

from bench.common import log, result_write, section_args
from bench.config import DATA_DIR, PROJECT_SLUG, PYTHON, ROOT, django_env
from bench.stats import percentile

BROKER = "redis://127.0.0.1:6379/1"
READ_PAGES = ("overview", "flaky-list")
JOB_TIMEOUT = 900


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _django(code: str, env: dict) -> str:
    out = subprocess.run([PYTHON, "-c", "import django; django.setup()\n" + code], cwd=ROOT, env=env,
                         capture_output=True, text=True, check=True)
    return out.stdout.strip()


def _multipart(fields: dict, files: list[tuple[str, bytes]]) -> tuple[bytes, str]:
    boundary = uuid.uuid4().hex
    parts = []
    for key, value in fields.items():
        parts.append(f'--{boundary}\r\nContent-Disposition: form-data; name="{key}"\r\n\r\n{value}\r\n'.encode())
    for name, data in files:
        parts.append(
            f'--{boundary}\r\nContent-Disposition: form-data; name="files"; filename="{name}"\r\n'
            f"Content-Type: application/xml\r\n\r\n".encode() + data + b"\r\n"
        )
    parts.append(f"--{boundary}--\r\n".encode())
    return b"".join(parts), f"multipart/form-data; boundary={boundary}"


def _request(port: int, method: str, path: str, *, body: bytes | None = None, headers: dict | None = None):
    conn = http.client.HTTPConnection("127.0.0.1", port, timeout=120)
    try:
        conn.request(method, path, body=body, headers=headers or {})
        resp = conn.getresponse()
        return resp.status, resp.read(), resp.getheaders()
    finally:
        conn.close()


def _login(port: int, username: str, password: str) -> str:
    """Session cookie header of a signed-in viewer (through the real login form)."""
    status, body, headers = _request(port, "GET", "/accounts/login/")
    cookies = {}
    for key, value in headers:
        if key.lower() == "set-cookie":
            name, _, rest = value.partition("=")
            cookies[name] = rest.split(";", 1)[0]
    token = cookies.get("csrftoken", "")
    form = urlencode({"username": username, "password": password, "csrfmiddlewaretoken": token}).encode()
    status, body, headers = _request(port, "POST", "/accounts/login/", body=form, headers={
        "Content-Type": "application/x-www-form-urlencoded", "Cookie": f"csrftoken={token}",
        "Referer": f"http://127.0.0.1:{port}/accounts/login/"})
    for key, value in headers:
        if key.lower() == "set-cookie" and value.startswith("sessionid="):
            cookies["sessionid"] = value.split(";", 1)[0].partition("=")[2]
    if "sessionid" not in cookies:
        raise RuntimeError(f"login failed (status {status})")
    return f"sessionid={cookies['sessionid']}; csrftoken={token}"


def _wait_ready(port: int, proc: subprocess.Popen, timeout: float = 60) -> None:
    end = time.time() + timeout
    while time.time() < end:
        if proc.poll() is not None:
            raise RuntimeError("gunicorn exited during start-up")
        try:
            status, _, _ = _request(port, "GET", "/accounts/login/")
            if status == 200:
                return
        except OSError:
            pass
        time.sleep(0.5)
    raise RuntimeError("gunicorn did not answer in time")


def _queue_drain(deadline: float) -> int:
    """Wait until the worker has taken every queued task (the after-build refreshes); returns what is left."""
    import redis

    client = redis.Redis.from_url(BROKER)
    left = client.llen("celery")
    while left and time.time() < deadline:
        time.sleep(1)
        left = client.llen("celery")
    # give the last task taken a moment to finish before the worker is stopped (warm shutdown waits too)
    return int(left)


def main() -> None:
    args, scale = section_args(__doc__)
    db_url = os.environ["BENCH_LOAD_DB"]
    uploads = sorted(Path(os.environ["BENCH_UPLOADS"]).glob("*.xml"))[: scale.uploads]
    env = django_env(db_url, CELERY_BROKER_URL=BROKER, MEDIA_ROOT=str(DATA_DIR / "media-load"))
    password = uuid.uuid4().hex
    key = _django(
        "from ingest.models import ApiToken, Project\n"
        "from django.contrib.auth import get_user_model\n"
        f"u, _ = get_user_model().objects.get_or_create(username='bench-viewer')\n"
        f"u.set_password('{password}'); u.save()\n"
        f"print(ApiToken.issue(project=Project.objects.get(slug='{PROJECT_SLUG}'), name='bench load')[1])\n",
        env,
    )

    pages = json.loads(_django(
        "import json\nfrom django.urls import reverse, NoReverseMatch\nout = {}\n"
        f"for n in {READ_PAGES!r}:\n"
        "    try: out[n] = reverse(n, kwargs={'slug': '" + PROJECT_SLUG + "'})\n"
        "    except NoReverseMatch: pass\n"
        "print(json.dumps(out))\n", env))
    port = _free_port()
    logs = DATA_DIR / scale.name / "load-logs"
    logs.mkdir(parents=True, exist_ok=True)
    procs: list[subprocess.Popen] = []
    result: dict = {"uploads": len(uploads), "pages": pages, "missing_pages": [p for p in READ_PAGES if p not in pages]}
    try:
        worker = subprocess.Popen(
            [str(ROOT / ".venv/bin/celery"), "-A", "config", "worker", "--pool=prefork", "--concurrency=2",
             "--loglevel=WARNING", "-n", f"bench-{uuid.uuid4().hex[:6]}@%h"],
            cwd=ROOT, env=env, stdout=open(logs / "celery.log", "w"), stderr=subprocess.STDOUT,
            start_new_session=True)
        procs.append(worker)
        web = subprocess.Popen(
            [str(ROOT / ".venv/bin/gunicorn"), "config.wsgi", "-w", "2", "-b", f"127.0.0.1:{port}",
             "--timeout", "300", "--log-level", "warning"],
            cwd=ROOT, env=env, stdout=open(logs / "gunicorn.log", "w"), stderr=subprocess.STDOUT,
            start_new_session=True)
        procs.append(web)
        _wait_ready(port, web)
        cookie = _login(port, "bench-viewer", password) if pages else ""
        log(f"load: gunicorn on {port}, worker started; {len(uploads)} uploads, reading {list(pages)}")
        stop = threading.Event()
        reads: list[tuple[str, float, int]] = []

        def reader() -> None:
            while not stop.is_set():
                for name, url in pages.items():
                    t = time.perf_counter()
                    try:
                        status, _, _ = _request(port, "GET", url, headers={"Cookie": cookie})
                    except OSError:
                        status = 0
                    reads.append((name, time.perf_counter() - t, status))

        def upload(i: int, path: Path) -> dict:
            body, ctype = _multipart({"build": f"bench-load-{i:03d}", "commit": f"{i:040x}", "branch": "main",
                                      "ci_job": "pr-checks", "started": "2026-11-30T08:00:00Z"},
                                     [(path.name, path.read_bytes())])
            t = time.perf_counter()
            status, data, _ = _request(port, "POST", f"/api/v1/projects/{PROJECT_SLUG}/results/", body=body,
                                       headers={"Authorization": f"Bearer {key}", "Content-Type": ctype})
            return {"status": status, "seconds": time.perf_counter() - t, "body": json.loads(data or b"{}")}

        readers = [threading.Thread(target=reader, daemon=True) for _ in range(2 if pages else 0)]
        started = time.perf_counter()
        for th in readers:
            th.start()
        with ThreadPoolExecutor(len(uploads)) as pool:
            posted = list(pool.map(lambda a: upload(*a), enumerate(uploads)))
        upload_wall = time.perf_counter() - started
        jobs = []
        deadline = time.time() + JOB_TIMEOUT
        for item in posted:
            url = item["body"].get("url", "")
            path = url.split("://", 1)[-1]
            path = path[path.index("/"):] if "/" in path else path
            job = {}
            while path and time.time() < deadline:
                status, data, _ = _request(port, "GET", path, headers={"Authorization": f"Bearer {key}"})
                job = json.loads(data or b"{}")
                if job.get("status") in ("done", "failed"):
                    break
                time.sleep(1)
            jobs.append({"status": job.get("status"), "tests": (job.get("counts") or {}).get("tests"),
                         "error": job.get("error", "")})
        all_done = time.perf_counter() - started
        queue_left = _queue_drain(deadline)  # the analytics refresh each import queued
        drained = time.perf_counter() - started
        stop.set()
        for th in readers:
            th.join(timeout=120)
        read_s = [r[1] for r in reads]
        result.update({
            "upload_status": [p["status"] for p in posted],
            "upload_seconds": [p["seconds"] for p in posted],
            "upload_wall": upload_wall,
            "all_jobs_done_seconds": all_done,
            "queue_drained_seconds": drained,
            "queue_left": queue_left,
            "jobs": jobs,
            "jobs_ok": sum(1 for j in jobs if j["status"] == "done" and j["tests"] == scale.upload_results),
            "reads": len(reads),
            "read_errors": sum(1 for r in reads if r[2] != 200),
            "reads_per_second": len(reads) / drained if drained else 0.0,  # readers ran until the queue drained
            "read_p95": percentile(read_s, 95) if read_s else None,
            "read_median": sorted(read_s)[len(read_s) // 2] if read_s else None,
            "upload_p95": percentile([p["seconds"] for p in posted], 95),
            "upload_errors": sum(1 for p in posted if p["status"] != 202),
        })
        log(f"load: {result['jobs_ok']}/{len(uploads)} jobs done with {scale.upload_results} rows; "
            f"{len(reads)} reads, {result['read_errors']} errors")
    finally:
        for proc in procs:  # SIGTERM to the main process: warm shutdown, running tasks finish
            if proc.poll() is None:
                proc.send_signal(signal.SIGTERM)
        for proc in procs:
            try:
                proc.wait(timeout=90)
            except subprocess.TimeoutExpired:
                os.killpg(proc.pid, signal.SIGKILL)  # the group this run started (start_new_session)
    result_write(args.out, result)


if __name__ == "__main__":
    main()
