"""Defect exports: store the upload, upsert its defects by key in one transaction, keep rejected rows.

* :func:`defects_job_create` stores the raw export (content-addressed, like result uploads) and a queued job;
* :func:`defects_job_run` reads it with the pure reader (:mod:`ingest.parsers.defects`) and upserts the
  defects by key, :data:`BATCH_SIZE` rows at a time, inside ONE transaction; defects absent from the
  export are kept; every rejected row is kept on the job with its line, column, reason and raw values;
* :func:`defects_rejected_csv_write` writes those rows as CSV through :mod:`barometer_common.csvsafe`;
* :func:`defect_export_preview` shows what a file holds and how a map reads it (for the upload page).
"""

from __future__ import annotations

import json
import logging
import os
import tempfile
from collections.abc import Iterable
from dataclasses import dataclass, field
from datetime import datetime
from typing import IO, Any, BinaryIO

from django.core.cache import cache
from django.db import connection, transaction
from django.utils import timezone

from barometer_common.csvsafe import write_safe_csv
from ingest.bulk import rows_bulk_insert
from ingest.models import Defect, DefectColumnMap, ImportJob, Project, StoredFile
from ingest.parsers.defects import (
    ColumnMap,
    ColumnMapError,
    DefectExportError,
    DefectRow,
    RowError,
    defect_rows,
    read_source_rows,
)
from ingest.services.components import ComponentResolver
from ingest.services.results import progress_cache_key
from ingest.storage import raw_file_path, raw_file_store

log = logging.getLogger(__name__)

BATCH_SIZE = 2000
FETCH_CHUNK = 500

ERR_STRICT = (
    "{name}: {count} row(s) were rejected and --strict/strict is set, so nothing was imported; "
    "first: line {line}, column {column!r}: {reason}"
)
ERR_NO_FILE = "the import job has no stored file"
ERR_NOT_DEFECTS = "import job {job_id} is a {kind} import, not a defect export"
ERR_KEY_TOO_LONG = "key is longer than {limit} characters"
ERR_NO_MAP = "no saved column map named {name!r} in project {slug!r} (saved: {known})"
REJECTED_CSV_HEADER = ("line", "column", "field", "reason", "raw values")
PREVIEW_SAMPLE_ROWS = 2000  # records the mapping page reads (shown rows, map check, date formats)
PREVIEW_SAMPLED_WARNING = (
    "This preview and its date-format check read the first {rows} records only; the import reads the whole file."
)
RAW_LIMIT = 1000  # characters of a rejected record's raw values kept on the job
RAW_ROWS = 1000  # rejected records whose raw values are kept (all are listed; the raw file holds the rest)
WARN_TRUNCATED = "{field} longer than {limit} characters was shortened (rows: {count}, first on line {line})"

# Defect fields compared between the stored defect and the incoming row (components are compared apart).
_FIELDS = (
    "title",
    "description",
    "created_at",
    "resolved_at",
    "status",
    "is_closed",
    "severity",
    "severity_rank",
    "priority",
    "priority_rank",
    "type",
    "found_in",
    "fixed_in",
    "reporter",
    "assignee",
    "labels",
)
_LIMITED = ("status", "severity", "priority", "type", "found_in", "fixed_in", "reporter", "assignee")
_MAX_LENGTH = {name: Defect._meta.get_field(name).max_length for name in _LIMITED}


class DefectImportError(Exception):
    """A whole defect export was refused; the message names the file and the reason."""


@dataclass
class DefectCounts:
    rows: int = 0
    created: int = 0
    updated: int = 0
    unchanged: int = 0
    rejected: int = 0
    warnings: list[str] = field(default_factory=list)

    def as_dict(self) -> dict:
        return {k: v for k, v in self.__dict__.items() if k != "warnings"}


# --------------------------------------------------------------------------------------------------- maps
def column_map_save(*, project: Project, column_map: ColumnMap) -> DefectColumnMap:
    """Create or replace the project's column map named ``column_map.name``."""
    saved, _ = DefectColumnMap.objects.update_or_create(
        project=project, name=column_map.name, defaults={"definition": column_map.to_dict()}
    )
    return saved


