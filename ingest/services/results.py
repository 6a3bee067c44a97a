"""JUnit-XML results: store uploads, import them into a build atomically, keep the weekly rollup."""

from __future__ import annotations

import hashlib
import io
import json
import logging
import threading
import unicodedata
import zipfile
from collections.abc import Iterable, Iterator
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from typing import BinaryIO

from django.core.cache import cache
from django.db import IntegrityError, connection, transaction
from django.db.models import Max
from django.utils import timezone

from ingest.bulk import rows_bulk_insert
from ingest.models import (
    Build,
    ImportedReport,
    ImportJob,
    Project,
    StoredFile,
    TestCase,
    TestResult,
    week_start,
)
from ingest.parsers.junit import JUnitParseError, JUnitReader, ParsedResult
from ingest.services.components import ComponentRules
from ingest.storage import raw_file_path, raw_file_store

log = logging.getLogger(__name__)

BATCH_SIZE = 5000
MAX_ZIP_MEMBERS = 10_000
MAX_ZIP_MEMBER_BYTES = 2 * 1024**3

ERR_NO_REPORTS = "{name}: contains no .xml report"
ERR_ZIP = "{name}: not a readable .zip archive ({reason})"
ERR_ZIP_BOMB = "{name}: archive member {member} is larger than allowed when unpacked ({size} bytes)"
ERR_NO_BUILD = "the build id is missing: give --build (CLI) or the 'build' field (API)"
ERR_BAD_STARTED = "'started' is not an ISO 8601 date-time: {value!r}"
ERR_CONTROL_CHARS = "'{field}' contains a control character (line break, tab or similar): {value!r}"


class ResultsImportError(Exception):
    """A whole upload was refused; the message names the file and the reason."""


@dataclass
class BuildMeta:
    build: str
    commit: str = ""
    branch: str = ""
    ci_job: str = ""
    started: str = ""  # ISO 8601; empty = time of import

    @classmethod
    def from_dict(cls, data: dict) -> BuildMeta:
        meta = cls(
            build=str(data.get("build") or "").strip(),
            commit=str(data.get("commit") or "").strip(),
            branch=str(data.get("branch") or "").strip(),
            ci_job=str(data.get("ci_job") or "").strip(),
            started=str(data.get("started") or "").strip(),
        )
        meta.validate()
        return meta

    def validate(self) -> None:
        if not self.build:
            raise ResultsImportError(ERR_NO_BUILD)
        # These values end up in page text, CSV rows and download file names; a line break in one would
        # split a header or a CSV row, so they are refused rather than silently altered.
        for name in ("build", "commit", "branch", "ci_job"):
            value = getattr(self, name)
            if any(unicodedata.category(ch) == "Cc" for ch in value):
                raise ResultsImportError(ERR_CONTROL_CHARS.format(field=name, value=value))
        if self.started:
            self.started_at()

    def started_at(self) -> datetime | None:
        if not self.started:
            return None
        try:
            value = datetime.fromisoformat(self.started.replace("Z", "+00:00"))
        except ValueError as exc:
            raise ResultsImportError(ERR_BAD_STARTED.format(value=self.started)) from exc
        if timezone.is_naive(value):
            value = timezone.make_aware(value, UTC)
        return value

    def as_dict(self) -> dict:
        return {"build": self.build, "commit": self.commit, "branch": self.branch, "ci_job": self.ci_job,
                "started": self.started}


@dataclass
class ImportCounts:
    tests: int = 0
    passed: int = 0
    failed: int = 0
    errors: int = 0
    skipped: int = 0
    reruns: int = 0
    reports: int = 0
    reports_already_imported: int = 0
    new_test_cases: int = 0
    warnings: list[str] = field(default_factory=list)

    def add(self, outcome: str, attempt: int) -> None:
        self.tests += 1
        if attempt > 1:
            self.reruns += 1
        if outcome == "passed":
            self.passed += 1
        elif outcome == "failed":
            self.failed += 1
        elif outcome == "error":
            self.errors += 1
        else:
            self.skipped += 1

    def as_dict(self) -> dict:
        return {k: v for k, v in self.__dict__.items() if k != "warnings"}


