"""Defect import service and CLI: exports of several shapes, upsert by key, rejected rows, --strict, streaming.

Outside sources: RFC 4180 (CSV; files written and read back with Python's csv module, the reference
reader/writer), RFC 8259 and the JSON Lines convention (common practice), the Unicode BOM and ISO 8859-1
(Latin-1); the OWASP "CSV Injection" guidance for the rejected-rows CSV. The defects are the invented
ground truth of the parser tests (a marina berth-booking team), which the test constructs itself.
"""

from __future__ import annotations

import csv
import io
import json
from datetime import UTC, datetime
from pathlib import Path

import pytest
from django.core.management import call_command
from django.core.management.base import CommandError

from barometer_common.csvsafe import FORMULA_PREFIXES
from ingest.models import Component, Defect, ImportJob, Project, StoredFile
from ingest.parsers.dates import UNPARSABLE_DATE_MSG
from ingest.parsers.defects import MISSING_VALUE_MSG, UNKNOWN_STATUS_MSG, ColumnMap
from ingest.services import defects as service
from ingest.services.defects import (
    ERR_STRICT,
    REJECTED_CSV_HEADER,
    DefectImportError,
    column_map_get,
    defect_export_preview,
    defects_job_create,
    defects_job_run,
    defects_rejected_csv_write,
)
from ingest.storage import raw_file_path
from tests.ingest.parsers.test_defects import DEFECTS, SHAPES, expected_rows

pytestmark = pytest.mark.django_db

HEADER = ["Ticket", "Summary", "Opened", "Closed", "State", "Area"]
CMAP = {
    "name": "desk",
    "fields": {
        "key": "Ticket",
        "title": "Summary",
        "created": "Opened",
        "resolved": "Closed",
        "status": "State",
        "components": "Area",
    },
    "closed_statuses": ["Done"],
    "open_statuses": ["New", "In Work"],
    "date_format": "iso",
}


@pytest.fixture
def project():
    return Project.objects.create(slug="berthwise", name="Berthwise")


def write_csv(path: Path, rows, header=HEADER) -> Path:
    with open(path, "w", encoding="utf-8", newline="") as fh:
        writer = csv.writer(fh)  # reference writer (RFC 4180 quoting)
        writer.writerow(header)
        writer.writerows(rows)
    return path


def run(project, path: Path, cmap, *, strict=False, refresh=False) -> ImportJob:
    column_map = cmap if isinstance(cmap, ColumnMap) else ColumnMap.from_dict(cmap)
    with open(path, "rb") as fh:
        job = defects_job_create(
            project=project, name=path.name, stream=fh, column_map=column_map, strict=strict
        )
    try:
        defects_job_run(job=job, refresh=refresh)
    except DefectImportError:
        pass
    job.refresh_from_db()
    return job


def stored_rows(project) -> list[tuple]:
    out = []
    for d in Defect.objects.filter(project=project).order_by("key").prefetch_related("components"):
        out.append(
            (
                d.key,
                d.title,
                d.description,
                d.created_at,
                d.resolved_at,
                d.status,
                d.is_closed,
                d.severity,
                d.severity_rank,
                d.priority,
                d.priority_rank,
                tuple(sorted(c.name for c in d.components.all())),
                d.type,
                d.found_in,
                d.fixed_in,
                d.reporter,
                d.assignee,
                tuple(d.labels),
            )
        )
    return out


def sorted_components(rows: list[tuple]) -> list[tuple]:
    return [(*r[:11], tuple(sorted(r[11])), *r[12:]) for r in rows]


@pytest.mark.parametrize("shape", SHAPES, ids=lambda f: f.__name__)
def test_every_shape_stores_the_same_defects(tmp_path, project, shape):
    path, cmap = shape(tmp_path)
    job = run(project, path, cmap)
    assert job.status == ImportJob.Status.DONE, job.error
    assert job.counts["created"] == len(DEFECTS) and job.counts["rejected"] == 0
    assert stored_rows(project) == sorted_components(expected_rows())
    # the raw upload is kept byte for byte, so it can be re-imported with another map
    stored = StoredFile.objects.get(job=job)
    assert raw_file_path(stored.path).read_bytes() == path.read_bytes()
    if "latin1" in shape.__name__:
        assert any("Latin-1" in w for w in job.warnings)  # the fallback is reported, not silent


