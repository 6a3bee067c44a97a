"""Tests for ingest/parsers/junit.py against outside sources.

Sources: pytest's own ``--junitxml`` writer (``_pytest/junitxml.py``), the ``unittest-xml-reporting`` runner
(module ``xmlrunner``), the ``junitparser`` library, the Apache Maven Surefire test-report schema
(``surefire-test-report-3.0.xsd``), the W3C XML 1.0 recommendation and the OWASP XML External Entity
Prevention Cheat Sheet.
"""

from __future__ import annotations

import gc
import io
import subprocess
import sys
import tracemalloc
from collections import Counter
from datetime import UTC, datetime
from pathlib import Path

import psutil
import pytest

from ingest.parsers.junit import (
    DETAILS_CAP,
    ERR_DOCTYPE,
    ERR_EMPTY,
    ERR_MALFORMED,
    ERR_NOT_XML,
    ERR_PROLOG,
    ERR_ROOT,
    ERR_TRUNCATED,
    JUNIT_OUTCOMES,
    MESSAGE_CAP,
    OUTPUT_CAP,
    JUnitParseError,
    JUnitReader,
    ParsedResult,
    junit_time_parse,
    parse_junit,
)
from tests.ingest.parsers.conftest import FIXTURE_DIR, junitparser_attempts, junitparser_counts

FIXTURES = sorted(FIXTURE_DIR.glob("*.xml"))
RERUN_TAGS = (b"rerunFailure", b"rerunError", b"flakyFailure", b"flakyError")


def _by_name(results: list[ParsedResult]) -> dict[str, list[ParsedResult]]:
    grouped: dict[str, list[ParsedResult]] = {}
    for result in results:
        grouped.setdefault(result.name, []).append(result)
    return grouped


def _outcome_counts(results: list[ParsedResult]) -> dict[str, int]:
    counter = Counter(r.outcome for r in results)
    return {
        "tests": len(results),
        "failures": counter["failed"],
        "errors": counter["error"],
        "skipped": counter["skipped"],
    }


# ---------------------------------------------------------------------------------------------------------
# 1. pytest's own --junitxml output, both families.

PYTEST_SAMPLE = """
import pytest

@pytest.fixture
def broken_dock():
    raise RuntimeError("dock sensor offline")

@pytest.fixture
def leaky_dock():
    yield
    raise RuntimeError("dock left open")

def test_books_berth():
    print("booking berth A-1")
    assert 1 + 1 == 2

@pytest.mark.parametrize("length", [8, 12])
def test_fits_slip(length):
    assert length < 15

def test_rejects_overlong():
    assert 18 < 15, "hull too long"

def test_uses_sensor(broken_dock):
    pass

@pytest.mark.skip(reason="crane under repair")
def test_lifts_boat():
    pass

@pytest.mark.xfail(reason="known tide bug")
def test_tide_rounding():
    assert 0.1 + 0.2 == 0.3

@pytest.mark.xfail(reason="was buggy")
def test_fixed_already():
    pass

@pytest.mark.xfail(reason="must fail", strict=True)
def test_strict_xpass():
    pass

def test_passes_then_teardown_fails(leaky_dock):
    pass

def test_fails_and_teardown_fails(leaky_dock):
    assert False, "gate jammed"
"""

# Expected outcome per test, from pytest's documented semantics (_pytest/junitxml.py): failures -> <failure>,
# setup/teardown errors -> <error>, skip and xfail -> <skipped>, non-strict xpass -> passed,
# strict xpass -> <failure>.
PYTEST_EXPECTED = {
    "test_books_berth": "passed",
    "test_fits_slip[8]": "passed",
    "test_fits_slip[12]": "passed",
    "test_rejects_overlong": "failed",
    "test_uses_sensor": "error",
    "test_lifts_boat": "skipped",
    "test_tide_rounding": "skipped",
    "test_fixed_already": "passed",
    "test_strict_xpass": "failed",
    "test_passes_then_teardown_fails": "error",
    "test_fails_and_teardown_fails": "failed",
}