# --------------------------------------------------------------------------------------------------- storing
def results_job_create(
    *,
    project: Project,
    files: Iterable[tuple[str, BinaryIO]],
    meta: BuildMeta,
    user=None,
    via: str = "api",
) -> ImportJob:
    """Store the raw files and a queued ImportJob. Nothing is parsed here (the worker does that)."""
    meta.validate()
    stored = []
    for name, stream in files:
        sha, size, rel = raw_file_store(stream)
        stored.append((name, sha, size, rel))
    if not stored:
        raise ResultsImportError("no file was uploaded")
    with transaction.atomic():
        job = ImportJob.objects.create(
            project=project,
            kind=ImportJob.Kind.RESULTS,
            original_name=", ".join(s[0] for s in stored)[:500],
            size=sum(s[2] for s in stored),
            sha256=stored[0][1] if len(stored) == 1 else "",
            parameters=meta.as_dict(),
            created_by=user if getattr(user, "pk", None) else None,
            created_via=via,
        )
        StoredFile.objects.bulk_create(
            StoredFile(job=job, original_name=n, sha256=sha, size=size, path=rel) for n, sha, size, rel in stored
        )
    return job


def _reports_in(stored: StoredFile) -> Iterator[tuple[str, str, BinaryIO]]:
    """Yield (display name, sha256, stream) for each report in a stored file (a .zip gives its .xml members)."""
    path = raw_file_path(stored.path)
    if stored.original_name.lower().endswith(".zip") or zipfile.is_zipfile(path):
        try:
            archive = zipfile.ZipFile(path)
        except (zipfile.BadZipFile, OSError) as exc:
            raise ResultsImportError(ERR_ZIP.format(name=stored.original_name, reason=exc)) from exc
        with archive:
            members = [m for m in archive.infolist() if not m.is_dir() and m.filename.lower().endswith(".xml")]
            if not members:
                raise ResultsImportError(ERR_NO_REPORTS.format(name=stored.original_name))
            for member in sorted(members, key=lambda m: m.filename)[:MAX_ZIP_MEMBERS]:
                if member.file_size > MAX_ZIP_MEMBER_BYTES:
                    raise ResultsImportError(
                        ERR_ZIP_BOMB.format(name=stored.original_name, member=member.filename, size=member.file_size)
                    )
                data = archive.read(member)
                yield (f"{stored.original_name}:{member.filename}", hashlib.sha256(data).hexdigest(), io.BytesIO(data))
    else:
        with open(path, "rb") as fh:
            yield stored.original_name, stored.sha256, fh


# --------------------------------------------------------------------------------------------------- importing
RESULT_COLUMNS = (
    "project_id", "build_id", "test_case_id", "outcome", "duration", "attempt", "failure_type", "message",
    "details", "system_out", "system_err", "truncated", "signature",
)


_KEY_LEN = 500  # TestCase.classname / name max_length: keys are truncated as the rows are


def _key(p: ParsedResult) -> tuple[str, str]:
    return (p.classname[:_KEY_LEN], p.name[:_KEY_LEN])


# Test-case ids kept between jobs of one process (a worker imports build after build of the same project).
# Test cases are never renamed, so a cached id stays right while its row exists; rows are filled in only
# after the job's transaction committed. A job checks one cached row before trusting the rest (a wiped
# table shows there), and a job that fails on a foreign key after using cached ids is retried once
# without them. A miss always goes to the database (and INSERT … ON CONFLICT), so test cases created by
# other processes are found.
_PROCESS_IDS: dict[tuple, dict[tuple[str, str], int]] = {}
_PROCESS_IDS_LOCK = threading.Lock()
PROCESS_IDS_MAX_PROJECTS = 16
PROCESS_IDS_MAX_KEYS = 500_000  # per project; about 100 MB at the limit


def _process_ids_key(project_id: int) -> tuple:
    return (connection.alias, str(connection.settings_dict.get("NAME")), project_id)


def testcase_ids_forget(*, project_id: int | None = None) -> None:
    """Drop the test-case ids this process keeps (of one project, or all).

    Call it after deleting or truncating test cases by other means than the app (e.g. a benchmark that
    empties the tables between runs); ingest also notices a wiped table by itself.
    """
    with _PROCESS_IDS_LOCK:
        if project_id is None:
            _PROCESS_IDS.clear()
        else:
            for key in [k for k in _PROCESS_IDS if k[2] == project_id]:
                del _PROCESS_IDS[key]


