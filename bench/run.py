"""Run the benchmarks: ``python -m bench.run --scale quick|full`` (``make bench-quick`` / ``make bench``).

Each section runs in its own process (own database settings, clean memory figures); a section that fails is
reported in RESULTS.md and the others still run. Writes bench/RESULTS.md and bench/results.json."""

from __future__ import annotations

import argparse
import dataclasses
import json
import os
import platform
import shutil
import subprocess
import sys
import time
from datetime import UTC, datetime
from pathlib import Path

from bench import report
from bench.config import BENCH_DIR, DATA_DIR, PROJECT_SLUG, PYTHON, ROOT, SCALES, Scale, database_url, db_name
from bench.config import django_env as env_for
from bench.db import migrate, pg_analyze, pg_database_create, pg_setting

SECTIONS = ("prepare", "ingest", "memory", "clustering", "analytics", "pages", "load", "profile")
SECTION_TIMEOUT = {"quick": 900, "mid": 1800, "full": 3600}


def log(text: str) -> None:
    print(f"[{time.strftime('%H:%M:%S')}] {text}", flush=True)


def _run_section(module: str, scale: Scale, out: Path, *, env: dict, which: str = "", vendor: str = "postgresql"):
    cmd = [PYTHON, "-m", f"bench.sections.{module}", "--scale", scale.name, "--out", str(out), "--vendor", vendor]
    if which:
        cmd += ["--which", which]
    started = time.perf_counter()
    proc = subprocess.run(cmd, cwd=ROOT, env=env, stderr=subprocess.PIPE, text=True,
                          timeout=SECTION_TIMEOUT[scale.name])
    sys.stderr.write(proc.stderr)
    if proc.returncode != 0:
        tail = proc.stderr.strip().splitlines()[-3:]
        raise RuntimeError(f"exit {proc.returncode}: " + " / ".join(tail))
    log(f"{module}{'[' + which + ']' if which else ''} done in {time.perf_counter() - started:.0f} s")
    return json.loads(out.read_text())


def _machine() -> dict:
    def cmd(args: list[str]) -> str:
        try:
            return subprocess.run(args, capture_output=True, text=True, timeout=20).stdout.strip()
        except (OSError, subprocess.TimeoutExpired):
            return "?"

    import django
    import lxml.etree
    import sklearn

    cpu = next((line.split(":", 1)[1].strip() for line in open("/proc/cpuinfo") if line.startswith("model name")), "?")
    mem = next((line.split()[1] for line in open("/proc/meminfo") if line.startswith("MemTotal")), "0")
    import sqlite3
    from importlib.metadata import version

    return {
        "host": platform.node(),
        "os": platform.platform(),
        "cpu": f"{cpu} × {os.cpu_count()}",
        "memory": f"{int(mem) / 2**20:.1f} GiB",
        "load average at start": " ".join(f"{x:.1f}" for x in os.getloadavg()),
        "python": platform.python_version(),
        "django": django.get_version(),
        "postgresql": cmd(["psql", "-h", "127.0.0.1", "-U", "postgres", "-qAtc", "SHOW server_version"]),
        "sqlite": sqlite3.sqlite_version,
        "lxml": ".".join(map(str, lxml.etree.LXML_VERSION)),
        "junitparser": version("junitparser"),
        "scikit-learn": sklearn.__version__,
        "psycopg": version("psycopg"),
        "gunicorn": version("gunicorn"),
        "celery": version("celery"),
        "postgresql autovacuum": pg_setting("autovacuum") + " (the benchmark runs VACUUM ANALYZE after loading)",
    }


def _git() -> str:
    head = subprocess.run(["git", "rev-parse", "--short", "HEAD"], cwd=ROOT, capture_output=True, text=True).stdout
    dirty = subprocess.run(["git", "status", "--porcelain", "--untracked-files=no"], cwd=ROOT, capture_output=True,
                           text=True).stdout
    return head.strip() + (" (working tree with uncommitted changes of others)" if dirty.strip() else "")


def _ingest_code_sha() -> str:
    """Hash of the ingest code and the migrations: a history loaded by other code is loaded again."""
    import hashlib

    digest = hashlib.sha256()
    for path in sorted([*ROOT.glob("ingest/**/*.py"), *ROOT.glob("analytics/migrations/*.py")]):
        digest.update(path.read_bytes())
    return digest.hexdigest()[:16]