def _run_pytest_junit(workdir: Path, family: str) -> Path:
    (workdir / "test_sample.py").write_text(PYTEST_SAMPLE)
    report = workdir / f"report-{family}.xml"
    subprocess.run(
        [
            sys.executable,
            "-m",
            "pytest",
            "-p",
            "no:django",
            "-p",
            "no:cacheprovider",
            "-q",
            f"--junitxml={report}",
            "-o",
            f"junit_family={family}",
            "--rootdir",
            str(workdir),
            "test_sample.py",
        ],
        cwd=workdir,
        capture_output=True,
        check=False,
        timeout=120,
    )
    assert report.exists()
    return report


@pytest.fixture(scope="module")
def pytest_reports(tmp_path_factory) -> dict[str, Path]:
    """pytest's report for the sample module in each family, run once per test module."""
    return {
        family: _run_pytest_junit(tmp_path_factory.mktemp(f"pytest-{family}"), family)
        for family in ("xunit1", "xunit2")
    }


@pytest.mark.parametrize("family", ["xunit1", "xunit2"])
def test_pytest_junitxml_output(pytest_reports, family):
    # Source: pytest's own --junitxml writer (_pytest/junitxml.py), run in a subprocess.
    report = pytest_reports[family]
    results, warnings = parse_junit(report)

    # The header pytest wrote agrees with what was read (per-element convention): no warning.
    assert warnings == []
    outcomes = {r.name: r.outcome for r in results}
    assert outcomes == PYTEST_EXPECTED
    # pytest writes a second testcase element for "call failed + teardown errored" (_pytest/junitxml.py,
    # "open new testcase in case we have failure in call and error in teardown"): same run, not a rerun.
    assert all(r.attempt == 1 for r in results)
    both = next(r for r in results if r.name == "test_fails_and_teardown_fails")
    assert "gate jammed" in both.message or "gate jammed" in both.details
    assert "failed on teardown with" in both.details

    by_name = {r.name: r for r in results}
    # pytest: setup errors read 'failed on setup with "..."' (_pytest/junitxml.py).
    assert by_name["test_uses_sensor"].message.startswith("failed on setup with")
    assert "dock sensor offline" in by_name["test_uses_sensor"].details
    # pytest: xfail is <skipped type="pytest.xfail">, skip is <skipped type="pytest.skip">.
    assert by_name["test_tide_rounding"].failure_type == "pytest.xfail"
    assert by_name["test_lifts_boat"].failure_type == "pytest.skip"
    assert "crane under repair" in by_name["test_lifts_boat"].message
    # pytest: <failure message=...> has no type attribute.
    assert by_name["test_rejects_overlong"].failure_type == ""
    assert "hull too long" in by_name["test_rejects_overlong"].message
    # pytest: testsuite name "pytest", classname is the dotted module path.
    assert {r.suite for r in results} == {"pytest"}
    assert {r.classname for r in results} == {"test_sample"}
    # xunit1 adds the file attribute, xunit2 allows only classname and name.
    expected_file = "test_sample.py" if family == "xunit1" else ""
    assert {r.file for r in results} == {expected_file}
    # pytest writes an ISO timestamp with the local offset; we hold it as aware UTC near "now".
    stamps = {r.timestamp for r in results}
    assert len(stamps) == 1
    stamp = stamps.pop()
    assert stamp is not None and stamp.tzinfo is not None and stamp.utcoffset().total_seconds() == 0
    assert abs((datetime.now(UTC) - stamp).total_seconds()) < 600
    assert all(r.duration is not None and r.duration >= 0 for r in results)


@pytest.mark.parametrize("family", ["xunit1", "xunit2"])
def test_pytest_junitxml_counts_match_header_and_junitparser(pytest_reports, family):
    # Sources: pytest's suite header counts (_pytest/junitxml.py) and the junitparser library.
    report = pytest_reports[family]
    reader = JUnitReader(report)
    list(reader)
    assert reader.parsed_totals == junitparser_counts(report)
    assert reader.declared_totals == reader.parsed_totals
    assert reader.suite_count == 1


# ---------------------------------------------------------------------------------------------------------
# 2. unittest-xml-reporting (module xmlrunner).

UNITTEST_SAMPLE = """
import sys
import unittest

import xmlrunner


class BerthLedgerTest(unittest.TestCase):
    def test_credit(self):
        self.assertEqual(2 + 2, 4)

    def test_debit(self):
        self.assertEqual(2 + 2, 5, "ledger off")

    def test_sync(self):
        raise ConnectionError("ledger offline")

    @unittest.skip("no harbour master")
    def test_signoff(self):
        pass

    @unittest.expectedFailure
    def test_rounding(self):
        self.assertEqual(0.1 + 0.2, 0.3)


class FuelDockTest(unittest.TestCase):
    def test_pump(self):
        print("pumping")


if __name__ == "__main__":
    with open(sys.argv[1], "wb") as out:
        unittest.main(argv=["x"], testRunner=xmlrunner.XMLTestRunner(output=out), exit=False)
"""