def test_reimport_updates_by_key_and_deletes_nothing(tmp_path, project):
    first = write_csv(
        tmp_path / "a.csv",
        [
            ["BRT-1", "Gate code rejected", "2026-03-01T08:00:00Z", "", "New", "Access"],
            ["BRT-2", "Tide table off by one hour", "2026-03-02T08:00:00Z", "", "In Work", "Tides"],
            ["BRT-3", "Fee rounding on long stays", "2026-03-03T08:00:00Z", "", "New", "Billing"],
        ],
    )
    job1 = run(project, first, CMAP)
    assert job1.counts == {"rows": 3, "created": 3, "updated": 0, "unchanged": 0, "rejected": 0}
    before = {d.key: d for d in Defect.objects.all()}
    # a later, partial export: BRT-1 closed and moved to another component, BRT-3 absent, BRT-4 new
    second = write_csv(
        tmp_path / "b.csv",
        [
            ["BRT-1", "Gate code rejected", "2026-03-01T08:00:00Z", "2026-03-05T10:00:00Z", "Done", "Gates"],
            ["BRT-2", "Tide table off by one hour", "2026-03-02T08:00:00Z", "", "In Work", "Tides"],
            ["BRT-4", "Berth map blank", "2026-03-04T08:00:00Z", "", "New", "Map"],
        ],
    )
    job2 = run(project, second, CMAP)
    assert job2.counts == {"rows": 3, "created": 1, "updated": 1, "unchanged": 1, "rejected": 0}
    after = {d.key: d for d in Defect.objects.all()}
    assert sorted(after) == ["BRT-1", "BRT-2", "BRT-3", "BRT-4"]  # BRT-3 kept although absent
    one = after["BRT-1"]
    assert (one.status, one.is_closed, one.resolved_at) == (
        "Done",
        True,
        datetime(2026, 3, 5, 10, tzinfo=UTC),
    )
    assert list(one.components.values_list("name", flat=True)) == ["Gates"]
    assert one.first_imported == before["BRT-1"].first_imported and one.last_imported > one.first_imported
    assert after["BRT-2"].last_import_job_id == job2.pk  # seen again, unchanged
    assert (
        after["BRT-3"].last_import_job_id == job1.pk
        and after["BRT-3"].last_imported == before["BRT-3"].last_imported
    )
    # a third import of the same file changes nothing and adds nothing
    job3 = run(project, second, CMAP)
    assert job3.counts == {"rows": 3, "created": 0, "updated": 0, "unchanged": 3, "rejected": 0}
    assert Defect.objects.count() == 4


def bad_export(tmp_path) -> Path:
    return write_csv(
        tmp_path / "bad.csv",
        [
            ["BRT-1", "Gate code rejected", "2026-03-01T08:00:00Z", "", "New", "Access"],  # line 2: fine
            ["", "No key here", "2026-03-01T09:00:00Z", "", "New", "Access"],  # line 3: missing key
            ["BRT-3", "No created date", "", "", "New", "Access"],  # line 4: missing created
            ["BRT-4", "Bad date", "31st of March", "", "New", "Access"],  # line 5: unparsable date
            [
                "BRT-5",
                '=HYPERLINK("http://x.invalid","click")',
                "2026-03-02T08:00:00Z",
                "",
                "Parked",
                "Access",
            ],
            ["BRT-6", "Tide table off", "2026-03-02T08:00:00Z", "", "In Work", "Tides"],  # line 7: fine
        ],
    )


def test_bad_rows_are_listed_with_line_and_reason_and_good_rows_imported(tmp_path, project):
    job = run(project, bad_export(tmp_path), CMAP)
    assert job.status == ImportJob.Status.DONE
    assert sorted(Defect.objects.values_list("key", flat=True)) == ["BRT-1", "BRT-6"]
    assert job.counts["rows"] == 6 and job.counts["rejected"] == 4 and job.counts["created"] == 2
    got = [(e["line"], e["column"], e["reason"]) for e in job.row_errors]
    # line numbers counted on the file as the csv module wrote it: header = line 1 (RFC 4180 records)
    assert got == [
        (3, "Ticket", MISSING_VALUE_MSG.format(field="key", column="Ticket")),
        (4, "Opened", MISSING_VALUE_MSG.format(field="created", column="Opened")),
        (5, "Opened", UNPARSABLE_DATE_MSG.format(value="31st of March", expected=service_iso())),
        (6, "State", UNKNOWN_STATUS_MSG.format(value="Parked", known="'New', 'In Work', 'Done'")),
    ]
    assert json.loads(job.row_errors[3]["raw"])["State"] == "Parked"  # the raw values are kept