def _process_ids_publish(key: tuple, ids: dict[tuple[str, str], int]) -> None:
    with _PROCESS_IDS_LOCK:
        known = _PROCESS_IDS.pop(key, None)
        if known is None or len(known) + len(ids) > PROCESS_IDS_MAX_KEYS:
            known = {}
        known.update(ids)
        _PROCESS_IDS[key] = known  # most recently used last
        while len(_PROCESS_IDS) > PROCESS_IDS_MAX_PROJECTS:
            del _PROCESS_IDS[next(iter(_PROCESS_IDS))]


class _TestCaseCache:
    """``(classname, name) → id`` of one project for one job, resolved with one query per batch.

    The look-up goes through the unique index ``(project, classname, name)`` with the pair (PostgreSQL: a join
    on ``json_to_recordset`` of one JSON parameter; SQLite: a ``VALUES`` list); test cases not found are inserted with
    ``ON CONFLICT DO NOTHING`` (another worker may create the same ones at the same time) and read back.
    """

    LOOKUP_CHUNK = 5000
    SQLITE_CHUNK = 400  # 2 parameters per pair + project; stays below SQLite's variable limit everywhere

    def __init__(self, project: Project):
        self.project = project
        self.ids: dict[tuple[str, str], int] = {}
        self._rules: ComponentRules | None = None
        self.created = 0
        self.hits = 0  # ids taken from the process-level cache
        self._shared_key = _process_ids_key(project.pk)
        self._shared: dict[tuple[str, str], int] | None = None  # checked on first use

    def _shared_ids(self) -> dict[tuple[str, str], int]:
        if self._shared is None:
            shared = _PROCESS_IDS.get(self._shared_key) or {}
            if shared:
                # The oldest and the newest kept row must still be there, unchanged (one query by primary key).
                samples = {next(iter(shared.items())), next(reversed(shared.items()))}
                with connection.cursor() as cursor:
                    cursor.execute(
                        f"SELECT id, classname, name FROM {TestCase._meta.db_table}"
                        f" WHERE project_id = %s AND id IN ({', '.join(['%s'] * len(samples))})",
                        [self.project.pk, *(tc_id for _key, tc_id in samples)],
                    )
                    found = {((classname, name), tc_id) for tc_id, classname, name in cursor.fetchall()}
                if found != samples:  # the table was emptied or rows deleted: start again
                    testcase_ids_forget(project_id=self.project.pk)
                    shared = {}
            self._shared = shared
        return self._shared

    def publish_on_commit(self) -> None:
        if self.ids:
            key, ids = self._shared_key, self.ids
            transaction.on_commit(lambda: _process_ids_publish(key, ids))

    @property
    def rules(self) -> ComponentRules:
        if self._rules is None:  # only needed when a test case is created: no query for known tests
            self._rules = ComponentRules(self.project)
        return self._rules

    def _lookup(self, keys: list[tuple[str, str]]) -> None:
        table = TestCase._meta.db_table
        with connection.cursor() as cursor:
            if connection.vendor == "postgresql":
                for start in range(0, len(keys), self.LOOKUP_CHUNK):
                    chunk = keys[start : start + self.LOOKUP_CHUNK]
                    # The keys go as one JSON parameter (serialised in C; client-side array quoting is slower).
                    cursor.execute(
                        f"SELECT t.id, t.classname, t.name FROM {table} t"
                        " JOIN json_to_recordset(%s::json) AS k(c text, n text) ON t.classname = k.c AND t.name = k.n"
                        " WHERE t.project_id = %s",
                        [json.dumps([{"c": k[0], "n": k[1]} for k in chunk]), self.project.pk],
                    )
                    for tc_id, classname, name in cursor.fetchall():
                        self.ids[(classname, name)] = tc_id
            else:
                for start in range(0, len(keys), self.SQLITE_CHUNK):
                    chunk = keys[start : start + self.SQLITE_CHUNK]
                    values = ", ".join(["(%s, %s)"] * len(chunk))
                    cursor.execute(
                        f"SELECT id, classname, name FROM {table} WHERE project_id = %s"
                        f" AND (classname, name) IN (VALUES {values})",
                        [self.project.pk, *(v for k in chunk for v in k)],
                    )
                    for tc_id, classname, name in cursor.fetchall():
                        self.ids[(classname, name)] = tc_id

    def resolve(self, parsed: list[ParsedResult]) -> None:
        ids = self.ids
        shared = self._shared_ids()
        missing: dict[tuple[str, str], ParsedResult] = {}
        for p in parsed:
            key = _key(p)
            if key not in ids and key not in missing:
                tc_id = shared.get(key)
                if tc_id is None:
                    missing[key] = p
                else:
                    ids[key] = tc_id
                    self.hits += 1
        if not missing:
            return
        self._lookup(list(missing))
        new = [k for k in missing if k not in ids]
        if not new:
            return
        self._create(new, missing)
        self.created += len(new)
        still = [k for k in new if k not in ids]
        if still:  # created meanwhile by another worker (ON CONFLICT DO NOTHING returned no id): read them
            self._lookup(still)

    def _create(self, keys: list[tuple[str, str]], parsed: dict[tuple[str, str], ParsedResult]) -> None:
        """INSERT … ON CONFLICT DO NOTHING RETURNING: one statement creates the rows and gives their ids."""
        table = TestCase._meta.db_table
        now = timezone.now()
        rules = self.rules
        rows = [
            (k[0], k[1], parsed[k].file[:500], parsed[k].suite[:500], rules.component_id_for(k[0])) for k in keys
        ]
        head = f"INSERT INTO {table} (project_id, classname, name, file, suite, component_id, component_locked, first_seen)"
        tail = " ON CONFLICT (project_id, classname, name) DO NOTHING RETURNING id, classname, name"
        with connection.cursor() as cursor:
            if connection.vendor == "postgresql":
                for start in range(0, len(rows), self.LOOKUP_CHUNK):
                    chunk = rows[start : start + self.LOOKUP_CHUNK]
                    cursor.execute(
                        head + " SELECT %s, k.c, k.n, k.f, k.s, k.comp, false, %s"
                        " FROM json_to_recordset(%s::json) AS k(c text, n text, f text, s text, comp bigint)" + tail,
                        [self.project.pk, now,
                         json.dumps([{"c": r[0], "n": r[1], "f": r[2], "s": r[3], "comp": r[4]} for r in chunk])],
                    )
                    for tc_id, classname, name in cursor.fetchall():
                        self.ids[(classname, name)] = tc_id
            else:
                now_db = TestCase._meta.get_field("first_seen").get_db_prep_save(now, connection)
                per = 100  # 8 parameters a row
                for start in range(0, len(rows), per):
                    chunk = rows[start : start + per]
                    values = ", ".join(["(%s, %s, %s, %s, %s, %s, %s, %s)"] * len(chunk))
                    params = [v for r in chunk for v in (self.project.pk, *r, False, now_db)]
                    # "WHERE true" lets SQLite parse ON CONFLICT after a VALUES list unambiguously.
                    cursor.execute(head + f" SELECT * FROM (VALUES {values}) WHERE true" + tail, params)
                    for tc_id, classname, name in cursor.fetchall():
                        self.ids[(classname, name)] = tc_id