def test_unittest_xml_reporting_output(tmp_path):
    # Source: the unittest-xml-reporting runner (xmlrunner.XMLTestRunner), run in a subprocess.
    script = tmp_path / "ledger_tests.py"
    script.write_text(UNITTEST_SAMPLE)
    report = tmp_path / "unittest.xml"
    subprocess.run(
        [sys.executable, str(script), str(report)],
        cwd=tmp_path,
        capture_output=True,
        check=False,
        timeout=120,
    )
    results, warnings = parse_junit(report)
    assert warnings == []
    outcomes = {r.name: r.outcome for r in results}
    # unittest semantics (Python docs, unittest): assertion -> failure, other exception -> error,
    # skip decorator -> skipped; xmlrunner writes an expected failure as <skipped type="XFAIL">.
    assert outcomes == {
        "test_credit": "passed",
        "test_debit": "failed",
        "test_sync": "error",
        "test_signoff": "skipped",
        "test_rounding": "skipped",
        "test_pump": "passed",
    }
    by_name = {r.name: r for r in results}
    assert by_name["test_debit"].failure_type == "AssertionError"
    assert "ledger off" in by_name["test_debit"].message
    assert by_name["test_sync"].failure_type == "ConnectionError"
    assert "ledger offline" in by_name["test_sync"].details
    assert by_name["test_rounding"].failure_type == "XFAIL"
    assert {r.suite.split("-")[0] for r in results} == {"BerthLedgerTest", "FuelDockTest"}
    reader = JUnitReader(report)
    list(reader)
    assert (
        reader.parsed_totals
        == junitparser_counts(report)
        == {
            "tests": 6,
            "failures": 1,
            "errors": 1,
            "skipped": 2,
        }
    )


# ---------------------------------------------------------------------------------------------------------
# 3. Every fixture file cross-checked against junitparser.


@pytest.mark.parametrize("path", FIXTURES, ids=lambda p: p.name)
def test_fixture_counts_match_junitparser(path):
    # Source: junitparser (general-purpose JUnit-XML library) counting the same file.
    reader = JUnitReader(path)
    results = list(reader)
    reference = junitparser_counts(path)
    assert reader.parsed_totals == reference
    if not any(tag in path.read_bytes() for tag in RERUN_TAGS):
        # Without rerun elements each testcase element is one attempt.
        assert _outcome_counts(results) == reference
    assert all(r.outcome in JUNIT_OUTCOMES for r in results)


@pytest.mark.parametrize("path", FIXTURES, ids=lambda p: p.name)
def test_fixture_headers_raise_no_warning_except_bad_times(path):
    # The fixtures' headers were written by hand from their testcases; only odd_times.xml has unreadable
    # time values, which must be reported.
    _, warnings = parse_junit(path)
    if path.name == "odd_times.xml":
        assert len(warnings) == 1 and "odd_times.xml" in warnings[0] and "'fast'" in warnings[0]
    else:
        assert warnings == []


# ---------------------------------------------------------------------------------------------------------
# 4. Surefire rerun elements (Apache Maven Surefire, surefire-test-report-3.0.xsd).