def column_map_get(*, project: Project, name: str) -> ColumnMap:
    """Load a saved column map; ColumnMapError when there is none of that name."""
    saved = DefectColumnMap.objects.filter(project=project, name=name).first()
    if saved is None:
        known = ", ".join(DefectColumnMap.objects.filter(project=project).values_list("name", flat=True))
        raise ColumnMapError(ERR_NO_MAP.format(name=name, slug=project.slug, known=known or "none"))
    return ColumnMap.from_dict(saved.definition)


# --------------------------------------------------------------------------------------------------- storing
def defects_job_create(
    *,
    project: Project,
    name: str,
    stream: BinaryIO,
    column_map: ColumnMap,
    strict: bool = False,
    user=None,
    via: str = "cli",
) -> ImportJob:
    """Store the raw export and a queued ImportJob of kind 'defects'. Nothing is parsed here."""
    sha, size, rel = raw_file_store(stream)
    with transaction.atomic():
        job = ImportJob.objects.create(
            project=project,
            kind=ImportJob.Kind.DEFECTS,
            original_name=name[:500],
            size=size,
            sha256=sha,
            parameters={"column_map": column_map.to_dict(), "strict": bool(strict)},
            created_by=user if getattr(user, "pk", None) else None,
            created_via=via,
        )
        StoredFile.objects.create(job=job, original_name=name[:500], sha256=sha, size=size, path=rel)
    return job


def defects_job_reimport(
    *, job: ImportJob, column_map: ColumnMap, strict: bool = False, user=None, via: str = "cli"
) -> ImportJob:
    """A new queued job over the raw export an earlier defect job kept, read with another column map.

    The stored file is shared (content-addressed storage), not copied.
    """
    if job.kind != ImportJob.Kind.DEFECTS:
        raise DefectImportError(ERR_NOT_DEFECTS.format(job_id=job.pk, kind=job.kind))
    stored = job.files.first()
    if stored is None:
        raise DefectImportError(ERR_NO_FILE)
    with transaction.atomic():
        new = ImportJob.objects.create(
            project=job.project,
            kind=ImportJob.Kind.DEFECTS,
            original_name=job.original_name,
            size=job.size,
            sha256=job.sha256,
            parameters={"column_map": column_map.to_dict(), "strict": bool(strict), "reimport_of": job.pk},
            created_by=user if getattr(user, "pk", None) else None,
            created_via=via,
        )
        StoredFile.objects.create(
            job=new,
            original_name=stored.original_name,
            sha256=stored.sha256,
            size=stored.size,
            path=stored.path,
        )
    return new


# --------------------------------------------------------------------------------------------------- importing
def _row_error_dict(err: RowError) -> dict:
    return {"line": err.line, "column": err.column, "field": err.field, "reason": err.reason}


