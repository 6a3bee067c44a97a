"""Profile the slowest path relative to its limit (the full ingest) with pyinstrument; keep the text and
HTML reports under bench/data and the heaviest frames in the JSON."""

from __future__ import annotations

import os
import time

from bench.common import log, result_write, section_args
from bench.config import DATA_DIR
from bench.data import dataset_ensure, manifest_rows, rows_prefix
from bench.db import django_setup, project_ensure


def _heaviest(session, limit: int = 15) -> list[dict]:
    """Functions by self time summed over the call tree; pyinstrument's ``[self]`` leaves count for their
    parent function, and frames it hides as library internals keep their own names."""
    totals: dict[tuple[str, str, int], float] = {}

    def walk(frame, parent_key) -> None:
        name = frame.function or "?"
        key = parent_key if name.startswith("[") and parent_key else (name, frame.file_path_short or "",
                                                                      frame.line_no or 0)
        own = frame.time - sum(child.time for child in frame.children)
        totals[key] = totals.get(key, 0.0) + max(own, 0.0)
        for child in frame.children:
            walk(child, key)

    root = session.root_frame()
    if root is not None:
        walk(root, None)
    ranked = sorted(totals.items(), key=lambda kv: -kv[1])[:limit]
    return [{"function": f, "file": p, "line": n, "self_seconds": round(s, 3)} for (f, p, n), s in ranked]


def main() -> None:
    args, scale = section_args(__doc__)
    django_setup()
    from pyinstrument import Profiler

    from bench.common import ingest_rows

    history, _ = dataset_ensure(scale)
    rows, n = rows_prefix(manifest_rows(history), min_results=min(scale.ingest_results, 50_000))
    project_id = project_ensure(history / "components.json")
    profiler = Profiler(interval=0.001)
    profiler.start()
    done = ingest_rows(project_id, rows, build_prefix=f"profiled-{int(time.time())}-")  # new builds every run
    session = profiler.stop()
    folder = DATA_DIR / scale.name
    (folder / "profile_ingest.txt").write_text(profiler.output_text(unicode=False, color=False))
    (folder / "profile_ingest.html").write_text(profiler.output_html())
    log(f"profile: {done['results']} results profiled")
    out = {"path": "full ingest", "results": done["results"], "builds": done["builds"],
           "wall": session.duration, "cpu": session.cpu_time, "heaviest_self": _heaviest(session),
           "text_report": str(folder / "profile_ingest.txt")}
    new_build = os.environ.get("BENCH_NEW_BUILD")
    if new_build:
        out["incremental"] = _profile_incremental(scale, new_build, folder)
    result_write(args.out, out)


def _profile_incremental(scale, new_build: str, folder) -> dict:
    """The refresh after one new build at the large history (the other slow path)."""
    from pyinstrument import Profiler

    from analytics.services.refresh import analytics_refresh_after_build
    from bench.config import db_name
    from bench.db import use_database
    from bench.sections.analytics import _drop_new_build, _new_build

    use_database(db_name(scale.name, "large"))
    project_id, build_id, n = _new_build(new_build)
    profiler = Profiler(interval=0.001)
    profiler.start()
    try:
        analytics_refresh_after_build(project_id=project_id, build_id=build_id)
    finally:
        session = profiler.stop()
        _drop_new_build(project_id)
    (folder / "profile_incremental.txt").write_text(profiler.output_text(unicode=False, color=False))
    log(f"profile: refresh after a {n}-result build at the large history: {session.duration:.1f} s")
    return {"path": "refresh after one build, large history", "results": n, "wall": session.duration,
            "cpu": session.cpu_time, "heaviest_self": _heaviest(session),
            "text_report": str(folder / "profile_incremental.txt")}


if __name__ == "__main__":
    main()