def test_surefire_reruns_become_attempts():
    # Source: surefire-test-report-3.0.xsd: a test that passed on rerun is a passing testcase with
    # flakyFailure/flakyError children; one that failed every run has failure/error plus
    # rerunFailure/rerunError; rerun elements carry message, type, stackTrace, system-out, system-err.
    path = FIXTURE_DIR / "surefire_reruns.xml"
    results, warnings = parse_junit(path)
    assert warnings == []
    runs = _by_name(results)

    # Attempts per testcase agree with junitparser's xunit2 reading of the rerun elements.
    assert {name: len(attempts) for name, attempts in runs.items()} == junitparser_attempts(path)

    flaky = runs["releasesBerthOnCancel"]
    assert [(r.attempt, r.outcome) for r in flaky] == [(1, "failed"), (2, "error"), (3, "passed")]
    assert flaky[0].failure_type == "org.opentest4j.AssertionFailedError"
    assert flaky[0].message == "expected: <FREE> but was: <HELD>"
    assert "BookingServiceTest.java:41" in flaky[0].details
    assert flaky[0].system_out == "first run: berth B-12 still held"
    assert flaky[1].system_err == "second run: ledger connection reset"
    assert flaky[2].system_out == "third run: berth B-12 released"
    assert flaky[2].duration == pytest.approx(0.031)

    failing = runs["chargesMooringFee"]
    assert [(r.attempt, r.outcome) for r in failing] == [(1, "failed"), (2, "failed"), (3, "failed")]
    assert failing[0].system_out == "first run out"
    assert [r.details for r in failing[1:]] == ["rerun 1 trace", "rerun 2 trace"]
    assert failing[2].message == "fee 12.75 != 10.00" and failing[2].system_out == "rerun 2 out"

    erroring = runs["syncsTideTable"]
    assert [(r.attempt, r.outcome) for r in erroring] == [(1, "error"), (2, "error")]
    assert erroring[1].system_err == "rerun err"
    # Surefire time pattern allows thousands separators: "1,234.5" -> 1234.5 seconds.
    assert erroring[0].duration == pytest.approx(1234.5)

    assert [(r.attempt, r.outcome, r.message) for r in runs["exportsInvoicePdf"]] == [
        (1, "skipped", "printer driver missing")
    ]
    assert [(r.attempt, r.outcome) for r in runs["reservesFreeBerth"]] == [(1, "passed")]
    # Suite-level properties (java.version, ...) are not attached to the results.
    assert all(r.properties == () for r in results)


def test_surefire_header_counted_per_attempt_is_also_accepted():
    # Common practice: some writers count every run in the header; both conventions are accepted, a header
    # matching neither is reported.
    base = (FIXTURE_DIR / "surefire_reruns.xml").read_bytes()
    per_attempt = base.replace(
        b'tests="5" errors="1" skipped="1" failures="1"', b'tests="10" errors="3" skipped="1" failures="4"'
    )
    assert per_attempt != base
    assert parse_junit(per_attempt, filename="surefire.xml")[1] == []
    wrong = base.replace(b'tests="5"', b'tests="6"')
    warnings = parse_junit(wrong, filename="surefire.xml")[1]
    assert len(warnings) == 1
    assert "surefire.xml" in warnings[0] and "marina.berths.BookingServiceTest" in warnings[0]
    assert "tests=6" in warnings[0]


def test_repeated_testcase_counts_attempts():
    # Common practice: some rerun tools repeat the testcase element once per run.
    results, _ = parse_junit(FIXTURE_DIR / "repeated_testcase.xml")
    gate = [(r.attempt, r.outcome, r.message) for r in results if r.name == "opensGate"]
    assert gate == [(1, "failed", "gate stuck"), (2, "failed", "gate stuck again"), (3, "passed", "")]
    assert [r.attempt for r in results if r.name == "closesGate"] == [1]


# ---------------------------------------------------------------------------------------------------------
# Dialect details on the hand-written fixtures.


def test_ant_nested_suites_properties_and_timestamps():
    # Common practice (Ant-style layout); ISO 8601 timestamps, naive read as UTC.
    results, warnings = parse_junit(FIXTURE_DIR / "ant_nested.xml")
    assert warnings == []
    by_name = {r.name: r for r in results}
    first = by_name["fitsCatamaranInWideSlip"]
    assert first.suite == "marina.slips.SlipPlannerTest"
    assert first.properties == (("owner", "slips-team"), ("ticket", "MAR-101"))
    assert first.timestamp == datetime(2024, 3, 4, 9, 15, tzinfo=UTC)
    assert by_name["loadsWinterRates"].timestamp == datetime(2024, 3, 4, 8, 15, 1, tzinfo=UTC)
    hull = by_name["rejectsOverlongHull"]
    assert (hull.outcome, hull.system_out, hull.system_err) == (
        "failed",
        "planning slip S-4",
        "warning: draught unknown",
    )
    assert hull.failure_type == "junit.framework.AssertionFailedError"
    assert "SlipPlannerTest.java:77" in hull.details
    # Suite-level system-out is not attached to any testcase.
    assert all("suite-level output" not in r.system_out for r in results)
    assert (by_name["appliesLoyaltyDiscount"].outcome, by_name["appliesLoyaltyDiscount"].message) == (
        "skipped",
        "",
    )