def _build_get_or_create(project: Project, meta: BuildMeta, fallback_started: datetime | None) -> tuple[Build, bool]:
    """The build row (and whether it was created here): one INSERT … ON CONFLICT DO NOTHING RETURNING when new."""
    started = meta.started_at() or fallback_started or timezone.now()
    build = Build(
        project=project,
        external_id=meta.build[:200],
        commit=meta.commit[:80],
        branch=meta.branch[:250],
        ci_job=meta.ci_job[:250],
        started_at=started,
        week=week_start(started),
        created_at=timezone.now(),
    )
    fields = ("project", "external_id", "commit", "branch", "ci_job", "started_at", "week", "created_at")
    db_fields = [Build._meta.get_field(f) for f in fields]
    values = [f.get_db_prep_save(getattr(build, f.attname), connection) for f in db_fields]
    table = Build._meta.db_table
    cols = ", ".join(connection.ops.quote_name(f.column) for f in db_fields)
    with connection.cursor() as cursor:
        cursor.execute(
            f"INSERT INTO {table} ({cols}) VALUES ({', '.join(['%s'] * len(values))})"
            " ON CONFLICT (project_id, external_id) DO NOTHING RETURNING id",
            values,
        )
        row = cursor.fetchone()
    if row is not None:
        build.id = row[0]
        return build, True
    return Build.objects.get(project=project, external_id=meta.build[:200]), False


