"""The JUnit reader's fast path (childless passed testcases) must agree with its general path.

Outside reference: the ``junitparser`` library's reading of the same documents (``junitparser_attempts``), plus
the class constructor of ``ParsedResult`` itself for the instances the reader builds without it.
"""

from __future__ import annotations

from datetime import UTC, datetime

import pytest

from ingest.parsers.junit import JUnitReader, ParsedResult, _parsed_new, parse_junit
from tests.ingest.parsers.conftest import junitparser_attempts, junitparser_counts

# Same tests twice: once as childless elements (fast path), once with an empty <properties/> child, which
# changes nothing for the result (pytest writes such empty properties; common practice) but takes the
# general path.
_TIMES = ("0.5", " 2 ", "1,5", "1,234.5", "1e-3", "-1", "nan", "", "abc")


def _report(with_child: bool) -> bytes:
    child = "<properties/>" if with_child else ""
    cases = "".join(
        f'<testcase classname="berth.Slip" name="t{i}" time="{raw}" file="slip.py">{child}</testcase>'
        if with_child
        else f'<testcase classname="berth.Slip" name="t{i}" time="{raw}" file="slip.py"/>'
        for i, raw in enumerate(_TIMES)
    )
    return (
        f'<testsuites><testsuite name="dock" tests="{len(_TIMES)}" timestamp="2026-03-01T08:00:00">'
        f"{cases}</testsuite></testsuites>"
    ).encode()


def test_childless_and_general_path_give_the_same_results_and_warnings():
    fast, fast_warnings = parse_junit(_report(False), filename="dock.xml")
    general, general_warnings = parse_junit(_report(True), filename="dock.xml")
    assert fast == general
    assert fast_warnings == general_warnings
    # Three raw values are unreadable ("-1" is negative, "nan", "abc"; an empty one is not reported): one warning.
    assert len(fast_warnings) == 1 and "3 testcase time value(s)" in fast_warnings[0]
    assert [r.outcome for r in fast] == ["passed"] * len(_TIMES)
    assert {r.timestamp for r in fast} == {datetime(2026, 3, 1, 8, tzinfo=UTC)}


@pytest.mark.parametrize("with_child", [False, True])
def test_both_paths_match_junitparser(tmp_path, with_child):
    path = tmp_path / "dock.xml"
    path.write_bytes(_report(with_child))
    reader = JUnitReader(path)
    ours = [(r.classname, r.name, r.attempt) for r in reader]
    # junitparser reads the same file: names, one attempt each, and the per-element counts.
    assert ours == [("berth.Slip", name, attempts) for name, attempts in junitparser_attempts(path).items()]
    assert reader.parsed_totals == junitparser_counts(path)


def test_fast_built_result_equals_the_class_constructor():
    values = (
        "dock", "berth.Slip", "t0", "slip.py", "passed", 0.5, 1, "", "", "", "", "", (),
        datetime(2026, 3, 1, tzinfo=UTC), (("owner", "harbour"),),
    )  # fmt: skip
    built, constructed = _parsed_new(*values), ParsedResult(*values)
    assert type(built) is ParsedResult
    assert built == constructed
    assert hash(built) == hash(constructed)
    assert repr(built) == repr(constructed)
    # Reference: the standard library's typing.NamedTuple field order and _asdict().
    assert tuple(built) == values
    assert built._asdict() == dict(zip(ParsedResult._fields, values, strict=True))
    assert built.name == "t0" and built.timestamp == datetime(2026, 3, 1, tzinfo=UTC)
    with pytest.raises(AttributeError):
        built.name = "other"  # type: ignore[misc]


def test_totals_count_what_was_read_when_the_file_is_cut():
    # A truncated file is rejected; the counts read before the cut stay available for the message.
    reader = JUnitReader(b'<testsuite name="s"><testcase name="a"/><testcase name="b"><failure/></testcase>')
    with pytest.raises(ValueError):
        list(reader)
    assert reader.parsed_totals == {"tests": 2, "failures": 1, "errors": 0, "skipped": 0}
