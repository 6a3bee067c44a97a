"""Defect exports of several shapes, the column map, row validation and streaming.

Outside sources: RFC 4180 (CSV records, quoted fields spanning lines), RFC 8259 (JSON) and the JSON Lines
convention (one value per line, common practice), the Unicode BOM (U+FEFF) and ISO 8859-1 (Latin-1).
The files are written by Python's csv/json modules (reference writers) and their expected line numbers
are counted on the written text itself. The defect scenario is invented (a marina berth-booking team);
the expected rows are the ground truth the test itself constructs.
"""

from __future__ import annotations

import csv
import dataclasses
import json
import subprocess
import sys
import tracemalloc
from collections.abc import Iterator
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest

from ingest.parsers.dates import (
    AMBIGUOUS_DATES_MSG,
    AMBIGUOUS_EXAMPLE_MSG,
    UNPARSABLE_DATE_MSG,
)
from ingest.parsers.defects import (
    DEFECT_FIELDS,
    DUPLICATE_KEY_MSG,
    EXTRA_CELLS_MSG,
    FUTURE_DATE_MSG,
    MAP_CLI_PAIR_MSG,
    MAP_REQUIRED_FIELD_MSG,
    MAP_UNKNOWN_FIELD_MSG,
    MAP_UNKNOWN_KEY_MSG,
    MISSING_COLUMN_MSG,
    MISSING_PATH_MSG,
    MISSING_VALUE_MSG,
    NESTED_VALUE_MSG,
    REQUIRED_FIELDS,
    RESOLVED_BEFORE_CREATED_MSG,
    SHARED_DAY_MONTH_WARNING,
    UNKNOWN_STATUS_MSG,
    UNRANKED_WARNING,
    ColumnMap,
    ColumnMapError,
    DefectExportError,
    DefectRow,
    RowError,
    defect_rows,
    read_source_rows,
)

NOW = datetime(2026, 5, 1, tzinfo=UTC)
CLOSED = ["Done", "Won't Fix"]
SEVERITY = ["Low", "Medium", "High", "Critical"]
PRIORITY = ["P4", "P3", "P2", "P1"]

# The invented ground truth: four defects of a marina berth-booking platform.
DEFECTS = [
    {
        "key": "BRT-101",
        "title": "Berth map shows the wrong pontoon",
        "description": "Steps:\n1. open the map\n2. pick pontoon B",
        "created": datetime(2026, 3, 25, 9, 30, tzinfo=UTC),
        "resolved": datetime(2026, 3, 27, 16, 0, tzinfo=UTC),
        "status": "Done",
        "severity": "High",
        "priority": "P2",
        "components": ("Berth map", "Booking"),
        "type": "Bug",
        "found_in": "2.3.0",
        "fixed_in": "2.3.1",
        "reporter": "harbour-desk",
        "assignee": "dev-kai",
        "labels": ("ui",),
    },
    {
        "key": "BRT-102",
        "title": "Café kiosk card reader declines",
        "description": "",
        "created": datetime(2026, 4, 1, 14, 0, tzinfo=UTC),
        "resolved": None,
        "status": "In Work",
        "severity": "Critical",
        "priority": "P1",
        "components": ("Payments",),
        "type": "Bug",
        "found_in": "2.3.1",
        "fixed_in": "",
        "reporter": "night-shift",
        "assignee": "",
        "labels": ("kiosk", "card"),
    },
    {
        "key": "BRT-103",
        "title": "Tide table off by one hour",
        "description": "After the clock change.",
        "created": datetime(2026, 4, 2, 7, 45, tzinfo=UTC),
        "resolved": datetime(2026, 4, 2, 12, 0, tzinfo=UTC),
        "status": "Won't Fix",
        "severity": "Low",
        "priority": "P4",
        "components": (),
        "type": "Task",
        "found_in": "",
        "fixed_in": "",
        "reporter": "harbour-desk",
        "assignee": "dev-ola",
        "labels": (),
    },
    {
        "key": "BRT-104",
        "title": "Fee rounding on long stays",
        "description": "",
        "created": datetime(2026, 4, 13, 22, 10, tzinfo=UTC),
        "resolved": None,
        "status": "New",
        "severity": "Medium",
        "priority": "P3",
        "components": ("Billing",),
        "type": "Bug",
        "found_in": "2.4.0",
        "fixed_in": "",
        "reporter": "accounts",
        "assignee": "",
        "labels": ("fees",),
    },
]