class _DefectWriter:
    """Upserts batches of valid rows: one fetch per chunk of keys, bulk create, bulk update, bulk links."""

    def __init__(self, *, job: ImportJob, counts: DefectCounts, now: datetime):
        self.job = job
        self.project = job.project
        self.counts = counts
        self.now = now
        self.components = ComponentResolver(self.project)
        self.through = Defect.components.through
        self.truncated: dict[str, list[int]] = {}  # field -> [count, first line]

    def _limit(self, row: DefectRow, name: str, value: str) -> str:
        limit = _MAX_LENGTH[name]
        if len(value) <= limit:
            return value
        seen = self.truncated.setdefault(name, [0, row.line])
        seen[0] += 1
        return value[:limit]

    def _values(self, row: DefectRow) -> dict:
        values = {
            "title": row.title,
            "description": row.description,
            "created_at": row.created,
            "resolved_at": row.resolved,
            "is_closed": row.is_closed,
            "severity_rank": row.severity_rank,
            "priority_rank": row.priority_rank,
            "labels": list(row.labels),
        }
        for name in _LIMITED:
            values[name] = self._limit(row, name, getattr(row, name))
        return values

    def _insert(self, new: list[tuple[str, dict]]) -> None:
        """New defects through the bulk-load path (COPY / executemany): the ORM's per-value work is the cost."""
        names = list(new[0][1])
        columns = ["project_id", "key", "first_imported", "last_imported", "last_import_job_id"]
        columns += [Defect._meta.get_field(name).column for name in names]
        stamp = connection.ops.adapt_datetimefield_value(self.now)

        def db(name: str, value: Any) -> Any:
            if isinstance(value, datetime):
                return connection.ops.adapt_datetimefield_value(value)
            return json.dumps(value) if name == "labels" else value

        rows = (
            [self.project.pk, key, stamp, stamp, self.job.pk, *(db(n, values[n]) for n in names)]
            for key, values in new
        )
        rows_bulk_insert(table=Defect._meta.db_table, columns=columns, rows=rows)

    def write(self, batch: list[DefectRow]) -> None:
        existing: dict[str, Defect] = {}
        keys = [r.key for r in batch]
        for start in range(0, len(keys), FETCH_CHUNK):
            chunk = keys[start : start + FETCH_CHUNK]
            for defect in Defect.objects.filter(project=self.project, key__in=chunk):
                existing[defect.key] = defect
        linked: dict[int, set[int]] = {}
        ids = [d.pk for d in existing.values()]
        for start in range(0, len(ids), FETCH_CHUNK):
            for defect_id, component_id in self.through.objects.filter(
                defect_id__in=ids[start : start + FETCH_CHUNK]
            ).values_list("defect_id", "component_id"):
                linked.setdefault(defect_id, set()).add(component_id)

        new: list[tuple[str, dict]] = []
        changed: list[Defect] = []
        unchanged_ids: list[int] = []
        wanted: dict[str, set[int]] = {}
        relink_keys: list[str] = []
        for row in batch:
            values = self._values(row)
            comps = {self.components.resolve(name).pk for name in row.components if name.strip()}
            wanted[row.key] = comps
            defect = existing.get(row.key)
            if defect is None:
                new.append((row.key, values))
                relink_keys.append(row.key)
                continue
            differs = [name for name, value in values.items() if getattr(defect, name) != value]
            comps_differ = linked.get(defect.pk, set()) != comps
            if differs or comps_differ:
                for name in differs:
                    setattr(defect, name, values[name])
                defect.last_imported = self.now
                defect.last_import_job = self.job
                changed.append(defect)
                if comps_differ:
                    relink_keys.append(row.key)
            else:
                unchanged_ids.append(defect.pk)

        if new:
            self._insert(new)
            new_keys = [key for key, _ in new]
            for start in range(0, len(new_keys), FETCH_CHUNK):
                for key, pk in Defect.objects.filter(
                    project=self.project, key__in=new_keys[start : start + FETCH_CHUNK]
                ).values_list("key", "id"):
                    existing[key] = Defect(pk=pk, key=key)
        if changed:
            Defect.objects.bulk_update(
                changed, [*_FIELDS, "last_imported", "last_import_job"], batch_size=500
            )
        for start in range(0, len(unchanged_ids), FETCH_CHUNK):
            Defect.objects.filter(pk__in=unchanged_ids[start : start + FETCH_CHUNK]).update(
                last_imported=self.now, last_import_job=self.job
            )
        relink_ids = [existing[k].pk for k in relink_keys]
        stale = [pk for pk in relink_ids if pk in linked]
        for start in range(0, len(stale), FETCH_CHUNK):
            self.through.objects.filter(defect_id__in=stale[start : start + FETCH_CHUNK]).delete()
        links = [(existing[k].pk, c) for k in relink_keys for c in sorted(wanted[k])]
        if links:
            rows_bulk_insert(
                table=self.through._meta.db_table, columns=("defect_id", "component_id"), rows=links
            )
        self.counts.created += len(new)
        self.counts.updated += len(changed)
        self.counts.unchanged += len(unchanged_ids)

    def warnings(self) -> list[str]:
        return [
            WARN_TRUNCATED.format(
                field=name, limit=Defect._meta.get_field(name).max_length, count=count, line=line
            )
            for name, (count, line) in self.truncated.items()
        ]