def service_iso() -> str:
    from ingest.parsers.dates import describe_date_format

    return describe_date_format("iso")


def test_rejected_csv_neutralises_formulas(tmp_path, project):
    job = run(project, bad_export(tmp_path), CMAP)
    out = io.StringIO()
    assert defects_rejected_csv_write(job=job, out=out) == 4
    rows = list(csv.reader(io.StringIO(out.getvalue())))  # read back with the reference CSV reader
    assert tuple(rows[0]) == REJECTED_CSV_HEADER
    assert [r[0] for r in rows[1:]] == ["3", "4", "5", "6"]
    raw_cell = rows[4][4]
    assert "HYPERLINK" in raw_cell
    # OWASP "CSV Injection": no cell may start with = + - @ tab or carriage return (a leading ' disarms it)
    for row in rows:
        for cell in row:
            assert not cell.startswith(FORMULA_PREFIXES), cell
    formula = '=HYPERLINK("http://x.invalid","click")'
    job.row_errors[0]["reason"] = formula
    out = io.StringIO()
    defects_rejected_csv_write(job=job, out=out)
    assert list(csv.reader(io.StringIO(out.getvalue())))[1][3] == "'" + formula


def test_strict_writes_nothing_and_lists_every_bad_row(tmp_path, project):
    job = run(project, bad_export(tmp_path), CMAP, strict=True)
    assert job.status == ImportJob.Status.FAILED
    assert Defect.objects.count() == 0 and Component.objects.count() == 0
    assert job.error == ERR_STRICT.format(
        name="bad.csv",
        count=4,
        line=3,
        column="Ticket",
        reason=MISSING_VALUE_MSG.format(field="key", column="Ticket"),
    )
    assert [e["line"] for e in job.row_errors] == [3, 4, 5, 6]
    assert StoredFile.objects.filter(job=job).exists()  # the upload is kept for a retry


def test_strict_writes_nothing_even_after_full_batches(tmp_path, project, monkeypatch):
    monkeypatch.setattr(service, "BATCH_SIZE", 2)
    rows = [[f"BRT-{i}", f"Defect {i}", "2026-03-01T08:00:00Z", "", "New", "Access"] for i in range(1, 8)]
    rows.append(["BRT-99", "Late bad row", "not a date", "", "New", "Access"])
    job = run(project, write_csv(tmp_path / "late.csv", rows), CMAP, strict=True)
    assert job.status == ImportJob.Status.FAILED and [e["line"] for e in job.row_errors] == [9]
    assert Defect.objects.count() == 0


def test_cli_inline_map_saves_and_reuses_mapping(tmp_path, project, capsys):
    path = bad_export(tmp_path)
    rejected = tmp_path / "rejected.csv"
    out = io.StringIO()
    call_command(
        "import_defects",
        str(path),
        project="berthwise",
        map=["key=Ticket", "title=Summary", "created=Opened", "status=State", "components=Area"],
        closed_status=["Done"],
        open_status=["New", "In Work"],
        date_format="iso",
        save_mapping="desk-v1",
        rejected_csv=rejected,
        no_refresh=True,
        stdout=out,
    )
    text = out.getvalue()
    assert "rejected        4" in text and "line 6, column 'State': unknown status 'Parked'" in text
    assert len(list(csv.reader(rejected.open(encoding="utf-8")))) == 5
    saved = column_map_get(project=project, name="desk-v1")
    assert saved.fields["key"] == "Ticket" and saved.closed_statuses == ["Done"]
    out = io.StringIO()
    call_command(
        "import_defects", str(path), project="berthwise", mapping="desk-v1", no_refresh=True, stdout=out
    )
    assert "unchanged       2" in out.getvalue()
    with pytest.raises(CommandError, match="line 3"):
        call_command(
            "import_defects",
            str(path),
            project="berthwise",
            mapping="desk-v1",
            strict=True,
            stdout=io.StringIO(),
        )
    with pytest.raises(CommandError, match="no saved column map named 'nope'"):
        call_command("import_defects", str(path), project="berthwise", mapping="nope", stdout=io.StringIO())
    with pytest.raises(CommandError, match="exactly one of"):
        call_command("import_defects", str(path), project="berthwise", stdout=io.StringIO())