def expected_rows() -> list[tuple]:
    out = []
    for d in DEFECTS:
        out.append(
            (
                d["key"],
                d["title"],
                d["description"],
                d["created"],
                d["resolved"],
                d["status"],
                d["status"] in CLOSED,
                d["severity"],
                SEVERITY.index(d["severity"]) + 1,
                d["priority"],
                PRIORITY.index(d["priority"]) + 1,
                d["components"],
                d["type"],
                d["found_in"],
                d["fixed_in"],
                d["reporter"],
                d["assignee"],
                d["labels"],
            )
        )
    return out


def without_line(row: DefectRow) -> tuple:
    return dataclasses.astuple(row)[1:]


def make_map(fields: dict[str, str], **extra) -> ColumnMap:
    return ColumnMap.from_dict(
        {
            "name": "test-map",
            "fields": fields,
            "closed_statuses": CLOSED,
            "severity_order": SEVERITY,
            "priority_order": PRIORITY,
            **extra,
        }
    )


def write_csv(path: Path, header, rows, *, delimiter=",", encoding="utf-8") -> None:
    with open(path, "w", encoding=encoding, newline="") as fh:
        writer = csv.writer(fh, delimiter=delimiter)  # reference writer (RFC 4180 quoting)
        writer.writerow(header)
        writer.writerows(rows)


def shape_comma_iso(tmp_path: Path) -> tuple[Path, ColumnMap]:
    """Comma-separated UTF-8, ISO 8601 dates with a +02:00 offset."""
    cols = {
        "key": "Ticket No",
        "title": "Headline",
        "description": "Details",
        "created": "Opened On",
        "resolved": "Closed On",
        "status": "State",
        "severity": "Severity",
        "priority": "Priority",
        "components": "Area",
        "type": "Kind",
        "found_in": "Seen In",
        "fixed_in": "Fixed In",
        "reporter": "Raised By",
        "assignee": "Owner",
        "labels": "Tags",
    }
    zone = timedelta(hours=2)

    def iso(moment):
        return "" if moment is None else (moment + zone).strftime("%Y-%m-%dT%H:%M:%S+02:00")

    rows = [
        [
            iso(d[f])
            if f in ("created", "resolved")
            else "; ".join(d[f])
            if f in ("components", "labels")
            else d[f]
            for f in DEFECT_FIELDS
        ]
        for d in DEFECTS
    ]
    path = tmp_path / "comma.csv"
    write_csv(path, [cols[f] for f in DEFECT_FIELDS], rows)
    return path, make_map(cols)


def shape_semicolon_bom_dayfirst(tmp_path: Path) -> tuple[Path, ColumnMap]:
    """Semicolon-separated, UTF-8 with BOM, day-first dates, other column names, '|' between values."""
    cols = {
        "key": "Id",
        "title": "Summary",
        "description": "Notes",
        "created": "Created",
        "resolved": "Resolved",
        "status": "Workflow",
        "severity": "Impact",
        "priority": "Urgency",
        "components": "Modules",
        "type": "Category",
        "found_in": "Affects",
        "fixed_in": "Target",
        "reporter": "Author",
        "assignee": "Handler",
        "labels": "Keywords",
    }

    def dmy(moment):
        return "" if moment is None else moment.strftime("%d/%m/%Y %H:%M")

    order = list(reversed(DEFECT_FIELDS))  # a different column order too
    rows = [
        [
            dmy(d[f])
            if f in ("created", "resolved")
            else "|".join(d[f])
            if f in ("components", "labels")
            else d[f]
            for f in order
        ]
        for d in DEFECTS
    ]
    path = tmp_path / "semicolon.csv"
    write_csv(path, [cols[f] for f in order], rows, delimiter=";", encoding="utf-8-sig")
    return path, make_map(cols, multi_value_delimiter="|")


