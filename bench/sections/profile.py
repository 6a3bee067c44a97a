"""Profile the slowest path relative to its limit (the full ingest) with pyinstrument; keep the text and
HTML reports under bench/data and the heaviest frames in the JSON."""

from __future__ import annotations

from bench.common import log, result_write, section_args
from bench.config import DATA_DIR
from bench.data import dataset_ensure, manifest_rows, rows_prefix
from bench.db import django_setup, project_ensure


def _heaviest(session, limit: int = 15) -> list[dict]:
    """Functions by self time (summed over the call tree)."""
    totals: dict[tuple[str, str, int], float] = {}

    def walk(frame) -> None:
        key = (frame.function or "?", frame.file_path_short or "", frame.line_no or 0)
        totals[key] = totals.get(key, 0.0) + frame.total_self_time
        for child in frame.children:
            walk(child)

    root = session.root_frame()
    if root is not None:
        walk(root)
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
    done = ingest_rows(project_id, rows, build_prefix="profiled-")
    session = profiler.stop()
    folder = DATA_DIR / scale.name
    (folder / "profile_ingest.txt").write_text(profiler.output_text(unicode=False, color=False))
    (folder / "profile_ingest.html").write_text(profiler.output_html())
    log(f"profile: {done['results']} results profiled")
    result_write(args.out, {"path": "full ingest", "results": done["results"], "builds": done["builds"],
                            "wall": session.duration, "cpu": session.cpu_time,
                            "heaviest_self": _heaviest(session),
                            "text_report": str(folder / "profile_ingest.txt")})


if __name__ == "__main__":
    main()