def _valid_rows(result: Iterable, row_errors: list[dict], counts: DefectCounts):
    key_limit = Defect._meta.get_field("key").max_length
    for item in result:
        counts.rows += 1
        if isinstance(item, RowError):
            row_errors.append(_row_error_dict(item))
            continue
        if len(item.key) > key_limit:
            row_errors.append(
                {
                    "line": item.line,
                    "column": "",
                    "field": "key",
                    "reason": ERR_KEY_TOO_LONG.format(limit=key_limit),
                }
            )
            continue
        yield item


def _raw_text(values: Any) -> str:
    text = json.dumps(values, ensure_ascii=False, default=str)
    return text if len(text) <= RAW_LIMIT else text[: RAW_LIMIT - 1] + "…"


def _attach_raw_values(path: os.PathLike[str] | str, filename: str, row_errors: list[dict]) -> None:
    """Add each rejected record's raw values (as JSON text) to its row error: one more pass over the file.

    Runs only when rows were rejected. The reader yields one record per line number, so the line identifies
    the record; a file broken further on (bad quoting) keeps the raw values found before the break.
    """
    wanted = {err["line"] for err in row_errors[:RAW_ROWS]}
    found: dict[int, str] = {}
    try:
        _, records = read_source_rows(path, filename=filename)
        for record in records:
            if record.line in wanted:
                found[record.line] = _raw_text(dict(record.values))
                if len(found) == len(wanted):
                    break
    except DefectExportError:
        pass
    for err in row_errors:
        err.setdefault("raw", found.get(err["line"], ""))


def _line_count(path: os.PathLike[str] | str) -> int:
    count = 0
    with open(path, "rb") as fh:
        while chunk := fh.read(1 << 20):
            count += chunk.count(b"\n")
    return max(count, 1)


def _progress_save(job: ImportJob, value: float) -> None:
    # The job row is inside the import transaction: pollers read the progress from the cache instead
    # (the same key the results import and the job endpoint use).
    cache.set(progress_cache_key(job.pk), min(value, 0.99), timeout=3600)