def shape_latin1_monthfirst(tmp_path: Path) -> tuple[Path, ColumnMap]:
    """Comma-separated ISO 8859-1 (Latin-1), month-first dates with AM/PM."""
    cols = {f: f.replace("_", " ").title() for f in DEFECT_FIELDS}

    def mdy(moment):
        return "" if moment is None else moment.strftime("%m/%d/%Y %I:%M %p")

    rows = [
        [
            mdy(d[f])
            if f in ("created", "resolved")
            else ";".join(d[f])
            if f in ("components", "labels")
            else d[f]
            for f in DEFECT_FIELDS
        ]
        for d in DEFECTS
    ]
    path = tmp_path / "latin1.csv"
    write_csv(path, [cols[f] for f in DEFECT_FIELDS], rows, encoding="latin-1")
    return path, make_map(cols)


def shape_tab_epoch(tmp_path: Path) -> tuple[Path, ColumnMap]:
    """Tab-separated UTF-8, POSIX epoch seconds."""
    cols = {f: f.upper() for f in DEFECT_FIELDS}

    def epoch(moment):
        return "" if moment is None else str(int(moment.timestamp()))

    rows = [
        [
            epoch(d[f])
            if f in ("created", "resolved")
            else ", ".join(d[f])
            if f in ("components", "labels")
            else d[f]
            for f in DEFECT_FIELDS
        ]
        for d in DEFECTS
    ]
    path = tmp_path / "export.tsv"
    write_csv(path, [cols[f] for f in DEFECT_FIELDS], rows, delimiter="\t")
    return path, make_map(cols, multi_value_delimiter=",")


def shape_json_array_ms(tmp_path: Path) -> tuple[Path, ColumnMap]:
    """JSON array of flat objects, epoch milliseconds as numbers, lists for multi-valued fields."""
    cols = {f: f"bug_{f}" for f in DEFECT_FIELDS}
    records = []
    for d in DEFECTS:
        rec = {}
        for f in DEFECT_FIELDS:
            value = d[f]
            if f in ("created", "resolved"):
                value = None if value is None else int(value.timestamp()) * 1000
            elif f in ("components", "labels"):
                value = list(value)
            rec[cols[f]] = value
        records.append(rec)
    path = tmp_path / "array.json"
    path.write_text(json.dumps(records, indent=2, ensure_ascii=False), encoding="utf-8")
    return path, make_map(cols)


def shape_json_lines_nested(tmp_path: Path) -> tuple[Path, ColumnMap]:
    """JSON lines, nested objects addressed by dotted paths, lists of objects for components."""
    cols = {
        "key": "key",
        "title": "fields.summary",
        "description": "fields.body.text",
        "created": "fields.dates.opened",
        "resolved": "fields.dates.closed",
        "status": "fields.status.name",
        "severity": "fields.severity.name",
        "priority": "fields.priority.name",
        "components": "fields.component.name",
        "type": "fields.kind.name",
        "found_in": "fields.versions.found",
        "fixed_in": "fields.versions.fixed",
        "reporter": "people.reporter.login",
        "assignee": "people.assignee.login",
        "labels": "fields.labels",
    }
    lines = []
    for d in DEFECTS:
        rec = {
            "key": d["key"],
            "fields": {
                "summary": d["title"],
                "body": {"text": d["description"]},
                "dates": {
                    "opened": d["created"].astimezone(UTC).isoformat().replace("+00:00", "Z"),
                    "closed": None if d["resolved"] is None else d["resolved"].isoformat(),
                },
                "status": {"name": d["status"], "id": 7},
                "severity": {"name": d["severity"]},
                "priority": {"name": d["priority"]},
                "component": [{"name": c, "lead": "x"} for c in d["components"]],
                "kind": {"name": d["type"]},
                "versions": {"found": d["found_in"], "fixed": d["fixed_in"]},
                "labels": list(d["labels"]),
            },
            "people": {
                "reporter": {"login": d["reporter"]},
                "assignee": {"login": d["assignee"]} if d["assignee"] else None,
            },
        }
        lines.append(json.dumps(rec))
    path = tmp_path / "nested.jsonl"
    path.write_text("\n".join(lines) + "\n\n", encoding="utf-8")
    return path, make_map(cols)


