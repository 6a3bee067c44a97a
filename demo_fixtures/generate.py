"""Write the invented Berthwise history as real-format files: JUnit-XML reports, a defect export, metadata.

Usage::

    python -m demo_fixtures.generate [--out DIR] [--scale demo|bench|custom] [--seed N]
                                     [--tests N --days N --builds-per-day N --defects N]

Files written under ``DIR`` (default ``demo_fixtures/data/``, not committed):

``reports/<build>.xml``
    One JUnit-XML report per build, in the dialect of the components it ran (see :mod:`.reports`).
``manifest.csv``
    ``build,file,commit,branch,started,ci_job``: one row per report, oldest first; ``file`` is relative to
    the manifest's folder, ``started`` is ISO 8601 UTC with ``Z``.
``defects.csv`` and ``defects.columnmap.json``
    The tracker export (our own invented column names) and the column map that reads it.
``components.json``
    Project, components, classname prefixes and component aliases.
``ground_truth.json``
    What was planted (flaky tests, regressions, failure causes, defect-inflow parameters, duplicates);
    for tests and analytics checks only, never read by the app.

The output depends only on the parameters: no clock is read and every draw comes from the seed, so two runs
with the same parameters write byte-identical files.
"""

from __future__ import annotations

import argparse
import csv
import io
import json
import random
import re
import sys
import time
from dataclasses import asdict, dataclass
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np

from demo_fixtures.defects import build_defects, column_map
from demo_fixtures.reports import ReportWriter
from demo_fixtures.scenario import (
    COMPONENTS,
    GROWING_COMPONENT,
    GROWTH_FORMULA,
    Catalogue,
    Faults,
    ScenarioParams,
    Timeline,
    build_catalogue,
    build_timeline,
    plant_faults,
)
from demo_fixtures.texts import (
    CAUSES,
    PROJECT_NAME,
    PROJECT_SLUG,
    REGRESSION_TEMPLATES,
    jvm_tail,
)

DEFAULT_OUT = Path(__file__).resolve().parent / "data"
MANIFEST_COLUMNS = ("build", "file", "commit", "branch", "started", "ci_job")
REPORT_NAME = re.compile(r"^(pr-checks|main-merge|nightly-full)-\d+\.xml$")
SUREFIRE_RERUNS = 2
PYTEST_RERUNS = 1


@dataclass(frozen=True)
class GenerationSummary:
    """What :func:`generate` wrote."""

    out_dir: Path
    params: ScenarioParams
    builds: int
    test_cases: int
    testcase_elements: int
    results: int  # attempts, as the JUnit reader yields them
    failed_results: int
    defects: int
    bytes_written: int


def _iso_z(moment: datetime) -> str:
    return moment.astimezone(UTC).strftime("%Y-%m-%dT%H:%M:%SZ")


def _streams(seed: int) -> list[tuple[random.Random, np.random.Generator]]:
    """Independent random streams, so that e.g. more defects do not change the reports."""
    out = []
    for child in np.random.SeedSequence(seed).spawn(5):
        out.append(
            (
                random.Random(int(child.generate_state(1)[0])),
                np.random.default_rng(child),
            )
        )
    return out


def _write(path: Path, text: str) -> int:
    data = text.encode("utf-8")
    path.write_bytes(data)
    return len(data)