def defects_job_run(*, job: ImportJob, refresh: bool = True) -> dict:
    """Read the job's export and upsert its defects by key, all in ONE transaction; return the counts.

    Rows are written :data:`BATCH_SIZE` at a time (a constant number of queries per batch), so memory does
    not grow with the file. Defects absent from the export are kept (exports are often partial); a defect
    met again keeps ``first_imported`` and gets a new ``last_imported``. Rejected rows are listed in
    ``job.row_errors`` (line, column, field, reason, raw values); with ``strict`` any rejected row aborts the
    import and nothing is written. Whole-file problems mark the job failed with a message naming the file
    and raise :class:`DefectImportError`. After a successful commit the defect analytics are queued
    (:func:`ingest.hooks.after_defects_import`) unless ``refresh`` is False.
    """
    job.status = ImportJob.Status.RUNNING
    job.started_at = timezone.now()
    job.attempts += 1
    job.error = ""
    job.progress = 0.0
    job.save(update_fields=["status", "started_at", "attempts", "error", "progress"])
    counts = DefectCounts()
    row_errors: list[dict] = []
    stored = None
    try:
        column_map = ColumnMap.from_dict(job.parameters.get("column_map"))
        strict = bool(job.parameters.get("strict"))
        stored = job.files.first()
        if stored is None:
            raise DefectImportError(ERR_NO_FILE)
        now = timezone.now()
        path = raw_file_path(stored.path)
        result = defect_rows(path, column_map, filename=stored.original_name, now=now)
        lines = _line_count(path) if result.info.format in ("csv", "jsonl") else 0
        with transaction.atomic():
            writer = _DefectWriter(job=job, counts=counts, now=now)
            batch: list[DefectRow] = []
            for row in _valid_rows(result, row_errors, counts):
                if strict and row_errors:
                    continue  # keep reading to list every bad row; nothing will be written
                batch.append(row)
                if len(batch) >= BATCH_SIZE:
                    writer.write(batch)
                    if lines:
                        _progress_save(job, batch[-1].line / lines)
                    batch = []
            counts.rejected = len(row_errors)
            if row_errors:
                _attach_raw_values(path, stored.original_name, row_errors)
            if strict and row_errors:
                first = row_errors[0]
                raise DefectImportError(
                    ERR_STRICT.format(
                        name=stored.original_name,
                        count=len(row_errors),
                        line=first["line"],
                        column=first["column"],
                        reason=first["reason"],
                    )
                )
            if batch:
                writer.write(batch)
            counts.warnings = [*result.warnings, *writer.warnings()]
            job.status = ImportJob.Status.DONE
            job.counts = counts.as_dict()
            job.warnings = counts.warnings
            job.row_errors = row_errors
            job.progress = 1.0
            job.finished_at = timezone.now()
            job.save()
            if refresh and (counts.created or counts.updated):
                from ingest.hooks import after_defects_import

                project_id, job_id = job.project_id, job.pk
                transaction.on_commit(lambda: after_defects_import(project_id=project_id, job_id=job_id))
    except (DefectExportError, ColumnMapError, DefectImportError) as exc:
        counts.rejected = len(row_errors)
        message = str(exc)
        if isinstance(exc, ColumnMapError) and stored is not None:
            message = f"{stored.original_name}: {message}"
        _job_fail(job, message, counts=counts, row_errors=row_errors)
        raise DefectImportError(message) from exc
    except Exception as exc:  # unexpected: keep the file, record the error, re-raise for the logs
        log.exception("defect import job %s failed", job.pk)
        _job_fail(
            job,
            f"internal error while importing: {exc.__class__.__name__}: {exc}",
            counts=counts,
            row_errors=row_errors,
        )
        raise
    return {**counts.as_dict(), "warnings": counts.warnings}


def _job_fail(job: ImportJob, message: str, *, counts: DefectCounts, row_errors: list[dict]) -> None:
    ImportJob.objects.filter(pk=job.pk).update(
        status=ImportJob.Status.FAILED,
        error=message,
        finished_at=timezone.now(),
        progress=0.0,
        counts=counts.as_dict(),
        row_errors=row_errors,
    )
    job.refresh_from_db()


# --------------------------------------------------------------------------------------------------- outputs
def defects_rejected_csv_write(*, job: ImportJob, out: IO[str]) -> int:
    """Write the job's rejected rows as CSV (:data:`REJECTED_CSV_HEADER`) to ``out``; return the row count.

    Every cell goes through :func:`barometer_common.csvsafe.write_safe_csv`: the reasons and raw values
    quote uploaded text, which must not run as a spreadsheet formula (OWASP, "CSV Injection").
    """
    rows = (
        (
            err.get("line"),
            err.get("column", ""),
            err.get("field", ""),
            err.get("reason", ""),
            err.get("raw", ""),
        )
        for err in job.row_errors or []
    )
    return write_safe_csv(out, REJECTED_CSV_HEADER, rows)


def _jsonable_row(item: DefectRow) -> dict:
    out = {}
    for name, value in item.__dict__.items():
        if isinstance(value, datetime):
            value = value.isoformat()
        elif isinstance(value, tuple):
            value = list(value)
        out[name] = value
    return out