def results_job_run(*, job: ImportJob, progress: bool = True, refresh: bool = True) -> ImportCounts:
    """Parse and write every report of ``job`` into its build, in ONE transaction.

    Idempotent: a report whose content was already imported into the same build is skipped. Any parse error
    rolls the whole job back (no partial rows) and marks the job failed with a message naming the file.
    ``refresh=False`` skips the per-build analytics refresh (a backfill runs one refresh at the end instead).
    """
    job.status = ImportJob.Status.RUNNING
    job.started_at = timezone.now()
    job.attempts += 1
    job.error = ""
    job.progress = 0.0
    job.save(update_fields=["status", "started_at", "attempts", "error", "progress"])
    try:
        meta = BuildMeta.from_dict(job.parameters)
        stored_files = list(job.files.all())
        try:
            counts = _job_write(job=job, meta=meta, stored_files=stored_files, progress=progress, refresh=refresh)
        except IntegrityError:
            if not _PROCESS_IDS.get(_process_ids_key(job.project_id)):
                raise
            # A foreign key failed at commit: a test-case id kept by this process may belong to a row deleted
            # since. The transaction was rolled back; forget the kept ids and import once more, looking up all.
            testcase_ids_forget(project_id=job.project_id)
            counts = _job_write(job=job, meta=meta, stored_files=stored_files, progress=progress, refresh=refresh)
    except (JUnitParseError, ResultsImportError) as exc:
        _job_fail(job, str(exc))
        raise ResultsImportError(str(exc)) from exc
    except Exception as exc:  # unexpected: keep the file, record the error, re-raise for the logs
        log.exception("results import job %s failed", job.pk)
        _job_fail(job, f"internal error while importing: {exc.__class__.__name__}: {exc}")
        raise
    return counts


def _job_write(
    *, job: ImportJob, meta: BuildMeta, stored_files: list[StoredFile], progress: bool, refresh: bool
) -> ImportCounts:
    """The import transaction of results_job_run: all rows, the rollup and the job's final state, or nothing."""
    counts = ImportCounts()
    total_bytes = max(1, sum(s.size for s in stored_files))
    done_bytes = 0
    with transaction.atomic():
        build, created = _build_get_or_create(job.project, meta, None)
        writer = _BuildWriter(job=job, build=build, counts=counts, existing=not created)
        for stored in stored_files:
            for display, sha, stream in _reports_in(stored):
                writer.report(display, sha, stream)
            done_bytes += stored.size
            if progress:
                _progress_save(job, done_bytes / total_bytes)
        writer.finish()
        job.build = build
        job.status = ImportJob.Status.DONE
        job.counts = counts.as_dict()
        job.warnings = counts.warnings
        job.progress = 1.0
        job.finished_at = timezone.now()
        job.save(update_fields=["build", "status", "counts", "warnings", "progress", "finished_at"])
        if writer.new_results and refresh:
            from ingest.hooks import after_results_import

            transaction.on_commit(lambda: after_results_import(project_id=job.project_id, build_id=build.id))
    return counts


def progress_cache_key(job_id: int) -> str:
    return f"barometer:import-progress:{job_id}"


def _progress_save(job: ImportJob, value: float) -> None:
    # The job row is inside the import transaction and invisible to pollers until commit: publish the
    # progress through the cache (shared by web and workers when CACHE_URL points at Redis).
    cache.set(progress_cache_key(job.pk), min(value, 0.99), timeout=3600)


def _job_fail(job: ImportJob, message: str) -> None:
    ImportJob.objects.filter(pk=job.pk).update(
        status=ImportJob.Status.FAILED, error=message, finished_at=timezone.now(), progress=0.0
    )
    job.refresh_from_db()