SHAPES = [
    shape_comma_iso,
    shape_semicolon_bom_dayfirst,
    shape_latin1_monthfirst,
    shape_tab_epoch,
    shape_json_array_ms,
    shape_json_lines_nested,
]


@pytest.mark.parametrize("shape", SHAPES, ids=lambda f: f.__name__)
def test_every_shape_gives_the_same_defects(tmp_path, shape):
    path, cmap = shape(tmp_path)
    result = defect_rows(path, cmap, now=NOW)
    items = list(result)
    assert all(isinstance(item, DefectRow) for item in items), [i for i in items if isinstance(i, RowError)]
    assert [without_line(item) for item in items] == expected_rows()
    assert all(item.created.tzinfo is UTC for item in items)


def test_shape_details_are_reported(tmp_path):
    info, _ = read_source_rows(shape_semicolon_bom_dayfirst(tmp_path)[0])
    assert (info.format, info.encoding, info.delimiter) == ("csv", "utf-8-sig", ";")
    assert info.columns[0] == "Keywords"  # the BOM (U+FEFF) is not part of the first name
    info, _ = read_source_rows(shape_latin1_monthfirst(tmp_path)[0])
    assert info.encoding == "latin-1"
    assert any("not valid UTF-8" in w and "Latin-1" in w for w in info.warnings)
    info, _ = read_source_rows(shape_tab_epoch(tmp_path)[0])
    assert info.delimiter == "\t"
    info, _ = read_source_rows(shape_json_array_ms(tmp_path)[0])
    assert info.format == "json"
    info, rows = read_source_rows(shape_json_lines_nested(tmp_path)[0])
    assert info.format == "jsonl"
    assert "fields.component.name" in info.columns
    assert [row.line for row in rows] == [
        1,
        2,
        3,
        4,
    ]  # the trailing blank line is not a record


def test_inferred_date_formats(tmp_path):
    formats = {}
    for shape in SHAPES:
        path, cmap = shape(tmp_path)
        formats[shape.__name__] = set(defect_rows(path, cmap, now=NOW).date_formats.values())
    assert formats == {
        "shape_comma_iso": {"iso"},
        "shape_semicolon_bom_dayfirst": {"dayfirst"},
        "shape_latin1_monthfirst": {"monthfirst"},
        "shape_tab_epoch": {"epoch_s"},
        "shape_json_array_ms": {"epoch_ms"},
        "shape_json_lines_nested": {"iso"},
    }


def test_json_object_wrapping_an_array(tmp_path):
    path = tmp_path / "wrapped.json"
    path.write_text(json.dumps({"total": 1, "issues": [{"k": "BRT-1", "t": "Gate", "c": "2026-04-01"}]}))
    result = defect_rows(path, ColumnMap.from_cli(["key=k", "title=t", "created=c"]), now=NOW)
    assert [row.key for row in result] == ["BRT-1"]
    assert any("'issues'" in w for w in result.warnings)


# --------------------------------------------------------------------------- bad rows

BAD_CSV = (
    "Ticket No,Headline,Details,Opened On,Closed On,State\r\n"
    'BRT-1,Fine row,"line one\r\nline two\r\nline three",2026-04-01T10:00:00Z,,New\r\n'
    ",No key here,,2026-04-01T10:00:00Z,,New\r\n"
    "\r\n"
    'BRT-3,No created,"two\nlines",,,New\r\n'
    "BRT-4,Bad date,,2026-04-31T10:00:00Z,,New\r\n"
    "BRT-5,Unknown status,,2026-04-01T10:00:00Z,,Parked\r\n"
    "BRT-1,Same key again,,2026-04-01T10:00:00Z,,New\r\n"
    "BRT-7,Backwards,,2026-04-05T10:00:00Z,2026-04-01T10:00:00Z,Done\r\n"
    "BRT-8,Future,,2027-01-05T00:00:00Z,,New\r\n"
    "BRT-9,,,2026-04-01T10:00:00Z,,New\r\n"
    "BRT-10,Extra cells,,2026-04-01T10:00:00Z,,New,surprise\r\n"
    "BRT-11,Closed fine,,2026-04-01T10:00:00Z,2026-04-02T10:00:00Z,done\r\n"
)


