"""JUnit-XML import end to end: CLI, service, idempotency, hostile input, rollups."""

from __future__ import annotations

import io
import subprocess
import sys
import textwrap

import pytest
from django.core.management import CommandError, call_command

from ingest.models import Build, ImportJob, Project, TestCase, TestResult, TestWeek
from ingest.services.results import rollup_rebuild

SAMPLE_SUITE = textwrap.dedent(
    """
    import pytest

    @pytest.fixture
    def broken():
        raise RuntimeError("fixture exploded")

    def test_pass():
        assert True

    @pytest.mark.parametrize("n", [1, 2, 3])
    def test_param(n):
        assert n < 3

    def test_error_in_setup(broken):
        pass

    def test_skip():
        pytest.skip("not on this platform")

    @pytest.mark.xfail(reason="known bug")
    def test_xfail():
        assert False
    """
)
# What pytest reports for SAMPLE_SUITE (pytest's own semantics: a failing parametrised case is a failure,
# a setup exception an error, xfail a skip in --junitxml; _pytest/junitxml.py).
EXPECTED = {
    "test_pass": "passed",
    "test_param[1]": "passed",
    "test_param[2]": "passed",
    "test_param[3]": "failed",
    "test_error_in_setup": "error",
    "test_skip": "skipped",
    "test_xfail": "skipped",
}


def pytest_junitxml(tmp_path, family: str):
    (tmp_path / "test_sample.py").write_text(SAMPLE_SUITE)
    report = tmp_path / f"report-{family}.xml"
    subprocess.run(
        [sys.executable, "-m", "pytest", "-q", "-p", "no:django", "-p", "no:cacheprovider",
         f"--junitxml={report}", "-o", f"junit_family={family}", str(tmp_path / "test_sample.py")],
        cwd=tmp_path, capture_output=True, check=False,
    )
    assert report.exists()
    return report


@pytest.mark.django_db
@pytest.mark.parametrize("family", ["xunit1", "xunit2"])
def test_cli_stores_exactly_what_pytest_reported(tmp_path, family, capsys):
    # Source: pytest's own --junitxml output for a suite with known outcomes.
    report = pytest_junitxml(tmp_path, family)
    call_command("ingest_results", str(report), project="berthwise", build="b-1", commit="abc123",
                 branch="main", started="2026-11-02T10:00:00Z", ci_job="pr-checks", no_progress=True)
    stored = {r.test_case.name: r.outcome for r in TestResult.objects.select_related("test_case")}
    assert stored == EXPECTED
    build = Build.objects.get(external_id="b-1")
    assert (build.commit, build.branch, build.ci_job) == ("abc123", "main", "pr-checks")
    assert str(build.week) == "2026-11-02"
    out = capsys.readouterr().out
    assert "failed          1" in out and "errors          1" in out and "skipped         2" in out
    job = ImportJob.objects.get()
    assert job.status == "done" and job.warnings == []
    assert job.counts["tests"] == 7


@pytest.mark.django_db
def test_reupload_is_idempotent(tmp_path):
    report = pytest_junitxml(tmp_path, "xunit2")
    args = dict(project="berthwise", build="b-1", no_progress=True)
    call_command("ingest_results", str(report), **args)
    before = (TestResult.objects.count(), TestCase.objects.count(), list(TestWeek.objects.values_list("runs")))
    call_command("ingest_results", str(report), **args)
    after = (TestResult.objects.count(), TestCase.objects.count(), list(TestWeek.objects.values_list("runs")))
    assert before == after
    assert ImportJob.objects.order_by("-id").first().counts["reports_already_imported"] == 1


@pytest.mark.django_db
def test_same_test_in_two_files_of_a_build_becomes_attempts(tmp_path):
    # Common practice: rerun tools write the rerun into a second report of the same build.
    xml = '<testsuite name="s" tests="1" failures="{f}"><testcase classname="pay.T" name="t">{body}</testcase></testsuite>'
    (tmp_path / "a.xml").write_text(xml.format(f=1, body='<failure message="boom"/>'))
    (tmp_path / "b.xml").write_text(xml.format(f=0, body=""))
    call_command("ingest_results", str(tmp_path), project="p", build="b", no_progress=True)
    assert list(TestResult.objects.order_by("attempt").values_list("attempt", "outcome")) == [
        (1, "failed"), (2, "passed")]


HOSTILE = {
    "truncated.xml": (b'<testsuite name="s"><testcase name="a"/><testcase name="b">', "truncated"),
    "notxml.xml": (b"this is a plain text log, not a report\n", "not"),
    "wrongroot.xml": (b"<html><body>404</body></html>", "root"),
    "empty.xml": (b"", "empty"),
    "bomb.xml": (
        b'<?xml version="1.0"?><!DOCTYPE lolz [<!ENTITY lol "lol"><!ENTITY lol2 "&lol;&lol;&lol;&lol;">]>'
        b'<testsuite name="&lol2;"><testcase name="x"/></testsuite>',
        "DOCTYPE",
    ),
}