class _BuildWriter:
    def __init__(self, *, job: ImportJob, build: Build, counts: ImportCounts, existing: bool = True):
        self.job = job
        self.build = build
        self.project = job.project
        self.counts = counts
        self.cases = _TestCaseCache(self.project)
        # A build created by this job has no results and no imported reports yet: skip both queries.
        self.max_attempt: dict[int, int] = {}
        self.known_reports: set[str] = set()
        if existing:
            self.max_attempt = dict(
                TestResult.objects.filter(build=build)
                .values("test_case_id")
                .annotate(m=Max("attempt"))
                .values_list("test_case_id", "m")
            )
            self.known_reports = set(
                ImportedReport.objects.filter(project=self.project, build=build).values_list("sha256", flat=True)
            )
        self.imported: list[ImportedReport] = []
        # This job's additions to the weekly rollup, per test case: runs, passed, failed, errors, skipped,
        # reruns, duration total, duration count (only the rows written here: a build fed by several jobs
        # must not count the earlier jobs' results twice).
        self.weekly: dict[int, list] = {}
        self.new_results = 0
        self.earliest_ts: datetime | None = None

    def report(self, display: str, sha: str, stream: BinaryIO) -> None:
        if sha in self.known_reports:
            self.counts.reports_already_imported += 1
            return
        self.known_reports.add(sha)
        reader = JUnitReader(stream, filename=display)
        file_max: dict[int, int] = {}
        base = dict(self.max_attempt)
        written = 0
        batch: list[ParsedResult] = []
        for parsed in reader:
            batch.append(parsed)
            if len(batch) >= BATCH_SIZE:
                written += self._write(batch, base, file_max)
                batch = []
        if batch:
            written += self._write(batch, base, file_max)
        for tc_id, attempt in file_max.items():
            self.max_attempt[tc_id] = max(self.max_attempt.get(tc_id, 0), attempt)
        self.counts.warnings.extend(reader.warnings)
        self.counts.reports += 1
        # Written in one INSERT by finish(), inside the same transaction.
        self.imported.append(
            ImportedReport(
                project=self.project, build=self.build, sha256=sha, original_name=display[:500], job=self.job,
                results=written,
            )
        )

    def _write(self, batch: list[ParsedResult], base: dict[int, int], file_max: dict[int, int]) -> int:
        self.cases.resolve(batch)
        rows = []
        ids = self.cases.ids
        weekly = self.weekly
        for p in batch:
            tc_id = ids[_key(p)]
            attempt = base.get(tc_id, 0) + p.attempt
            if attempt > file_max.get(tc_id, 0):
                file_max[tc_id] = attempt
            self.counts.add(p.outcome, attempt)
            week = weekly.get(tc_id)
            if week is None:
                week = weekly[tc_id] = [0, 0, 0, 0, 0, 0, 0.0, 0]
            week[0] += 1
            slot = _OUTCOME_SLOT.get(p.outcome)
            if slot is not None:
                week[slot] += 1
            if attempt > 1:
                week[5] += 1
            if p.duration is not None:
                week[6] += p.duration
                week[7] += 1
            rows.append(
                (
                    self.project.id, self.build.id, tc_id, p.outcome, p.duration, attempt, p.failure_type[:300],
                    p.message, p.details, p.system_out, p.system_err,
                    json.dumps(dict(p.truncated)) if p.truncated else "{}", "",
                )
            )
        n = rows_bulk_insert(table=TestResult._meta.db_table, columns=RESULT_COLUMNS, rows=rows)
        self.new_results += n
        return n

    def finish(self) -> None:
        self.counts.new_test_cases = self.cases.created
        self.cases.publish_on_commit()
        if self.imported:
            ImportedReport.objects.bulk_create(self.imported)
        if self.new_results:
            rollup_add_counts(project_id=self.project.id, week=self.build.week, counts=self.weekly)


# --------------------------------------------------------------------------------------------------- rollups
_ROLLUP_SELECT = """
    SELECT r.project_id, r.test_case_id, b.week,
           COUNT(*),
           SUM(CASE WHEN r.outcome = 'passed' THEN 1 ELSE 0 END),
           SUM(CASE WHEN r.outcome = 'failed' THEN 1 ELSE 0 END),
           SUM(CASE WHEN r.outcome = 'error' THEN 1 ELSE 0 END),
           SUM(CASE WHEN r.outcome = 'skipped' THEN 1 ELSE 0 END),
           SUM(CASE WHEN r.attempt > 1 THEN 1 ELSE 0 END),
           COALESCE(SUM(r.duration), 0),
           COUNT(r.duration)
    FROM ingest_testresult r JOIN ingest_build b ON b.id = r.build_id
"""
_ROLLUP_INSERT = (
    "INSERT INTO ingest_testweek (project_id, test_case_id, week, runs, passed, failed, errors, skipped, reruns,"
    " duration_total, duration_count) "
)