def physical_line(text: str, prefix: str) -> int:
    """1-based line where a record starts, counted on the raw text (independent of the csv module)."""
    return next(i for i, line in enumerate(text.splitlines(), start=1) if line.startswith(prefix))


def test_bad_rows_get_row_errors_with_physical_lines(tmp_path):
    path = tmp_path / "bad.csv"
    path.write_bytes(BAD_CSV.encode())
    cmap = ColumnMap.from_cli(
        [
            "key=Ticket No",
            "title=Headline",
            "description=Details",
            "created=Opened On",
            "resolved=Closed On",
            "status=State",
        ],
        closed_statuses=["Done"],
        open_statuses=["New", "In Work"],
    )
    items = list(defect_rows(path, cmap, filename="desk-export.csv", now=NOW))
    by_line = {item.line: item for item in items}

    def line(prefix: str) -> int:
        return physical_line(BAD_CSV, prefix)

    assert by_line[line("BRT-1,Fine")].description == "line one\r\nline two\r\nline three"
    assert by_line[line(",No key")] == RowError(
        line(",No key"),
        "Ticket No",
        "key",
        MISSING_VALUE_MSG.format(field="key", column="Ticket No"),
    )
    assert by_line[line("BRT-3,")] == RowError(
        line("BRT-3,"),
        "Opened On",
        "created",
        MISSING_VALUE_MSG.format(field="created", column="Opened On"),
    )
    # BRT-4 starts two lines below BRT-3 because BRT-3's quoted description spans two lines (RFC 4180).
    assert line("BRT-4,") == line("BRT-3,") + 2
    bad_date = by_line[line("BRT-4,")]
    assert (bad_date.column, bad_date.field) == ("Opened On", "created")
    assert bad_date.reason == UNPARSABLE_DATE_MSG.format(
        value="2026-04-31T10:00:00Z",
        expected="an ISO 8601 date such as 2026-04-03 or 2026-04-03T10:15:00+02:00",
    )
    assert by_line[line("BRT-5,")] == RowError(
        line("BRT-5,"),
        "State",
        "status",
        UNKNOWN_STATUS_MSG.format(value="Parked", known="'New', 'In Work', 'Done'"),
    )
    assert by_line[line("BRT-1,Same")] == RowError(
        line("BRT-1,Same"),
        "Ticket No",
        "key",
        DUPLICATE_KEY_MSG.format(key="BRT-1", first_line=line("BRT-1,Fine")),
    )
    assert by_line[line("BRT-7,")] == RowError(
        line("BRT-7,"),
        "Closed On",
        "resolved",
        RESOLVED_BEFORE_CREATED_MSG.format(
            resolved="2026-04-01T10:00:00+00:00", created="2026-04-05T10:00:00+00:00"
        ),
    )
    assert by_line[line("BRT-8,")] == RowError(
        line("BRT-8,"),
        "Opened On",
        "created",
        FUTURE_DATE_MSG.format(field="created", value="2027-01-05T00:00:00+00:00"),
    )
    assert by_line[line("BRT-9,")].field == "title"
    assert by_line[line("BRT-10,")] == RowError(
        line("BRT-10,"), "", "", EXTRA_CELLS_MSG.format(count=7, expected=6)
    )
    closed = by_line[line("BRT-11,")]
    assert closed.is_closed and closed.status == "done"  # closed_statuses compare case-insensitively
    # Nothing dropped: one item per record, as counted by the csv module (reference reader), blank line excluded.
    with open(path, newline="", encoding="utf-8") as fh:
        records = [r for r in csv.reader(fh) if r][1:]
    assert len(items) == len(records) == len(by_line)