def generate(out_dir: Path, *, params: ScenarioParams) -> GenerationSummary:
    """Generate the scenario into ``out_dir`` (created if needed).

    Report files from an earlier run in ``out_dir/reports`` (names written by this generator only) are
    removed first, so the folder always matches the manifest.
    """
    out_dir = Path(out_dir)
    reports_dir = out_dir / "reports"
    reports_dir.mkdir(parents=True, exist_ok=True)
    for old in sorted(reports_dir.iterdir()):
        if old.is_file() and REPORT_NAME.match(old.name):
            old.unlink()

    (
        (_, cat_rng),
        (tl_rnd, _),
        (f_rnd, f_rng),
        (run_rnd, run_rng),
        (d_rnd, d_rng),
    ) = _streams(params.seed)
    catalogue = build_catalogue(params, cat_rng)
    timeline = build_timeline(params, tl_rnd, catalogue)
    faults = plant_faults(params, f_rnd, f_rng, catalogue, timeline)
    start = datetime.combine(params.start_date, datetime.min.time(), tzinfo=UTC)
    rerun_from = start + timedelta(days=round(params.n_days * 0.35))
    writer = ReportWriter(
        catalogue=catalogue,
        faults=faults,
        rnd=run_rnd,
        rng=run_rng,
        rerun_from=rerun_from,
    )

    written = 0
    manifest = io.StringIO()
    rows = csv.writer(manifest, lineterminator="\n")
    rows.writerow(MANIFEST_COLUMNS)
    for build in timeline.builds:
        outcome = writer.simulate(build)
        hostname = f"ci-runner-{run_rnd.randint(1, 12):02d}"
        written += _write(reports_dir / f"{build.id}.xml", writer.render(build, outcome, hostname))
        rows.writerow(
            [
                build.id,
                f"reports/{build.id}.xml",
                build.commit,
                build.branch,
                _iso_z(build.started),
                build.job,
            ]
        )
    written += _write(out_dir / "manifest.csv", manifest.getvalue())

    export = build_defects(params, d_rnd, d_rng, faults.causes)
    written += _write(out_dir / "defects.csv", export.csv_text)
    written += _write(out_dir / "defects.columnmap.json", json.dumps(column_map(), indent=2) + "\n")
    written += _write(out_dir / "components.json", json.dumps(components_document(), indent=2) + "\n")
    truth = ground_truth(params, catalogue, timeline, faults, export, rerun_from)
    written += _write(out_dir / "ground_truth.json", json.dumps(truth, indent=1) + "\n")

    return GenerationSummary(
        out_dir=out_dir,
        params=params,
        builds=len(timeline.builds),
        test_cases=len(catalogue.tests),
        testcase_elements=writer.tally.testcase_elements,
        results=writer.tally.attempts,
        failed_results=writer.tally.failed_attempts,
        defects=export.count,
        bytes_written=written,
    )


def components_document() -> dict[str, object]:
    """The project and its components, with classname prefixes and aliases."""
    return {
        "project": {"slug": PROJECT_SLUG, "name": PROJECT_NAME},
        "components": [
            {
                "name": c.name,
                "classname_prefixes": [c.package + "."],
                "aliases": list(c.aliases),
            }
            for c in COMPONENTS
        ],
    }


def _test_ref(catalogue: Catalogue, t: int) -> dict[str, str]:
    spec = catalogue.tests[t]
    return {
        "classname": spec.classname,
        "name": spec.name,
        "component": COMPONENTS[spec.component].name,
    }