def test_column_maps_command_lists_exports_and_imports(tmp_path, project):
    (tmp_path / "m.json").write_text(json.dumps(CMAP), encoding="utf-8")
    call_command("column_maps", project="berthwise", import_file=tmp_path / "m.json", stdout=io.StringIO())
    out = io.StringIO()
    call_command("column_maps", project="berthwise", export="desk", stdout=out)
    assert ColumnMap.from_dict(json.loads(out.getvalue())) == ColumnMap.from_dict(CMAP)
    out = io.StringIO()
    call_command("column_maps", project="berthwise", stdout=out)
    assert out.getvalue().startswith("desk\tkey=Ticket")


def test_whole_file_problem_fails_the_job_naming_file_and_column(tmp_path, project):
    path = write_csv(
        tmp_path / "renamed.csv",
        [["BRT-1", "x", "2026-03-01T08:00:00Z", "", "New", "A"]],
        header=["Ticket", "Title", "Opened", "Closed", "State", "Area"],
    )
    job = run(project, path, CMAP)
    assert job.status == ImportJob.Status.FAILED
    assert "renamed.csv" in job.error and "'Summary'" in job.error
    assert Defect.objects.count() == 0


def test_worker_task_runs_a_defects_job(tmp_path, project):
    from ingest.tasks import process_import_job

    path = write_csv(
        tmp_path / "a.csv", [["BRT-1", "Gate code rejected", "2026-03-01T08:00:00Z", "", "New", "A"]]
    )
    with open(path, "rb") as fh:
        job = defects_job_create(
            project=project, name="a.csv", stream=fh, column_map=ColumnMap.from_dict(CMAP)
        )
    assert process_import_job(job.pk) == ImportJob.Status.DONE
    assert Defect.objects.filter(key="BRT-1").exists()
    bad = write_csv(
        tmp_path / "b.csv", [["BRT-2", "x", "2026-03-01T08:00:00Z", "", "New", "A"]], header=["x"] * 6
    )
    with open(bad, "rb") as fh:
        job = defects_job_create(
            project=project, name="b.csv", stream=fh, column_map=ColumnMap.from_dict(CMAP)
        )
    assert process_import_job(job.pk) == ImportJob.Status.FAILED


def test_hook_runs_after_commit_only_when_defects_changed(
    tmp_path, project, monkeypatch, django_capture_on_commit_callbacks
):
    calls = []
    monkeypatch.setattr("ingest.hooks.after_defects_import", lambda **kw: calls.append(kw))
    path = write_csv(
        tmp_path / "a.csv", [["BRT-1", "Gate code rejected", "2026-03-01T08:00:00Z", "", "New", "A"]]
    )
    with django_capture_on_commit_callbacks(execute=True):
        job = run(project, path, CMAP, refresh=True)
    assert calls == [{"project_id": project.pk, "job_id": job.pk}]
    with django_capture_on_commit_callbacks(execute=True):
        run(project, path, CMAP, refresh=True)  # nothing changed: nothing to refresh
    assert len(calls) == 1


def test_after_defects_import_enqueues_the_refresh_task(monkeypatch):
    import analytics.tasks
    from ingest import hooks

    sent = []
    stand_in = object()
    monkeypatch.setattr(analytics.tasks, "refresh_after_defects", stand_in, raising=False)
    monkeypatch.setattr(hooks, "task_enqueue", lambda task, *args: sent.append((task, args)) or True)
    hooks.after_defects_import(project_id=7, job_id=3)
    assert sent == [(stand_in, (7,))]