def test_future_grace_and_unranked_values(tmp_path):
    path = tmp_path / "grace.csv"
    soon = (NOW + timedelta(hours=1)).isoformat()
    write_csv(
        path,
        ["k", "t", "c", "sev", "prio"],
        [
            ["BRT-1", "Slip sign", soon, "Blocker", "P1"],
            ["BRT-2", "Slip sign 2", soon, "blocker", "p9"],
            ["BRT-3", "Slip sign 3", soon, "", "P2"],
        ],
    )
    cmap = make_map(
        {
            "key": "k",
            "title": "t",
            "created": "c",
            "severity": "sev",
            "priority": "prio",
        }
    )
    result = defect_rows(path, cmap, now=NOW)
    rows = list(result)
    # One hour ahead is within the grace for zone-less local times (offsets reach UTC+14, common practice).
    assert [type(r) for r in rows] == [DefectRow] * 3
    assert [(r.severity, r.severity_rank, r.priority, r.priority_rank) for r in rows] == [
        ("Blocker", None, "P1", 4),
        ("blocker", None, "p9", None),
        ("", None, "P2", 3),
    ]
    assert UNRANKED_WARNING.format(field="severity", value="Blocker", count=1, line=2) in result.warnings
    assert UNRANKED_WARNING.format(field="priority", value="p9", count=1, line=3) in result.warnings


def test_without_closed_statuses_resolved_means_closed(tmp_path):
    path = tmp_path / "plain.csv"
    write_csv(
        path,
        ["k", "t", "c", "r"],
        [["A-1", "x", "2026-04-01", "2026-04-02"], ["A-2", "y", "2026-04-01", ""]],
    )
    rows = list(
        defect_rows(
            path,
            ColumnMap.from_cli(["key=k", "title=t", "created=c", "resolved=r"]),
            now=NOW,
        )
    )
    assert [r.is_closed for r in rows] == [True, False]


def test_json_lines_bad_line_and_object_value(tmp_path):
    path = tmp_path / "mixed.jsonl"
    path.write_text(
        '{"k": "A-1", "t": {"text": "nested"}, "c": "2026-04-01"}\n'
        "\n"
        '{"k": "A-2", "t": "ok", "c": "2026-04-01"\n'
        "[1, 2]\n"
        '{"k": "A-4", "t": "ok", "c": "2026-04-01"}\n'
    )
    items = list(defect_rows(path, ColumnMap.from_cli(["key=k", "title=t", "created=c"]), now=NOW))
    assert [item.line for item in items] == [1, 3, 4, 5]
    assert items[0] == RowError(1, "t", "title", NESTED_VALUE_MSG.format(members="t.text"))
    assert items[1].column == "" and items[1].reason.startswith("not valid JSON")
    assert items[2].reason == "the record is a JSON array, not an object"
    assert isinstance(items[3], DefectRow)


# --------------------------------------------------------------------------- whole-file errors


def test_ambiguous_dates_are_refused_until_a_format_is_set(tmp_path):
    path = tmp_path / "amb.csv"
    write_csv(path, ["k", "t", "c"], [["A-1", "x", "03/04/2026"], ["A-2", "y", "02/01/2026"]])
    cmap = ColumnMap.from_cli(["key=k", "title=t", "created=c"])
    with pytest.raises(DefectExportError) as info:
        defect_rows(path, cmap, filename="marina.csv", now=NOW)
    examples = "; ".join(
        [
            AMBIGUOUS_EXAMPLE_MSG.format(
                value="03/04/2026", dayfirst="3 April 2026", monthfirst="4 March 2026"
            ),
            AMBIGUOUS_EXAMPLE_MSG.format(
                value="02/01/2026",
                dayfirst="2 January 2026",
                monthfirst="1 February 2026",
            ),
        ]
    )
    assert str(info.value) == AMBIGUOUS_DATES_MSG.format(source="marina.csv: ", column="c", examples=examples)
    fixed = ColumnMap.from_cli(["key=k", "title=t", "created=c"], date_format="monthfirst")
    assert [r.created.month for r in defect_rows(path, fixed, now=NOW)] == [3, 2]


def test_other_date_column_settles_day_and_month(tmp_path):
    path = tmp_path / "pooled.csv"
    write_csv(path, ["k", "t", "c", "r"], [["A-1", "x", "03/04/2026", "20/04/2026"]])
    cmap = ColumnMap.from_cli(["key=k", "title=t", "created=c", "resolved=r"])
    result = defect_rows(path, cmap, now=NOW)
    assert result.date_formats == {"c": "dayfirst", "r": "dayfirst"}
    assert SHARED_DAY_MONTH_WARNING.format(column="c", reading="dayfirst", other="r") in result.warnings
    assert next(iter(result)).created == datetime(2026, 4, 3, tzinfo=UTC)