def test_nested_suites_four_deep_drop_nothing():
    reader = JUnitReader(FIXTURE_DIR / "nested_4_deep.xml")
    results = list(reader)
    assert reader.warnings == []
    assert reader.suite_count == 4
    assert [(r.name, r.suite) for r in results] == [
        ("level1_ok", "marina"),
        ("level2_ok", "marina.booking"),
        ("level4_ok", "marina.booking.slips.sizes"),
        ("level4_fails", "marina.booking.slips.sizes"),
        ("level3_after_inner", "marina.booking.slips"),
        ("level3_skipped", "marina.booking.slips"),
    ]
    assert results[2].timestamp == datetime(2024, 5, 1, 8, 0, tzinfo=UTC)
    assert results[4].timestamp is None


def test_failure_variants_and_cdata():
    # W3C XML 1.0 section 2.7 (CDATA sections), from memory: content is character data, "]]>" cannot occur
    # inside one and is written by splitting the section.
    results, warnings = parse_junit(FIXTURE_DIR / "failure_variants.xml")
    assert warnings == []
    by_name = {r.name: r for r in results}
    assert (by_name["failure_only_type"].outcome, by_name["failure_only_type"].failure_type) == (
        "failed",
        "AssertionError",
    )
    assert by_name["failure_only_message"].message == "berth count off by one"
    assert by_name["failure_only_text"].details == "Traceback: berth count off by one"
    assert (by_name["error_only_type"].outcome, by_name["error_only_type"].failure_type) == (
        "error",
        "TimeoutError",
    )
    cdata = by_name["error_cdata"]
    assert cdata.message == "bad <xml>"
    assert cdata.details == "raise ValueError(\"<dock id='7'> & more\")"
    assert cdata.system_out == "<html>not markup</html> ]]> still output"
    assert (by_name["skipped_bare"].outcome, by_name["skipped_bare"].message) == ("skipped", "")
    assert by_name["skipped_with_message"].failure_type == "pytest.xfail"
    assert by_name["skipped_with_message"].outcome == "skipped"
    assert by_name["passes"].outcome == "passed"


def test_latin1_declared_encoding():
    # W3C XML 1.0 section 4.3.3 (character encoding declaration), from memory: a parser reads the
    # declared ISO-8859-1 bytes as the characters they stand for.
    raw = (FIXTURE_DIR / "latin1.xml").read_bytes()
    with pytest.raises(UnicodeDecodeError):
        raw.decode("utf-8")  # the fixture really is Latin-1, not UTF-8
    results, warnings = parse_junit(raw, filename="latin1.xml")
    assert warnings == []
    assert results[0].suite == "Réservations"
    assert results[0].name == "réserve_le_quai_numéro_7"
    assert results[1].message == "Redevance erronée: 12 EUR != 10"
    assert results[1].details == "Übergröße des Boots"
    assert results[1].system_out == "café crème, façade, naïve"
    assert [r.duration for r in results] == [0.75, 1.25]


def test_odd_time_values():
    results, _ = parse_junit(FIXTURE_DIR / "odd_times.xml")
    durations = {r.name: r.duration for r in results}
    assert durations == {
        "plain": 2.5,
        "empty": None,
        "missing": None,
        "comma_decimal": 1.5,
        "thousands": 1234.5,
        "european_thousands": 1234.5,
        "padded": 0.25,
        "unreadable": None,
        "negative": None,
    }


@pytest.mark.parametrize(
    ("raw", "seconds"),
    [
        # Surefire XSD time pattern (thousands separators, "." decimal): 1,234.5 and 12,345,678.9.
        ("1,234.5", 1234.5),
        ("12,345,678.9", 12345678.9),
        ("1,234", 1234.0),
        # Comma as the decimal mark (common practice in some locales).
        ("1,5", 1.5),
        ("0,123", 0.123),
        ("1.234,5", 1234.5),
        ("0.001", 0.001),
        ("1e-3", 0.001),
        ("0", 0.0),
        ("", None),
        (None, None),
        ("abc", None),
        ("nan", None),
        ("inf", None),
        ("-0.5", None),
        ("1,2,3", None),
    ],
)
def test_junit_time_parse(raw, seconds):
    assert junit_time_parse(raw) == (pytest.approx(seconds) if seconds is not None else None)