def _prepare_db(scale: Scale, which: str, info: dict, parts: Path, results: dict) -> None:
    """Create and load the small/large history database unless an identical one is there already."""
    stamp = DATA_DIR / scale.name / f"{which}.db.json"
    wanted = {"params_sha": info["params_sha"], "small_results": scale.small_results, "ingest_code": _ingest_code_sha()}
    url = database_url(scale.name, which)
    if stamp.exists() and json.loads(stamp.read_text()).get("key") == wanted:
        migrate(url)
        pg_analyze(db_name(scale.name, which))
        results["sections"][f"prepare_{which}"] = json.loads(stamp.read_text())["data"]
        results["facts"].append(f"{which} history database reused from an earlier run with the same data")
        return
    pg_database_create(db_name(scale.name, which), drop=True)
    migrate(url)
    data = _run_section("prepare", scale, parts / f"prepare_{which}.json", env=env_for(url), which=which)
    pg_analyze(db_name(scale.name, which))
    stamp.write_text(json.dumps({"key": wanted, "data": data}))
    results["sections"][f"prepare_{which}"] = data


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__)
    p.add_argument("--scale", choices=sorted(SCALES), default="quick")
    p.add_argument("--only", nargs="*", choices=SECTIONS, help="run only these sections")
    p.add_argument("--no-sqlite", action="store_true")
    p.add_argument("--repeats", type=int, help="override the scale's number of repeats (partial runs)")
    p.add_argument("--merge", action="store_true",
                   help="keep the other sections of the existing results.json and replace only those run now")
    p.add_argument("--render", action="store_true", help="only re-render RESULTS.md from results.json")
    p.add_argument("--out-dir", type=Path, default=BENCH_DIR,
                   help="where RESULTS.md and results.json go (default bench/; partial runs: elsewhere)")
    args = p.parse_args(argv)
    findings = BENCH_DIR / "FINDINGS.md"
    out_dir: Path = args.out_dir
    if args.render:
        results = json.loads((out_dir / "results.json").read_text())
        results["errors"] = {k: v for k, v in results.get("errors", {}).items() if not k.startswith("summary of")}
        results["facts"] = [f for f in results.get("facts", []) if "reused from an earlier run" in f]
        results["not_measured"] = []
        summarise_results(results, SCALES[results["meta"]["scale"]])
        (out_dir / "RESULTS.md").write_text(report.render(results, findings.read_text() if findings.exists() else ""))
        return 0
    scale = SCALES[args.scale]
    if args.repeats:
        scale = dataclasses.replace(scale, repeats=args.repeats)
        os.environ["BENCH_REPEATS"] = str(args.repeats)
    only = set(args.only or SECTIONS)
    work = DATA_DIR / scale.name
    parts = work / "parts"
    parts.mkdir(parents=True, exist_ok=True)
    results: dict = {"meta": {"scale": scale.name, "started": datetime.now(UTC).strftime("%Y-%m-%d %H:%M"),
                              "git": _git(), "machine": _machine(), "notes": list(scale.notes)},
                     "sections": {}, "errors": {}, "facts": [], "not_measured": []}
    if args.repeats:
        results["meta"]["notes"].append(f"repeats set to {args.repeats} for this run (--repeats)")
    if args.merge and (out_dir / "results.json").exists():
        earlier = json.loads((out_dir / "results.json").read_text())
        note = (f"sections re-run at {datetime.now(UTC).strftime('%H:%M')} and merged in (not part of the "
                f"timed run above): " + ", ".join(sorted(only)))
        earlier["meta"]["notes"] = [n for n in earlier["meta"]["notes"] if "merged in" not in n] + [note]
        results = {**earlier, "errors": {k: v for k, v in earlier.get("errors", {}).items()
                                         if not any(k.startswith(n) for n in only)},
                   "facts": [], "not_measured": []}
    elif only != set(SECTIONS):
        results["meta"]["notes"].append("partial run: only " + ", ".join(s for s in SECTIONS if s in only))

    def attempt(name: str, fn) -> None:
        try:
            fn()
        except Exception as exc:  # noqa: BLE001 - recorded, the run goes on
            log(f"{name} FAILED: {exc}")
            results["errors"][name] = str(exc)[:800]

    sys.path.insert(0, str(ROOT))
    from bench.data import (
        dataset_ensure,
        distinct_results,
        junit_big_write,
        junit_build_write,
        manifest_rows,
    )

    log(f"scale {scale.name}: generating (or reusing) the history")
    history, info = dataset_ensure(scale)
    rows = manifest_rows(history)
    latest = [r["_path"] for r in reversed(rows)][:200]
    sample = distinct_results(latest, max(scale.new_build_results, scale.upload_results))
    new_build = work / "new-build.xml"
    junit_build_write(new_build, sample, count=scale.new_build_results, variant="new")
    uploads = work / "uploads"
    if uploads.exists():
        shutil.rmtree(uploads)
    for i in range(scale.uploads):
        junit_build_write(uploads / f"upload-{i:03d}.xml", sample, count=scale.upload_results, variant=f"u{i}")
    results["meta"]["sizes"] = {
        "large history": f"{info['results']:,} results, {info['test_cases']:,} test cases, {info['builds']:,} "
                         f"builds, {info['failed_results']:,} failed results, {info['defects']:,} defects "
                         f"(generator: {info['params']})",
        "small history": f"the most recent builds of the same history holding at least {scale.small_results:,} results",
        "ingest corpora": f"(1) the first builds of the history and (2) only its nightly full runs, each holding at "
                          f"least {scale.ingest_results:,} results",
        "repeats": scale.repeats,
    }
    (DATA_DIR / "media").mkdir(parents=True, exist_ok=True)

    if args.merge and "prepare" not in only and {"analytics", "pages", "load"} & only:
        results["meta"]["notes"][-1] += " (and prepare: the history databases they need)"
    if "prepare" in only or {"analytics", "pages", "load"} & only:
        for which in ("small", "large"):
            attempt(f"prepare {which}", lambda w=which: _prepare_db(scale, w, info, parts, results))

    if "ingest" in only:
        def ingest_pg():
            pg_database_create(db_name(scale.name, "ingest"), drop=True)
            url = database_url(scale.name, "ingest")
            migrate(url)
            results["sections"]["ingest_pg"] = _run_section("ingest", scale, parts / "ingest_pg.json", env=env_for(url))

        def ingest_sqlite():
            path = work / "ingest.sqlite3"
            path.unlink(missing_ok=True)
            url = database_url(scale.name, "ingest", vendor="sqlite")
            migrate(url)
            results["sections"]["ingest_sqlite"] = _run_section(
                "ingest", scale, parts / "ingest_sqlite.json", env=env_for(url), vendor="sqlite")

        attempt("ingest PostgreSQL", ingest_pg)
        if not args.no_sqlite:
            attempt("ingest SQLite", ingest_sqlite)

    if "memory" in only:
        def memory():
            big = work / f"big-report-{scale.memory_file_mb}MB.xml"
            if not big.exists():
                cases, size = junit_big_write(big, sample, megabytes=scale.memory_file_mb)
                log(f"memory: wrote {big} ({size / 2**20:.0f} MB, {cases:,} testcases)")
            pg_database_create(db_name(scale.name, "memory"), drop=True)
            url = database_url(scale.name, "memory")
            migrate(url)
            env = env_for(url, BENCH_BIG_FILE=str(big), BENCH_PROJECT=PROJECT_SLUG)
            subprocess.run([PYTHON, "manage.py", "shell", "-c",
                            f"from ingest.models import Project; Project.objects.get_or_create(slug='{PROJECT_SLUG}',"
                            f" defaults={{'name': 'Berthwise'}})"], cwd=ROOT, env=env, check=True)
            idle = _run_section("memory", scale, parts / "memory_idle.json", env=env, which="idle")
            ingest = _run_section("memory", scale, parts / "memory_ingest.json", env=env, which="ingest")
            results["sections"]["memory"] = {"idle": idle, "ingest": ingest}

        attempt("memory", memory)

    if "clustering" in only:
        attempt("clustering", lambda: results["sections"].__setitem__(
            "clustering", _run_section("clustering", scale, parts / "clustering.json",
                                       env=env_for(database_url(scale.name, "large")))))

    if "analytics" in only:
        attempt("analytics", lambda: results["sections"].__setitem__(
            "analytics", _run_section("analytics", scale, parts / "analytics.json",
                                      env=env_for(database_url(scale.name, "large"),
                                                  BENCH_NEW_BUILD=str(new_build)))))

    if "pages" in only:
        attempt("pages", lambda: results["sections"].__setitem__(
            "pages", _run_section("pages", scale, parts / "pages.json",
                                  env=env_for(database_url(scale.name, "large")))))

    if "load" in only:
        def load():
            name = db_name(scale.name, "load")
            subprocess.run(["psql", "-h", "127.0.0.1", "-U", "postgres", "-qc",
                            f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'], check=True)
            subprocess.run(["psql", "-h", "127.0.0.1", "-U", "postgres", "-qc",
                            f'CREATE DATABASE "{name}" OWNER barometer TEMPLATE "{db_name(scale.name, "small")}"'],
                           check=True)
            url = database_url(scale.name, "load")
            results["sections"]["load"] = _run_section(
                "load", scale, parts / "load.json",
                env={**env_for(url), "BENCH_LOAD_DB": url, "BENCH_UPLOADS": str(uploads)})

        attempt("load", load)

    if "profile" in only:
        attempt("profile", lambda: results["sections"].__setitem__(
            "profile", _run_section("profile", scale, parts / "profile.json",
                                    env=env_for(database_url(scale.name, "ingest"),
                                                BENCH_NEW_BUILD=str(new_build)))))

    results["meta"]["finished"] = datetime.now(UTC).strftime("%Y-%m-%d %H:%M")
    results["meta"]["machine"]["load average at end"] = " ".join(f"{x:.1f}" for x in os.getloadavg())
    summarise_results(results, scale)
    out_dir.mkdir(parents=True, exist_ok=True)
    (out_dir / "results.json").write_text(json.dumps(results, indent=1, default=str) + "\n")
    (out_dir / "RESULTS.md").write_text(report.render(results, findings.read_text() if findings.exists() else ""))
    log(f"wrote {out_dir / 'RESULTS.md'} and results.json")
    return 0


def summarise_results(results: dict, scale: Scale) -> None:
    """Fill ``targets``, ``figures`` and the notes from the raw sections (errors become notes, not crashes)."""
    s = results["sections"]
    targets, figures = [], []

    def add(name: str, fn) -> None:
        try:
            fn()
        except (KeyError, ValueError, ZeroDivisionError, TypeError) as exc:
            results["errors"][f"summary of {name}"] = f"{type(exc).__name__}: {exc}"

    for key, vendor in (("ingest_pg", "PostgreSQL"), ("ingest_sqlite", "SQLite")):
        for corpus, data in s.get(key, {}).get("corpora", {}).items():
            lb = f"{vendor}, {corpus}"
            add(key, lambda d=data, lb=lb: (targets.extend(report.ingest_checks(d, label=lb)),
                                            figures.extend(report.ingest_figures(d, label=lb))))
            add(key, lambda d=data, lb=lb: results["facts"].append(report.ingest_overhead_fact(d, label=lb)))
    for which in ("small", "large"):
        data = s.get(f"prepare_{which}")
        if data:
            figures.append({"figure": f"loading the {which} history ({data['results']:,} results, full ingest)",
                            "wall": report.summarise([data["load"]["wall"]]).as_dict(),
                            "cpu": report.summarise([data["load"]["cpu"]]).as_dict(),
                            "rows_per_s": report.rows_per_second(data["results"], [data["load"]["wall"]]).as_dict()})
    if "memory" in s:
        m = s["memory"]
        add("memory", lambda: targets.append(report.memory_check(m["idle"], m["ingest"])))
        results["facts"].append(
            f"memory: idle Django process {m['idle']['rss_mb']:.0f} MB RSS; ingesting {m['ingest']['results']:,} "
            f"results from {m['ingest']['file_mb']:.0f} MB took {m['ingest']['seconds']:.0f} s with peak RSS "
            f"{m['ingest']['peak_mb']:.0f} MB (RSS before the import {m['ingest']['rss_before_mb']:.0f} MB)")
    if "clustering" in s:
        c = s["clustering"]
        add("clustering", lambda: targets.extend(report.clustering_check(c)))
        for key, title in (("signatures", "failure signatures of every failure"),
                           ("tfidf_distinct", "TF-IDF of the distinct signatures"),
                           ("cluster_fit", "FailureClusterer.fit on every failure")):
            if key in c["timings"]:
                figures.append({"figure": f"clustering: {title}", "wall": report.summarise(c["timings"][key]["wall"]).as_dict(),
                                "cpu": report.summarise(c["timings"][key]["cpu"]).as_dict()})
        results["facts"].append(f"clustering: {c['failures']:,} failures, {c['distinct_signatures']:,} distinct "
                                f"signatures, {c['clusters']} clusters")
    if "analytics" in s:
        a = s["analytics"]
        add("analytics", lambda: targets.extend(report.incremental_check(a)))
        for which in ("small", "large"):
            if which in a.get("incremental", {}):
                figures.append({"figure": f"refresh after a new {scale.new_build_results:,}-result build, {which} history",
                                "wall": report.summarise(a["incremental"][which]["wall"]).as_dict(),
                                "cpu": report.summarise(a["incremental"][which]["cpu"]).as_dict()})
            split = a.get("after_build_steps", {}).get(which)
            if split:
                parts = ", ".join(f"{k} {report.summarise(v).median:.2f} s" for k, v in split.items())
                results["facts"].append(f"refresh after one new build at the {which} history, by detector (median "
                                        f"wall seconds over the repeats): {parts}")
            full = a.get("full", {}).get(which)
            if full:
                steps = ", ".join(f"{k} {v['seconds']:.1f} s ({v['rows']:,} rows)" for k, v in full["steps"].items())
                results["facts"].append(f"full analytics refresh at the {which} history: {full['wall']:.1f} s wall, "
                                        f"{full['cpu']:.1f} s CPU; by detector (AnalyticsRun rows): {steps}")
    if "pages" in s:
        p = s["pages"]
        for item in p.get("missing", []):
            results["not_measured"].append(f"{item}: does not resolve yet (being built by others)")

        def pages():
            checks, figs = report.page_checks(p["pages"], rounds=scale.repeats)
            targets.extend(checks)
            results["page_figures"] = figs

        add("pages", pages)
    if "load" in s:
        ld = s["load"]

        def load():
            results["load_checks"] = report.load_checks(ld, expected_rows=scale.upload_results)
            figs = [f"{ld['uploads']} concurrent uploads of {scale.upload_results:,} results: all answered in "
                    f"{ld['upload_wall']:.1f} s ({ld['uploads'] / ld['upload_wall']:.1f} uploads/s, upload p95 "
                    f"{ld['upload_p95']:.2f} s); all jobs done {ld['all_jobs_done_seconds']:.1f} s after the start "
                    f"({ld['uploads'] * scale.upload_results / ld['all_jobs_done_seconds']:,.0f} results/s through "
                    f"the Celery worker); the after-build analytics refreshes they queued were all taken "
                    f"{ld.get('queue_drained_seconds', float('nan')):.1f} s after the start "
                    f"({ld.get('queue_left', '?')} left in the queue)"]
            if ld.get("reads"):
                figs.append(f"page reads during the uploads ({', '.join(ld['pages'])}): {ld['reads']} requests, "
                            f"{ld['reads_per_second']:.1f} requests/s, median {ld['read_median'] * 1000:.0f} ms, "
                            f"p95 {ld['read_p95'] * 1000:.0f} ms, {ld['read_errors']} errors")
            for name in ld.get("missing_pages", []):
                results["not_measured"].append(f"load: page {name} not read during the uploads (does not resolve yet)")
            results["load_figures"] = figs

        add("load", load)
    if "profile" in s:
        pr = s["profile"]
        top = ", ".join(f"{h['function']} ({h['file']}) {h['self_seconds']:.1f} s" for h in pr["heaviest_self"][:6])
        results["facts"].append(f"profile of the full ingest ({pr['results']:,} results, {pr['wall']:.0f} s wall, "
                                f"{pr['cpu']:.0f} s CPU): heaviest self time: {top}; report {pr['text_report']}")
        inc = pr.get("incremental")
        if inc:
            top = ", ".join(f"{h['function']} ({h['file']}) {h['self_seconds']:.1f} s" for h in inc["heaviest_self"][:6])
            results["facts"].append(f"profile of the refresh after one build at the large history ({inc['wall']:.0f} s "
                                    f"wall, {inc['cpu']:.0f} s CPU): heaviest self time: {top}; report {inc['text_report']}")
    results["targets"] = [c.as_dict() for c in targets]
    results["figures"] = figures


if __name__ == "__main__":
    raise SystemExit(main())