def ground_truth(
    params: ScenarioParams,
    catalogue: Catalogue,
    timeline: Timeline,
    faults: Faults,
    export: object,
    rerun_from: datetime,
) -> dict[str, object]:
    """Everything planted in the scenario, as plain JSON-ready data."""
    main = timeline.main_commits
    scenario = asdict(params)
    scenario["end_date"] = params.end_date.isoformat()
    scenario["start_date"] = params.start_date.isoformat()

    def reg_doc(r):  # type: ignore[no-untyped-def]
        lang = COMPONENTS[catalogue.tests[r.tests[0]].component].language
        tpl = REGRESSION_TEMPLATES[lang][r.template]
        want, got, field = r.values
        getter = "get" + "".join(w.capitalize() for w in field.split("_"))
        values = {"want": want, "got": got, "field": field, "getter": getter}
        return {
            "id": r.id,
            "tests": [_test_ref(catalogue, t) for t in r.tests],
            "introduced_at_commit": main[r.intro_main] if r.intro_main >= 0 else None,
            "introduced_on_branch": r.intro_branch.name if r.intro_branch else None,
            "fixed_at_commit": main[r.fix_main] if r.fix_main is not None else None,
            "fixed_on_branch": r.fix_branch.name if r.fix_branch else None,
            "outcome": tpl.outcome,
            "message_template": tpl.message.format_map(_Keep(values)),
        }

    causes = []
    for cause in faults.causes:
        spec = CAUSES[cause.spec_index]
        causes.append(
            {
                "id": spec.id,
                "description": spec.description,
                "components": list(spec.components),
                "tests": [_test_ref(catalogue, t) for t in cause.tests],
                "templates": {
                    lang: {
                        "outcome": tpl.outcome,
                        "type": tpl.type,
                        "message": tpl.message,
                        "text": (
                            f"{tpl.type}: {tpl.message}\n" + tpl.body.replace("{tail}", jvm_tail("surefire"))
                            if lang == "jvm"
                            else tpl.body
                        ),
                    }
                    for lang, tpl in sorted(spec.templates.items())
                },
                "episodes": [[_iso_z(e.start), _iso_z(e.end)] for e in cause.episodes],
                "episode_strike_rate": cause.episode_rate,
                "background_strike_rate": cause.background_rate,
                "hit_rate": cause.hit_rate,
                "rerun_hit_rate": cause.retry_hit_rate,
            }
        )
    return {
        "note": "Planted facts of the generated scenario; the application never reads this file.",
        "scenario": scenario,
        "main_history": [
            {"commit": sha, "time": _iso_z(when)}
            for sha, when in zip(main, timeline.main_commit_time, strict=True)
        ],
        "flaky_tests": [
            {
                **_test_ref(catalogue, f.test),
                "failure_rate": f.rate,
                "cause_kind": f.kind,
            }
            for f in faults.flaky
        ],
        "regressions": [reg_doc(r) for r in faults.regressions if r.intro_main >= 0],
        "broken_from_start": [reg_doc(r) for r in faults.regressions if r.intro_main < 0],
        "always_skipped": [_test_ref(catalogue, t) for t in faults.always_skipped],
        "failure_causes": causes,
        "duration_growth": {
            "component": GROWING_COMPONENT,
            "formula": GROWTH_FORMULA,
            "factor_start": 1.0,
            "factor_end": 3.0,
        },
        "reruns": {
            "surefire_components_from": _iso_z(rerun_from),
            "surefire_reruns": SUREFIRE_RERUNS,
            "pytest_components_jobs": ["nightly-full"],
            "pytest_reruns": PYTEST_RERUNS,
        },
        "defect_inflow": export.inflow,  # type: ignore[attr-defined]
        "duplicate_defects": export.duplicates,  # type: ignore[attr-defined]
        "defect_cause_matches": export.cause_matches,  # type: ignore[attr-defined]
    }


class _Keep(dict):
    """Format mapping that leaves unknown fields as ``{field}`` (the varying parts of a template)."""

    def __missing__(self, key: str) -> str:
        return "{" + key + "}"


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="python -m demo_fixtures.generate",
        description="Write the invented Berthwise CI history and defect export as real-format files.",
    )
    p.add_argument(
        "--out",
        type=Path,
        default=DEFAULT_OUT,
        help=f"output folder (default {DEFAULT_OUT})",
    )
    p.add_argument(
        "--scale",
        choices=("demo", "bench", "custom"),
        default="demo",
        help="preset size; 'custom' starts from demo and takes the sizes below",
    )
    p.add_argument("--seed", type=int, default=None, help="random seed (default 7)")
    p.add_argument("--tests", type=int, default=None, help="number of test cases")
    p.add_argument("--days", type=int, default=None, help="days of CI history, ending 2026-11-29")
    p.add_argument("--builds-per-day", type=float, default=None, help="mean builds per day")
    p.add_argument("--defects", type=int, default=None, help="number of defects in the export")
    return p


def main(argv: list[str] | None = None) -> int:
    args = _parser().parse_args(argv)
    sizes = {
        "seed": args.seed,
        "n_tests": args.tests,
        "n_days": args.days,
        "builds_per_day": args.builds_per_day,
        "n_defects": args.defects,
    }
    try:
        params = ScenarioParams.for_scale("demo" if args.scale == "custom" else args.scale, **sizes)
    except ValueError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    began = time.perf_counter()
    summary = generate(args.out, params=params)
    elapsed = time.perf_counter() - began
    print(
        f"wrote {summary.builds} reports ({summary.results} results, {summary.failed_results} failed, "
        f"{summary.test_cases} test cases) and {summary.defects} defects to {summary.out_dir} "
        f"[{summary.bytes_written / 1e6:.1f} MB in {elapsed:.1f} s]"
    )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