_OUTCOME_SLOT = {"passed": 1, "failed": 2, "error": 3, "skipped": 4}
_ROLLUP_FIELDS = ("runs", "passed", "failed", "errors", "skipped", "reruns", "duration_total", "duration_count")
_ROLLUP_COLUMNS = ", ".join(_ROLLUP_FIELDS)


def _rollup_add(table: str, conflict: str, fields: tuple[str, ...]) -> str:
    """``ON CONFLICT … DO UPDATE`` adding the new row's counts to the stored ones."""
    sets = ", ".join(f"{f} = {table}.{f} + excluded.{f}" for f in fields)
    return f" ON CONFLICT ({conflict}) DO UPDATE SET {sets}"


_TESTWEEK_ADD = _rollup_add("ingest_testweek", "test_case_id, week", _ROLLUP_FIELDS)
_PROJECTWEEK_ADD = _rollup_add("ingest_projectweek", "project_id, week, component_key", ("tests", *_ROLLUP_FIELDS))
_PROJECTWEEK_INSERT = f"INSERT INTO ingest_projectweek (project_id, week, component_key, tests, {_ROLLUP_COLUMNS})"


def rollup_add_counts(*, project_id: int, week, counts: dict[int, list]) -> None:
    """Add one job's results to the weekly rollups (cost grows with the job only, not with the history).

    ``counts`` maps test case id → [runs, passed, failed, errors, skipped, reruns, duration total, duration
    count] of the rows this job wrote into a build of ``week``. Updates the per-test rows (``TestWeek``)
    and the per-component totals (``ProjectWeek``); a test counts towards ``ProjectWeek.tests`` when this
    job gave it its first run of the week. Must run in the transaction that wrote the results.
    """
    if not counts:
        return
    with connection.cursor() as cursor:
        if connection.vendor == "postgresql":
            # One statement, one JSON parameter (serialised in C, unpacked by the server). The per-test upsert
            # returns each row's runs after the addition: equal to this job's runs means the job added the
            # test's first run of the week (exact under concurrent jobs: the upsert reads the committed row).
            sums = ", ".join(f"SUM(d.{f})" for f in _ROLLUP_FIELDS)
            cursor.execute(
                "WITH d AS (SELECT * FROM json_to_recordset(%s::json) AS d(t bigint, runs int, passed int,"
                " failed int, errors int, skipped int, reruns int, duration_total float8, duration_count int)),"
                f" tw AS (INSERT INTO ingest_testweek (project_id, test_case_id, week, {_ROLLUP_COLUMNS})"
                f" SELECT %s, d.t, %s::date, {', '.join('d.' + f for f in _ROLLUP_FIELDS)} FROM d"
                + _TESTWEEK_ADD + " RETURNING test_case_id, runs)"
                + _PROJECTWEEK_INSERT
                + f" SELECT %s, %s::date, COALESCE(c.component_id, 0),"
                f" SUM(CASE WHEN tw.runs = d.runs THEN 1 ELSE 0 END), {sums}"
                " FROM d JOIN tw ON tw.test_case_id = d.t JOIN ingest_testcase c ON c.id = d.t"
                " GROUP BY COALESCE(c.component_id, 0) ORDER BY 3" + _PROJECTWEEK_ADD,
                # Rows in test-id and component order: concurrent jobs lock shared rows in the same order.
                [json.dumps([{"t": tc, **dict(zip(_ROLLUP_FIELDS, c, strict=True))} for tc, c in sorted(counts.items())]),
                 project_id, week, project_id, week],
            )
            return
        week_db = connection.ops.adapt_datefield_value(week)
        known: dict[int, tuple[int, bool]] = {}  # test case id → (component key, already ran this week)
        ids = list(counts)
        for start in range(0, len(ids), 500):
            chunk = ids[start : start + 500]
            cursor.execute(
                "SELECT c.id, COALESCE(c.component_id, 0), w.id FROM ingest_testcase c LEFT JOIN ingest_testweek w"
                f" ON w.test_case_id = c.id AND w.week = %s WHERE c.id IN ({', '.join(['%s'] * len(chunk))})",
                [week_db, *chunk],
            )
            known.update((tc, (comp, w is not None)) for tc, comp, w in cursor.fetchall())
        cursor.executemany(
            f"INSERT INTO ingest_testweek (project_id, test_case_id, week, {_ROLLUP_COLUMNS})"
            " VALUES (%s, %s, %s, %s, %s, %s, %s, %s, %s, %s, %s)" + _TESTWEEK_ADD,
            [(project_id, tc, week_db, *c) for tc, c in counts.items()],
        )
        totals: dict[int, list] = {}
        for tc, c in counts.items():
            if tc not in known:  # a test case deleted since this process cached its id: import again, looking up
                raise IntegrityError(f"test case {tc} no longer exists")
            comp, ran_before = known[tc]
            total = totals.setdefault(comp, [0] * (len(_ROLLUP_FIELDS) + 1))
            total[0] += 0 if ran_before else 1
            for i, value in enumerate(c, start=1):
                total[i] += value
        cursor.executemany(
            _PROJECTWEEK_INSERT + " VALUES (%s, %s, %s, %s, %s, %s, %s, %s, %s, %s, %s, %s)" + _PROJECTWEEK_ADD,
            [(project_id, week_db, comp, *t) for comp, t in totals.items()],
        )