def test_missing_mapped_column_names_file_and_column(tmp_path):
    path = tmp_path / "cols.csv"
    write_csv(path, ["Ticket No", "Headline", "Opened on"], [["A-1", "x", "2026-04-01"]])
    cmap = ColumnMap.from_cli(["key=Ticket No", "title=Headline", "created=Opened On"])
    with pytest.raises(DefectExportError) as info:
        defect_rows(path, cmap, now=NOW)
    assert str(info.value) == MISSING_COLUMN_MSG.format(
        source="cols.csv",
        column="Opened On",
        field="created",
        hint=" (did you mean 'Opened on'?)",
        found="'Ticket No', 'Headline', 'Opened on'",
    )


def test_missing_json_path_names_file_and_path(tmp_path):
    path = tmp_path / "p.json"
    path.write_text(json.dumps([{"k": "A-1", "t": "x", "c": "2026-04-01"}]))
    cmap = ColumnMap.from_cli(["key=k", "title=t", "created=c", "assignee=people.assignee.login"])
    with pytest.raises(DefectExportError) as info:
        defect_rows(path, cmap, now=NOW)
    assert str(info.value) == MISSING_PATH_MSG.format(
        source="p.json", column="people.assignee.login", field="assignee"
    )


def test_unterminated_quote_is_a_file_error_with_line(tmp_path):
    path = tmp_path / "broken.csv"
    path.write_text('k,t,c\nA-1,"never closed,2026-04-01\nA-2,x,2026-04-01\n')
    with pytest.raises(DefectExportError, match=r"broken\.csv: line 2"):
        list(defect_rows(path, ColumnMap.from_cli(["key=k", "title=t", "created=c"]), now=NOW))


def test_unreadable_file(tmp_path):
    with pytest.raises(DefectExportError, match="nope.csv: cannot read the file"):
        read_source_rows(tmp_path / "nope.csv")


# --------------------------------------------------------------------------- column map

BRIEF_MAP = {
    "name": "ops-desk-export",
    "fields": {
        "key": "Ticket No",
        "title": "Headline",
        "created": "Opened On",
        "components": "Area",
    },
    "closed_statuses": ["Done", "Won't Fix"],
    "severity_order": ["Low", "Medium", "High", "Critical"],
    "priority_order": ["P4", "P3", "P2", "P1"],
    "multi_value_delimiter": ";",
    "date_format": None,
}


def test_column_map_round_trip_keeps_the_format():
    source = json.loads(json.dumps(BRIEF_MAP))
    cmap = ColumnMap.from_dict(source)
    assert cmap.to_dict() == BRIEF_MAP
    assert source == BRIEF_MAP  # input not modified
    with_open = ColumnMap.from_dict({**BRIEF_MAP, "open_statuses": ["New"]})
    assert with_open.to_dict()["open_statuses"] == ["New"]


@pytest.mark.parametrize(
    ("change", "message"),
    [
        (
            {"colour": "blue"},
            MAP_UNKNOWN_KEY_MSG.format(name="ops-desk-export", key="colour", allowed="{allowed}"),
        ),
        ({"fields": {**BRIEF_MAP["fields"], "owner": "X"}}, "unknown field 'owner'"),
        (
            {"fields": {"key": "K", "title": "T"}},
            MAP_REQUIRED_FIELD_MSG.format(name="ops-desk-export", field="created"),
        ),
        ({"closed_statuses": "Done"}, "'closed_statuses' must be a list of strings"),
        ({"date_format": "yyyy-mm-dd"}, "'date_format' must be"),
        (
            {"multi_value_delimiter": ""},
            "'multi_value_delimiter' must be a non-empty string",
        ),
    ],
)
def test_column_map_errors_name_the_bad_key(change, message):
    with pytest.raises(ColumnMapError) as info:
        ColumnMap.from_dict({**BRIEF_MAP, **change})
    assert message.split("{allowed}")[0] in str(info.value)