def test_empty_suite_yields_nothing_without_error():
    reader = JUnitReader(FIXTURE_DIR / "empty_suite.xml")
    assert list(reader) == []
    assert reader.warnings == []
    assert parse_junit(b"<testsuite/>") == ([], [])
    assert parse_junit(b"<testsuites></testsuites>") == ([], [])


def test_source_kinds_agree(tmp_path):
    path = FIXTURE_DIR / "ant_nested.xml"
    from_path = parse_junit(path)[0]
    assert parse_junit(str(path))[0] == from_path
    assert parse_junit(path.read_bytes())[0] == from_path
    with path.open("rb") as handle:
        assert parse_junit(handle)[0] == from_path
    assert parse_junit(io.BytesIO(path.read_bytes()), filename="upload.xml")[0] == from_path


def test_header_mismatch_warns_with_file_and_suite():
    xml = b"""<testsuites>
<testsuite name="marina.docks" tests="3" failures="0">
  <testcase classname="c" name="a"/>
  <testcase classname="c" name="b"><failure message="x"/></testcase>
</testsuite>
</testsuites>"""
    results, warnings = parse_junit(xml, filename="docks.xml")
    assert len(results) == 2
    assert len(warnings) == 1
    assert warnings[0].startswith("docks.xml, line 2:")
    assert (
        "'marina.docks'" in warnings[0]
        and "tests=3, failures=0" in warnings[0]
        and "tests=2, failures=1" in warnings[0]
    )


def test_caps_keep_head_and_record_original_length():
    long_message = "m" * (MESSAGE_CAP + 10)
    long_details = "d" * (DETAILS_CAP + 1)
    long_out = "o" * (OUTPUT_CAP + 5)
    xml = (
        f'<testsuite><testcase name="t"><failure message="{long_message}">{long_details}</failure>'
        f"<system-out>{long_out}</system-out><system-err>short</system-err></testcase></testsuite>"
    ).encode()
    (result,), _ = parse_junit(xml)
    assert result.message == long_message[:MESSAGE_CAP]
    assert result.details == long_details[:DETAILS_CAP]
    assert result.system_out == long_out[:OUTPUT_CAP]
    assert result.system_err == "short"
    assert dict(result.truncated) == {
        "message": MESSAGE_CAP + 10,
        "details": DETAILS_CAP + 1,
        "system_out": OUTPUT_CAP + 5,
    }


def test_namespaced_and_commented_report():
    xml = b"""<?xml version="1.0"?>
<!-- produced by a marina build -->
<?some-processing instruction?>
<t:testsuites xmlns:t="urn:example:junit"><t:testsuite name="s"><!-- c --><t:testcase name="a"/></t:testsuite></t:testsuites>"""
    results, warnings = parse_junit(xml)
    assert [(r.suite, r.name, r.outcome) for r in results] == [("s", "a", "passed")]
    assert warnings == []


# ---------------------------------------------------------------------------------------------------------
# 5. Hostile and broken input (OWASP XML External Entity Prevention Cheat Sheet; W3C XML 1.0).

BILLION_LAUGHS = b"""<?xml version="1.0"?>
<!DOCTYPE lolz [
 <!ENTITY lol "lol">
 <!ENTITY lol1 "&lol;&lol;&lol;&lol;&lol;&lol;&lol;&lol;&lol;&lol;">
 <!ENTITY lol2 "&lol1;&lol1;&lol1;&lol1;&lol1;&lol1;&lol1;&lol1;&lol1;&lol1;">
 <!ENTITY lol3 "&lol2;&lol2;&lol2;&lol2;&lol2;&lol2;&lol2;&lol2;&lol2;&lol2;">
 <!ENTITY lol4 "&lol3;&lol3;&lol3;&lol3;&lol3;&lol3;&lol3;&lol3;&lol3;&lol3;">
 <!ENTITY lol5 "&lol4;&lol4;&lol4;&lol4;&lol4;&lol4;&lol4;&lol4;&lol4;&lol4;">
 <!ENTITY lol6 "&lol5;&lol5;&lol5;&lol5;&lol5;&lol5;&lol5;&lol5;&lol5;&lol5;">
 <!ENTITY lol7 "&lol6;&lol6;&lol6;&lol6;&lol6;&lol6;&lol6;&lol6;&lol6;&lol6;">
 <!ENTITY lol8 "&lol7;&lol7;&lol7;&lol7;&lol7;&lol7;&lol7;&lol7;&lol7;&lol7;">
 <!ENTITY lol9 "&lol8;&lol8;&lol8;&lol8;&lol8;&lol8;&lol8;&lol8;&lol8;&lol8;">
]>
<testsuite name="&lol9;"><testcase name="t" classname="&lol9;">&lol9;</testcase></testsuite>
"""