#: ``ProjectWeek`` rows recomputed from ``TestWeek`` (the rebuild; ``{where}`` filters ``w``).
_PROJECTWEEK_FROM_TESTWEEK = (
    _PROJECTWEEK_INSERT
    + " SELECT w.project_id, w.week, COALESCE(c.component_id, 0), SUM(CASE WHEN w.runs > 0 THEN 1 ELSE 0 END), "
    + ", ".join(f"SUM(w.{f})" for f in _ROLLUP_FIELDS)
    + " FROM ingest_testweek w JOIN ingest_testcase c ON c.id = w.test_case_id {where}"
    " GROUP BY w.project_id, w.week, COALESCE(c.component_id, 0)"
)


def project_weeks_rebuild(*, project_id: int, week=None) -> None:
    """Recompute the per-component weekly totals of a project (or one week) from the per-test rollup.

    Called when tests change component or are deleted (the component rules, the admin), since the totals
    are kept per component, and by :func:`rollup_rebuild`. Its cost grows with tests × weeks: an administrative step, not a per-build one.
    """
    where, params = "WHERE w.project_id = %s", [project_id]
    if week is not None:
        where += " AND w.week = %s"
        params.append(connection.ops.adapt_datefield_value(week))
    with transaction.atomic(), connection.cursor() as cursor:
        cursor.execute(
            "DELETE FROM ingest_projectweek WHERE project_id = %s" + (" AND week = %s" if week is not None else ""),
            params,
        )
        cursor.execute(_PROJECTWEEK_FROM_TESTWEEK.format(where=where), params)


def rollup_rebuild(*, project: Project, week=None) -> None:
    """Recompute the rollups of a project (or one week of it) from the results table."""
    from ingest.models import TestWeek

    with transaction.atomic():
        qs = TestWeek.objects.filter(project=project)
        params: list = [project.id]
        where = " WHERE r.project_id = %s"
        if week is not None:
            qs = qs.filter(week=week)
            where += " AND b.week = %s"
            params.append(week)
        qs.delete()
        with connection.cursor() as cursor:
            cursor.execute(
                _ROLLUP_INSERT + _ROLLUP_SELECT + where + " GROUP BY r.project_id, r.test_case_id, b.week", params
            )
        project_weeks_rebuild(project_id=project.id, week=week)


# --------------------------------------------------------------------------------------------------- reprocess
def build_results_reset(*, build: Build) -> list[ImportJob]:
    """Delete a build's results and import records (for re-parsing); returns the jobs that fed it, oldest first."""
    weeks = {build.week}
    jobs = list(ImportJob.objects.filter(build=build, kind=ImportJob.Kind.RESULTS).order_by("created_at", "id"))
    TestResult.objects.filter(build=build).delete()
    ImportedReport.objects.filter(build=build).delete()
    for week in weeks:
        rollup_rebuild(project=build.project, week=week)
    return jobs


def reports_from_path(path: Path) -> list[Path]:
    """The report files a CLI path stands for: a file, a .zip, or every *.xml below a directory."""
    if path.is_dir():
        found = sorted(p for p in path.rglob("*.xml") if p.is_file())
        if not found:
            raise ResultsImportError(ERR_NO_REPORTS.format(name=str(path)))
        return found
    if not path.exists():
        raise ResultsImportError(f"{path}: no such file or directory")
    return [path]