def test_unknown_field_message_lists_fields():
    with pytest.raises(ColumnMapError) as info:
        ColumnMap.from_dict({**BRIEF_MAP, "fields": {**BRIEF_MAP["fields"], "owner": "X"}})
    assert str(info.value) == MAP_UNKNOWN_FIELD_MSG.format(
        name="ops-desk-export", field="owner", allowed=", ".join(DEFECT_FIELDS)
    )


def test_column_map_from_cli():
    cmap = ColumnMap.from_cli(
        ["key=Ticket No", "title = Headline", "created=Opened=On"],
        closed_statuses=["Done"],
        date_format="%d.%m.%Y",
    )
    assert cmap.fields == {
        "key": "Ticket No",
        "title": "Headline",
        "created": "Opened=On",
    }
    assert (cmap.closed_statuses, cmap.date_format) == (["Done"], "%d.%m.%Y")
    assert set(REQUIRED_FIELDS) <= set(cmap.fields)
    with pytest.raises(ColumnMapError) as info:
        ColumnMap.from_cli(["key"])
    assert str(info.value) == MAP_CLI_PAIR_MSG.format(pair="key")


# --------------------------------------------------------------------------- streaming and purity

N_ROWS = 100_000


@pytest.fixture(scope="module")
def big_csv(tmp_path_factory) -> tuple[Path, int]:
    """A 100 000-row export (about 45 MB) written once for the streaming tests."""
    path = tmp_path_factory.mktemp("big") / "big.csv"
    filler = "The berth sensor reports a boat where none is moored. " * 7
    with open(path, "w", newline="", encoding="utf-8") as fh:
        writer = csv.writer(fh)
        writer.writerow(["Ticket No", "Headline", "Details", "Opened On", "State"])
        for i in range(N_ROWS):
            writer.writerow(
                [
                    f"BRT-{i}",
                    f"Sensor ghost {i}",
                    filler,
                    f"2026-{1 + i % 4:02d}-{1 + i % 28:02d}",
                    "New",
                ]
            )
    return path, path.stat().st_size


def test_large_csv_reader_streams(big_csv):
    path, size = big_csv
    _info, rows = read_source_rows(path)
    assert isinstance(rows, Iterator)
    assert not isinstance(rows, (list, tuple))
    tracemalloc.start()
    try:
        count = sum(1 for _ in rows)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert count == N_ROWS
    # The reader holds one record at a time: its traced peak is a tiny fraction of the file size.
    assert peak < size / 50, (peak, size)


def test_large_csv_defect_rows_stream(big_csv):
    # Process RSS (psutil) instead of tracemalloc here: tracemalloc would slow two passes over
    # 100 000 rows several-fold. Materialising the rows would grow RSS by about twice the file size.
    psutil = pytest.importorskip("psutil")
    path, size = big_csv
    cmap = ColumnMap.from_cli(["key=Ticket No", "title=Headline", "description=Details", "created=Opened On"])
    process = psutil.Process()
    base = process.memory_info().rss
    result = defect_rows(path, cmap, now=NOW)  # first pass: date formats, in constant memory
    assert result.date_formats == {"Opened On": "iso"}
    peak = process.memory_info().rss
    defects = errors = 0
    for index, item in enumerate(result):
        if isinstance(item, DefectRow):
            defects += 1
        else:
            errors += 1
        if index % 5000 == 0:
            peak = max(peak, process.memory_info().rss)
    peak = max(peak, process.memory_info().rss)
    assert (defects, errors) == (N_ROWS, 0)
    # Only the keys seen (for duplicate detection) accumulate, never the rows.
    assert peak - base < size / 2, (peak - base, size)


def test_pure_module_does_not_load_django():
    code = "import sys, ingest.parsers.defects, barometer_common.csvsafe; print('django' in sys.modules)"
    out = subprocess.run(
        [sys.executable, "-c", code],
        capture_output=True,
        text=True,
        check=True,
        cwd=Path(__file__).resolve().parents[3],
    )
    assert out.stdout.strip() == "False"