@pytest.mark.django_db
@pytest.mark.parametrize("name", sorted(HOSTILE))
def test_hostile_report_fails_with_reason_and_no_rows(tmp_path, name):
    content, words = HOSTILE[name]
    # a good report in the same build: the whole upload must still roll back
    (tmp_path / "good.xml").write_text('<testsuite name="s" tests="1"><testcase name="ok"/></testsuite>')
    (tmp_path / name).write_bytes(content)
    with pytest.raises(CommandError) as err:
        call_command("ingest_results", str(tmp_path), project="p", build="b", no_progress=True)
    assert name in str(err.value)
    assert words.lower() in str(err.value).lower()
    assert TestResult.objects.count() == 0 and TestWeek.objects.count() == 0
    job = ImportJob.objects.get()
    assert job.status == "failed" and name in job.error
    assert job.files.count() == 2  # the raw files are kept for a retry


@pytest.mark.django_db
def test_external_entity_content_never_stored(tmp_path):
    secret = tmp_path / "secret.txt"
    secret.write_text("TOP-SECRET-MARKER")
    evil = (f'<?xml version="1.0"?><!DOCTYPE t [<!ENTITY x SYSTEM "file://{secret}">]>'
            '<testsuite name="s"><testcase name="a"><failure message="&x;">&x;</failure></testcase></testsuite>')
    (tmp_path / "evil.xml").write_text(evil)
    with pytest.raises(CommandError):
        call_command("ingest_results", str(tmp_path / "evil.xml"), project="p", build="b", no_progress=True)
    assert TestResult.objects.count() == 0
    assert "TOP-SECRET-MARKER" not in ImportJob.objects.get().error


@pytest.mark.django_db
def test_latin1_report_is_read(tmp_path):
    data = ('<?xml version="1.0" encoding="ISO-8859-1"?><testsuite name="s" tests="1">'
            '<testcase classname="reports.Harbour" name="test_caf\u00e9_r\u00e9sum\u00e9"/></testsuite>')
    (tmp_path / "l1.xml").write_bytes(data.encode("latin-1"))
    call_command("ingest_results", str(tmp_path / "l1.xml"), project="p", build="b", no_progress=True)
    assert TestCase.objects.get().name == "test_caf\u00e9_r\u00e9sum\u00e9"


@pytest.mark.django_db
def test_manifest_backfill_and_rollup_match_recomputation(tmp_path):
    suite = '<testsuite name="s" tests="2" failures="{f}"><testcase classname="c" name="a"{body}<testcase classname="c" name="b" time="1,5"/></testsuite>'
    rows = ["build,file,commit,branch,started,ci_job"]
    for i in range(6):
        body = '><failure message="x"/></testcase>' if i % 2 else "/>"
        (tmp_path / f"r{i}.xml").write_text(suite.format(f=i % 2, body=body))
        rows.append(f"b{i},r{i}.xml,c{i},main,2026-10-{i * 5 + 1:02d}T08:00:00Z,nightly")
    (tmp_path / "manifest.csv").write_text("\n".join(rows) + "\n")
    call_command("ingest_results", manifest=str(tmp_path / "manifest.csv"), project="p", no_progress=True)
    out = io.StringIO()
    call_command("ingest_results", manifest=str(tmp_path / "manifest.csv"), project="p", no_progress=True,
                 stdout=out)
    assert Build.objects.count() == 6 and TestResult.objects.count() == 12
    # The rerun skips every report without leaving an empty job per build behind.
    assert ImportJob.objects.count() == 6 and "already imported, skipped: 6" in out.getvalue()
    incremental = sorted(TestWeek.objects.values_list("test_case__name", "week", "runs", "failed", "duration_total"))
    rollup_rebuild(project=Project.objects.get(slug="p"))
    rebuilt = sorted(TestWeek.objects.values_list("test_case__name", "week", "runs", "failed", "duration_total"))
    assert incremental == rebuilt
    assert sum(r[3] for r in rebuilt if r[0] == "a") == 3 and sum(r[3] for r in rebuilt if r[0] == "b") == 0


@pytest.mark.django_db
def test_two_jobs_into_one_build_keep_the_rollup_equal_to_recomputation():
    # Regression: a second report imported into an existing build counted the first job's results twice in
    # the weekly rollup. Reference: the rollup recomputed from the stored results (rollup_rebuild).
    import io as _io

    from ingest.services.results import BuildMeta, results_job_create, results_job_run

    project = Project.objects.create(slug="p", name="p")
    for i, name in enumerate(["a", "b"]):
        xml = (f'<testsuite name="s"><testcase classname="c" name="{name}" time="1"/>'
               f'<testcase classname="c" name="z" time="2"/></testsuite>').encode()
        job = results_job_create(project=project, files=[(f"r{i}.xml", _io.BytesIO(xml))],
                                 meta=BuildMeta(build="b1", started="2026-10-01T00:00:00Z"), via="cli")
        results_job_run(job=job, refresh=False)
    incremental = sorted(TestWeek.objects.values_list("test_case__name", "runs", "duration_total"))
    rollup_rebuild(project=project)
    assert incremental == sorted(TestWeek.objects.values_list("test_case__name", "runs", "duration_total"))
    assert dict((n, r) for n, r, _ in incremental) == {"a": 1, "b": 1, "z": 2}