def _collect_until_error(source, filename):
    """Everything a reader yields before it raises, plus the error."""
    reader = iter(JUnitReader(source, filename=filename))
    seen: list[ParsedResult] = []
    with pytest.raises(JUnitParseError) as info:
        while True:
            seen.append(next(reader))
    return seen, info.value


def test_billion_laughs_refused():
    # OWASP XXE Prevention Cheat Sheet: the "billion laughs" entity expansion must not be processed.
    seen, error = _collect_until_error(BILLION_LAUGHS, "bomb.xml")
    assert seen == []
    assert error.reason == ERR_DOCTYPE
    assert (error.filename, error.line) == ("bomb.xml", 2)
    assert str(error).startswith("bomb.xml, line 2: ")


def _xxe_payloads(secret: Path) -> dict[str, bytes]:
    uri = secret.resolve().as_uri()
    internal = f"""<?xml version="1.0"?>
<!DOCTYPE testsuite [<!ENTITY xxe SYSTEM "{uri}">]>
<testsuite name="&xxe;"><testcase classname="c" name="t"><failure message="m">&xxe;</failure>
<system-out>&xxe;</system-out></testcase></testsuite>"""
    parameter = f"""<?xml version="1.0"?>
<!DOCTYPE testsuite [<!ENTITY % p SYSTEM "{uri}"> %p;]>
<testsuite name="s"><testcase name="t"/></testsuite>"""
    external_dtd = f"""<?xml version="1.0"?>
<!DOCTYPE testsuite SYSTEM "{uri}">
<testsuite name="s"><testcase name="t"/></testsuite>"""
    return {
        "internal-subset": internal.encode(),
        "parameter-entity": parameter.encode(),
        "external-dtd": external_dtd.encode(),
        # Same attack, UTF-16 with a BOM and a comment first, so a byte-level search for "<!DOCTYPE" would miss it.
        "utf16": (
            '<?xml version="1.0" encoding="UTF-16"?>\n<!-- x -->\n' + internal.split("\n", 1)[1]
        ).encode("utf-16"),
    }


@pytest.mark.parametrize("variant", ["internal-subset", "parameter-entity", "external-dtd", "utf16"])
def test_external_entity_to_local_file_refused(tmp_path, variant):
    # OWASP XXE Prevention Cheat Sheet: external entities must never be resolved.
    marker = "SECRET-MARKER-7f3a9c"
    secret = tmp_path / "secret.txt"
    secret.write_text(f"{marker}\n")
    payload = _xxe_payloads(secret)[variant]
    seen, error = _collect_until_error(payload, "xxe.xml")
    assert error.reason == ERR_DOCTYPE
    assert error.filename == "xxe.xml" and error.line is not None
    assert marker not in str(error)
    assert all(marker not in repr(result) for result in seen)
    # The same file given as a path behaves the same.
    report = tmp_path / "xxe.xml"
    report.write_bytes(payload)
    with pytest.raises(JUnitParseError, match="DOCTYPE"):
        parse_junit(report)


def test_undeclared_entity_is_malformed():
    with pytest.raises(JUnitParseError) as info:
        parse_junit(b'<testsuite>\n<testcase name="a">&secret;</testcase></testsuite>', filename="r.xml")
    assert (info.value.reason, info.value.line) == (ERR_MALFORMED, 2)
    assert "secret" in info.value.detail