def defect_export_preview(
    *,
    path: str | os.PathLike[str],
    column_map: ColumnMap | None,
    limit: int = 20,
    filename: str | None = None,
    sample_rows: int = PREVIEW_SAMPLE_ROWS,
) -> dict:
    """What an export holds and, with a map, how the map reads its first rows. Writes nothing.

    Only the first ``sample_rows`` records are parsed (the mapping page calls this on every request): the
    rows shown, the check of the map and the settling of each date column's format all read that sample,
    so a large export does not slow the page down. The import itself (:func:`defects_job_run`) reads the
    whole file and may settle a date format differently when later rows decide it; ``sampled`` is True and
    :data:`PREVIEW_SAMPLED_WARNING` is the last warning when the file holds more records than the sample.

    Returns a dict (JSON-serialisable; every string in it comes from the upload and must be escaped when
    shown): ``source``, ``format`` ("csv", "json" or "jsonl"), ``encoding``, ``delimiter`` ("" for JSON),
    ``warnings`` (e.g. the Latin-1 fallback), ``columns`` (header names, or the dotted paths of the first
    JSON record), ``rows`` (the first ``limit`` records: ``{"line", "values", "problem"}``), ``sampled``,
    and with a map ``date_formats`` (column → format used), ``mapped`` (the first ``limit`` valid rows,
    dates in ISO 8601 UTC) and ``row_errors`` (rejected rows among the first ``limit`` records: line,
    column, field, reason). ``error`` holds a whole-file problem (unreadable file, mapped column missing,
    ambiguous dates); then the other keys hold what could be found before it.
    """
    source = filename or os.path.basename(os.fspath(path))
    out: dict[str, Any] = {
        "source": source,
        "format": "",
        "encoding": "",
        "delimiter": "",
        "warnings": [],
        "columns": [],
        "rows": [],
        "sampled": False,
        "date_formats": {},
        "mapped": [],
        "row_errors": [],
        "error": "",
    }
    try:
        info, records = read_source_rows(path, filename=filename)
        out.update(
            format=info.format,
            encoding=info.encoding,
            delimiter=info.delimiter,
            warnings=list(info.warnings),
            columns=list(info.columns),
        )
        sample: list = []
        cut_line = None  # where the first record after the sample starts
        for record in records:
            if len(sample) >= sample_rows:
                cut_line = record.line
                break
            sample.append(record)
        out["rows"] = [
            {"line": r.line, "values": dict(r.values), "problem": r.problem} for r in sample[:limit]
        ]
        note = [PREVIEW_SAMPLED_WARNING.format(rows=sample_rows)] if cut_line is not None else []
        out["sampled"] = cut_line is not None
        out["warnings"] = [*out["warnings"], *note]
        if column_map is None:
            return out
        with tempfile.TemporaryDirectory(prefix="barometer-preview-") as tmp:
            read_path = path if cut_line is None else _preview_sample_file(
                path=path, info=info, sample=sample, cut_line=cut_line, folder=tmp
            )
            result = defect_rows(read_path, column_map, filename=source)
            out["date_formats"] = dict(result.date_formats)
            out["warnings"] = [*dict.fromkeys([*info.warnings, *result.file_warnings]), *note]
            for n, item in enumerate(result):
                if n >= limit:
                    break
                if isinstance(item, RowError):
                    out["row_errors"].append(_row_error_dict(item))
                else:
                    out["mapped"].append(_jsonable_row(item))
    except DefectExportError as exc:
        out["error"] = str(exc)
    return out


def _preview_sample_file(*, path, info, sample: list, cut_line: int, folder: str) -> str:
    """The first records of an export as a file of the same format, with the same line numbers.

    CSV and JSON lines: the text up to the line where the first record after the sample starts, in the
    file's own encoding and line endings. A JSON document: an array of the sampled records (a record's
    ``line`` there is its index, which stays the same).
    """
    target = os.path.join(folder, "sample.json" if info.format == "json" else "sample.txt")
    if info.format == "json":
        with open(target, "w", encoding="utf-8") as fh:
            json.dump([r.values for r in sample], fh, ensure_ascii=False)
        return target
    with open(path, encoding=info.encoding, newline="") as src, \
            open(target, "w", encoding=info.encoding, newline="") as dst:
        for number, text in enumerate(src, start=1):
            if number >= cut_line:
                break
            dst.write(text)
    return target