def test_preview_reports_format_rows_and_mapped_rows(tmp_path):
    shape = next(s for s in SHAPES if "semicolon" in s.__name__)
    path, cmap = shape(tmp_path)
    bare = defect_export_preview(path=path, column_map=None, limit=2)
    assert (bare["format"], bare["encoding"], bare["delimiter"]) == ("csv", "utf-8-sig", ";")
    assert bare["columns"][0] == "Keywords" and len(bare["rows"]) == 2 and bare["rows"][0]["line"] == 2
    assert bare["rows"][0]["values"]["Id"] == "BRT-101" and bare["mapped"] == [] and bare["error"] == ""
    mapped = defect_export_preview(path=path, column_map=cmap, limit=3)
    assert mapped["date_formats"] == {"Created": "dayfirst", "Resolved": "dayfirst"}
    assert [m["key"] for m in mapped["mapped"]] == ["BRT-101", "BRT-102", "BRT-103"]
    assert mapped["mapped"][0]["created"] == DEFECTS[0]["created"].isoformat()
    json.dumps(mapped)  # the page can send it as it is
    broken = ColumnMap.from_dict({**cmap.to_dict(), "fields": {**cmap.fields, "title": "Headline"}})
    failed = defect_export_preview(path=path, column_map=broken)
    assert "'Headline'" in failed["error"] and failed["rows"]  # the raw rows still show


def test_kept_export_is_reimported_with_a_corrected_map(tmp_path, project):
    path = write_csv(
        tmp_path / "renamed.csv",
        [["BRT-1", "Gate code rejected", "2026-03-01T08:00:00Z", "", "New", "Access"]],
        header=["Ticket", "Title", "Opened", "Closed", "State", "Area"],
    )
    failed = run(project, path, CMAP)
    assert failed.status == ImportJob.Status.FAILED and Defect.objects.count() == 0
    path.unlink()  # only the kept raw upload is left
    fixed = {**CMAP, "name": "desk-fixed", "fields": {**CMAP["fields"], "title": "Title"}}
    (tmp_path / "fixed.json").write_text(json.dumps(fixed), encoding="utf-8")
    out = io.StringIO()
    call_command(
        "import_defects",
        project="berthwise",
        from_job=failed.pk,
        mapping_file=tmp_path / "fixed.json",
        no_refresh=True,
        stdout=out,
    )
    assert "created         1" in out.getvalue()
    assert Defect.objects.get(key="BRT-1").title == "Gate code rejected"
    again = ImportJob.objects.order_by("-pk").first()
    assert again.parameters["reimport_of"] == failed.pk
    assert again.files.get().sha256 == failed.files.get().sha256
    with pytest.raises(CommandError, match="either FILE or --from-job"):
        call_command("import_defects", project="berthwise", mapping="desk", stdout=io.StringIO())


def test_component_aliases_resolve_to_one_component(tmp_path, project):
    from ingest.models import ComponentAlias

    app = Component.objects.create(project=project, name="Mobile App")
    ComponentAlias.objects.create(project=project, alias="Front end / App", component=app)
    path = write_csv(
        tmp_path / "a.csv",
        [
            ["BRT-1", "Map blank", "2026-03-01T08:00:00Z", "", "New", "mobile app"],
            ["BRT-2", "Login loops", "2026-03-01T09:00:00Z", "", "New", "  FRONT END /  app "],
            ["BRT-3", "Tide off", "2026-03-01T10:00:00Z", "", "New", "Mobile App;Tides"],
        ],
    )
    run(project, path, CMAP)
    assert set(Component.objects.values_list("name", flat=True)) == {"Mobile App", "Tides"}
    assert app.defects.count() == 3


def test_preview_of_json_lines_with_nested_paths(tmp_path):
    shape = next(s for s in SHAPES if "json_lines" in s.__name__)
    path, cmap = shape(tmp_path)
    preview = defect_export_preview(path=path, column_map=cmap, limit=10)
    assert preview["format"] == "jsonl" and "fields.component.name" in preview["columns"]
    assert preview["rows"][0]["values"]["fields"]["summary"] == DEFECTS[0]["title"]
    assert [m["components"] for m in preview["mapped"]] == [list(d["components"]) for d in DEFECTS]
    assert preview["row_errors"] == [] and preview["error"] == ""


def test_every_rejected_row_is_listed_even_past_the_raw_values_cap(tmp_path, project, monkeypatch):
    monkeypatch.setattr(service, "RAW_ROWS", 2)
    job = run(project, bad_export(tmp_path), CMAP)
    assert [e["line"] for e in job.row_errors] == [3, 4, 5, 6]
    assert [bool(e["raw"]) for e in job.row_errors] == [True, True, False, False]