def test_truncated_xml_names_file_and_line():
    full = (FIXTURE_DIR / "ant_nested.xml").read_bytes()
    cut = full[: full.index(b'<testcase classname="marina.fees')] + b'<testcase classname="marina.fe'
    seen, error = _collect_until_error(cut, "cut.xml")
    assert error.reason == ERR_TRUNCATED
    assert error.filename == "cut.xml"
    assert error.line == cut.count(b"\n") + 1
    assert "looks truncated" in str(error)
    # Some results before the cut may already have been streamed (never any after it); the caller must
    # discard them, as the report is rejected.
    before_cut = ["fitsCatamaranInWideSlip", "rejectsOverlongHull", "keepsFuelDockFree"]
    assert [r.name for r in seen] == before_cut[: len(seen)]


@pytest.mark.parametrize(
    ("payload", "reason", "line"),
    [
        (b"", ERR_EMPTY, None),
        (b"  \n\t\n", ERR_EMPTY, None),
        (b"PK\x03\x04\x14\x00\x00\x00binary zip", ERR_NOT_XML, 1),
        (b'{"tests": 3}', ERR_NOT_XML, 1),
        (b"\n\nplain text log\n", ERR_NOT_XML, 3),
        (b'<?xml version="1.0"?>\n<html><body/></html>', ERR_ROOT, 2),
        (b"<testcase name='a'/>", ERR_ROOT, 1),
        (b"<testsuite>\n<testcase name='a'></testcas>\n</testsuite>", ERR_MALFORMED, 2),
        (b"<testsuite/>\n<testsuite/>", ERR_MALFORMED, 2),
    ],
)
def test_broken_input_clear_error(payload, reason, line):
    with pytest.raises(JUnitParseError) as info:
        parse_junit(payload, filename="upload.xml")
    error = info.value
    assert (error.reason, error.line, error.filename) == (reason, line, "upload.xml")
    assert str(error).startswith("upload.xml" if line is None else f"upload.xml, line {line}: ")
    assert isinstance(error, ValueError)


def test_endless_prolog_refused():
    payload = b'<?xml version="1.0"?>\n<!--' + b"x" * (2 * 1024 * 1024)
    with pytest.raises(JUnitParseError) as info:
        parse_junit(payload, filename="long.xml")
    assert (info.value.reason, info.value.line) == (ERR_PROLOG, 2)


def test_zero_byte_file_on_disk(tmp_path):
    empty = tmp_path / "empty.xml"
    empty.write_bytes(b"")
    with pytest.raises(JUnitParseError, match=rf"empty\.xml: {ERR_EMPTY}"):
        parse_junit(empty)


# ---------------------------------------------------------------------------------------------------------
# 6. Memory stays flat while streaming (behaviour, not time).


def _write_big_report(path: Path, *, cases: int, output_bytes: int) -> None:
    chunk = "x" * (output_bytes - 1) + "\n"
    with path.open("w", encoding="utf-8") as out:
        out.write('<?xml version="1.0" encoding="UTF-8"?>\n<testsuites>\n')
        for suite in range(cases // 1000):
            out.write(f'<testsuite name="s{suite}" tests="1000" failures="100" errors="0" skipped="0">\n')
            for case in range(1000):
                body = '<failure message="m">trace</failure>' if case % 10 == 0 else ""
                out.write(
                    f'<testcase classname="c{suite}" name="t{case}" time="0.01">{body}'
                    f"<system-out>{chunk}</system-out></testcase>\n"
                )
            out.write("</testsuite>\n")
        out.write("</testsuites>\n")


def test_streaming_memory_stays_far_below_file_size(tmp_path):
    path = tmp_path / "big.xml"
    _write_big_report(path, cases=10_000, output_bytes=3_000)
    size = path.stat().st_size
    assert size > 28_000_000

    gc.collect()
    process = psutil.Process()
    baseline_rss = process.memory_info().rss
    peak_rss = baseline_rss
    count = failed = 0
    tracemalloc.start()
    try:
        reader = JUnitReader(path)
        for result in reader:
            count += 1
            failed += result.outcome == "failed"
            if count % 500 == 0:
                peak_rss = max(peak_rss, process.memory_info().rss)
        _, peak_traced = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert (count, failed) == (10_000, 1_000)
    assert reader.warnings == []
    # Python-side allocations (tracemalloc) and the whole process (RSS, which also sees libxml2's C heap)
    # stay a small fraction of the 30 MB file. Measured: about 1.4 MB traced and 3 MB RSS growth; with the
    # element clearing switched off the RSS growth is about 48 MB, more than the file.
    assert peak_traced < size / 10
    assert peak_rss - baseline_rss < size / 3
