"""Streaming, hardened reader for JUnit-XML test reports.

Bytes in, plain rows out: this module imports nothing from Django and does no database work. It reads the
dialects written by pytest (``--junitxml``, families xunit1 and xunit2), Ant-style reports (one suite per
class, suites nested at any depth) and Apache Maven Surefire reports with rerun elements, and turns each
test *attempt* into one immutable :class:`ParsedResult` (a named tuple).

Conventions
-----------
Attempts
    ``attempt`` counts runs of one ``(classname, name)`` within one file, starting at 1, in this order for
    each ``testcase`` element: its ``flakyFailure``/``flakyError`` children (failed runs before the final
    pass), then the testcase's own result, then its ``rerunFailure``/``rerunError`` children (repeated
    failures). A ``testcase`` element repeated later in the file continues the count. A caller that merges
    several files of one build must offset the numbers itself.
pytest teardown errors
    When a test fails and its teardown then errors, pytest writes a second ``testcase`` element with the same
    classname and name holding ``<error message="failed on teardown with ...">``. That element is the same
    run, not a rerun: its error is appended to the ``details`` of the preceding failed attempt instead of
    becoming an attempt of its own.
Outcome of one testcase element
    The first ``failure`` or ``error`` child decides (``failed``/``error``); further ``failure``/``error``
    children are appended to ``details``. Otherwise ``skipped`` if there is a ``skipped`` child (pytest
    xfail, ``type="pytest.xfail"``, is skipped), otherwise ``passed``.
Header totals
    For every ``testsuite`` (and a ``testsuites`` root) that declares ``tests``, ``failures``, ``errors`` or
    ``skipped``, the declared numbers are compared with the testcases read beneath it (nested suites
    included). Two counting conventions are accepted, and a warning is written only when neither matches:
    *per element* (each ``testcase`` element counts once; failures = elements with a ``failure`` child,
    errors = elements with an ``error`` child, skipped = elements with a ``skipped`` child and neither;
    this is what pytest and Surefire write, rerun children not counted) and *per attempt* (every attempt
    counted with its own outcome).
Properties and output
    ``properties`` holds the testcase's own ``<properties>`` only. Suite-level ``<properties>`` (often a
    dump of the build machine's environment) and suite-level ``system-out``/``system-err`` are not attached
    to the results.
Timestamps
    The innermost enclosing suite's ``timestamp`` (an outer one if the inner has none), as an aware UTC
    datetime; a naive timestamp is read as UTC.
Durations
    See :func:`junit_time_parse`.
Security
    Any ``<!DOCTYPE`` (and with it every entity declaration) is refused before the XML parser sees the
    document; lxml is additionally run with ``resolve_entities=False``, ``no_network=True`` and
    ``load_dtd=False``. ``huge_tree=True`` lets a single very long text node (a large ``system-out``)
    through; that is safe only because no DTD, hence no entity expansion, is ever accepted.

References
----------
.. [1] Apache Maven Surefire, ``surefire-test-report-3.0.xsd`` (test-report schema).
.. [2] pytest, ``src/_pytest/junitxml.py`` (the ``--junitxml`` writer).
"""

from __future__ import annotations

import io
import math
import os
import re
import sys
from collections import Counter
from collections.abc import Iterator
from dataclasses import dataclass, field
from datetime import UTC, datetime
from typing import BinaryIO, NamedTuple

from lxml import etree

__all__ = [
    "DETAILS_CAP",
    "ERR_DOCTYPE",
    "ERR_EMPTY",
    "ERR_MALFORMED",
    "ERR_NOT_XML",
    "ERR_PROLOG",
    "ERR_ROOT",
    "ERR_TRUNCATED",
    "JUNIT_OUTCOMES",
    "MESSAGE_CAP",
    "OUTPUT_CAP",
    "JUnitParseError",
    "JUnitReader",
    "ParsedResult",
    "junit_time_parse",
    "parse_junit",
]

JUNIT_OUTCOMES = ("passed", "failed", "error", "skipped")

MESSAGE_CAP = 4_000
DETAILS_CAP = 64_000
OUTPUT_CAP = 64_000
MAX_WARNINGS = 100

# Error sentences (tests import these).
ERR_EMPTY = "the file is empty"
ERR_NOT_XML = "this is not an XML document (it should start with '<')"
ERR_DOCTYPE = (
    "the report contains a DOCTYPE declaration, which is refused: a JUnit report needs no DTD, "
    "and DTD entities can expand without bound or pull in local files"
)
ERR_ROOT = "the root element must be <testsuites> or <testsuite>"
ERR_TRUNCATED = "the XML ends before all its elements are closed; the file looks truncated"
ERR_MALFORMED = "the XML is not well-formed"
ERR_PROLOG = "more than 1 MB of text comes before the root element; this is not a JUnit report"

# Warning templates.
WARN_TOTALS = "{filename}, line {line}: suite {suite!r} declares {declared} but {parsed} were read"
WARN_TIME = (
    "{filename}: {count} testcase time value(s) could not be read as seconds "
    "(first at line {line}: {value!r}); their durations are left empty"
)
WARN_TIMESTAMP = "{filename}, line {line}: suite {suite!r} has an unreadable timestamp {value!r}; ignored"
WARN_HEADER = "{filename}, line {line}: suite {suite!r} has a non-numeric {attr}={value!r}; not checked"
WARN_NESTED_TESTCASE = "{filename}, line {line}: a testcase inside another testcase was ignored"
WARN_MORE = "{filename}: {count} more warning(s) not shown"

_TOTAL_KEYS = ("tests", "failures", "errors", "skipped")
_SUITE_TAGS = frozenset({"testsuite", "testsuites"})
# Finished testcases with children are cleared at once (childless ones hold only attributes); every this many
# testcases, the finished one and its preceding siblings are detached.
_RELEASE_EVERY = 64
_RESULT_TAGS = frozenset({"failure", "error"})
_BEFORE_TAGS = {"flakyFailure": "failed", "flakyError": "error"}
_AFTER_TAGS = {"rerunFailure": "failed", "rerunError": "error"}
_PYTEST_TEARDOWN_PREFIX = "failed on teardown with "
_READ_CHUNK = 64 * 1024
_PROLOG_LIMIT = 1024 * 1024
_PROLOG_PEEK = 4096
# libxml2 error kinds that mean a real mistake, even when they occur on the last line of the file.
_NOT_TRUNCATION = frozenset(
    {
        "ERR_UNDECLARED_ENTITY",
        "WAR_UNDECLARED_ENTITY",
        "ERR_TAG_NAME_MISMATCH",
        "ERR_DOCUMENT_END",
        "ERR_INVALID_CHAR",
        "ERR_INVALID_CHARREF",
        "ERR_ATTRIBUTE_REDEFINED",
        "ERR_NAME_REQUIRED",
        "ERR_LT_IN_ATTRIBUTE",
        "ERR_UNKNOWN_ENCODING",
        "ERR_UNSUPPORTED_ENCODING",
    }
)

_THOUSANDS = re.compile(r"[1-9]\d{0,2}(,\d{3})+(\.\d*)?")


class JUnitParseError(ValueError):
    """A report that cannot be read; the message names the file and, where known, the line.

    Attributes
    ----------
    filename : str
    line : int or None
    reason : str
        One of the ``ERR_*`` module constants.
    detail : str
        The XML parser's own words, if any.
    """

    def __init__(self, reason: str, *, filename: str, line: int | None = None, detail: str = "") -> None:
        self.filename = filename
        self.line = line
        self.reason = reason
        self.detail = detail
        where = filename if line is None else f"{filename}, line {line}"
        text = f"{where}: {reason}"
        if detail:
            text += f" ({detail})"
        super().__init__(text)


class ParsedResult(NamedTuple):
    """One attempt of one test, as read from a JUnit-XML report.

    An immutable named tuple: fields are read by name (``result.outcome``), assignment raises
    ``AttributeError``, and two results are equal when all their fields are (like any tuple, a result also
    equals a plain tuple of the same values). A tuple rather than a frozen dataclass because the reader
    builds one per attempt and tuple construction is the cheapest there is (a frozen dataclass costs 15
    guarded attribute writes, or an instance dictionary, per result).
    """

    suite: str
    classname: str
    name: str
    file: str
    outcome: str
    duration: float | None
    attempt: int
    failure_type: str
    message: str
    details: str
    system_out: str
    system_err: str
    truncated: tuple[tuple[str, int], ...]
    timestamp: datetime | None
    properties: tuple[tuple[str, str], ...]


_tuple_new = tuple.__new__


def _parsed_new(
    suite: str,
    classname: str,
    name: str,
    file: str,
    outcome: str,
    duration: float | None,
    attempt: int,
    failure_type: str,
    message: str,
    details: str,
    system_out: str,
    system_err: str,
    truncated: tuple[tuple[str, int], ...],
    timestamp: datetime | None,
    properties: tuple[tuple[str, str], ...],
) -> ParsedResult:
    """Build a :class:`ParsedResult` equal to ``ParsedResult(...)`` with the same arguments, faster."""
    return _tuple_new(
        ParsedResult,
        (
            suite,
            classname,
            name,
            file,
            outcome,
            duration,
            attempt,
            failure_type,
            message,
            details,
            system_out,
            system_err,
            truncated,
            timestamp,
            properties,
        ),
    )


def junit_time_parse(value: str | None) -> float | None:
    """Read a JUnit ``time`` attribute as seconds.

    Parameters
    ----------
    value : str or None
        The raw attribute.

    Returns
    -------
    float or None
        None when the value is missing, empty, negative, not finite or unreadable.

    Notes
    -----
    ``'1.5'`` -> 1.5; a lone decimal comma ``'1,5'`` -> 1.5; thousands separators as allowed by the Surefire
    schema's time pattern [1]_, ``'1,234.5'`` -> 1234.5 and ``'1,234'`` -> 1234.0 (a comma followed by
    groups of exactly three digits and a leading digit 1-9 is read as thousands); when both ``,`` and ``.``
    occur, the later one is the decimal mark (``'1.234,5'`` -> 1234.5). Exponents (``'1e-3'``) are accepted.

    References
    ----------
    .. [1] Apache Maven Surefire, ``surefire-test-report-3.0.xsd``, type ``SUREFIRE_TIME``.

    Examples
    --------
    >>> junit_time_parse("1,234.5")
    1234.5
    >>> junit_time_parse("0,25")
    0.25
    >>> junit_time_parse("") is None
    True
    """
    if value is None:
        return None
    text = value.strip().replace("\u00a0", "").replace(" ", "")
    if not text:
        return None
    if "," in text:
        if "." in text:
            if text.rfind(",") > text.rfind("."):
                text = text.replace(".", "").replace(",", ".")
            else:
                text = text.replace(",", "")
        elif _THOUSANDS.fullmatch(text):
            text = text.replace(",", "")
        elif text.count(",") == 1:
            text = text.replace(",", ".")
        else:
            return None
    try:
        seconds = float(text)
    except ValueError:
        return None
    if not math.isfinite(seconds) or seconds < 0:
        return None
    return seconds


def _timestamp_parse(value: str) -> datetime | None:
    text = value.strip()
    if not text:
        return None
    try:
        moment = datetime.fromisoformat(text)
    except ValueError:
        return None
    if moment.tzinfo is None:
        return moment.replace(tzinfo=UTC)
    return moment.astimezone(UTC)


def _local(tag: object) -> str:
    """Element name without namespace; '' for comments and processing instructions."""
    if not isinstance(tag, str):
        return ""
    return tag.rpartition("}")[2]


def _cap(value: str, cap: int, field_name: str, truncated: list[tuple[str, int]]) -> str:
    if len(value) > cap:
        truncated.append((field_name, len(value)))
        return value[:cap]
    return value


def _all_text(elem: etree._Element) -> str:
    return "".join(elem.itertext())


# ---------------------------------------------------------------------------------------------------------
# Prolog check: refuse DOCTYPE before lxml sees the document.


def _sniff_decode(head: bytes) -> str:
    """Decode enough of the head to find the markup of the prolog (structure characters are ASCII)."""
    boms = (
        (b"\xef\xbb\xbf", "utf-8"),
        (b"\xff\xfe\x00\x00", "utf-32-le"),
        (b"\x00\x00\xfe\xff", "utf-32-be"),
        (b"\xff\xfe", "utf-16-le"),
        (b"\xfe\xff", "utf-16-be"),
    )
    for bom, codec in boms:
        if head.startswith(bom):
            return head[len(bom) :].decode(codec, errors="ignore")
    guesses = (
        (b"\x00\x00\x00<", "utf-32-be"),
        (b"<\x00\x00\x00", "utf-32-le"),
        (b"\x00<", "utf-16-be"),
        (b"<\x00", "utf-16-le"),
    )
    for start, codec in guesses:
        if head.startswith(start):
            return head.decode(codec, errors="ignore")
    return head.decode("latin-1")


_ROOT, _DOCTYPE, _NOT_XML, _MORE = "root", "doctype", "not-xml", "more"


def _prolog_scan(text: str, *, at_eof: bool) -> tuple[str, int]:
    """Walk the prolog (XML declaration, comments, processing instructions) up to the root element.

    Returns a verdict and the character offset it refers to.
    """
    i, n = 0, len(text)
    while True:
        while i < n and text[i] in " \t\r\n":
            i += 1
        if i >= n:
            return _MORE, i
        if text[i] != "<":
            return _NOT_XML, i
        if n - i < 4 and not at_eof:
            return _MORE, i
        if text.startswith("<?", i):
            end = text.find("?>", i + 2)
            if end < 0:
                return _MORE, i
            i = end + 2
        elif text.startswith("<!--", i):
            end = text.find("-->", i + 4)
            if end < 0:
                return _MORE, i
            i = end + 3
        elif text.startswith("<!", i):
            return _DOCTYPE, i
        else:
            return _ROOT, i


class _ReplayStream:
    """File-like object that first replays the already-read head, then the rest of the source."""

    def __init__(self, head: bytes, raw: BinaryIO) -> None:
        self._head = head
        self._raw = raw
        self.eof = False
        self.newlines = head.count(b"\n")

    def read(self, size: int = -1) -> bytes:
        if self._head:
            if size is None or size < 0:
                data, self._head = self._head + self._raw.read(), b""
            else:
                data, self._head = self._head[:size], self._head[size:]
        else:
            data = self._raw.read(size)
            self.newlines += data.count(b"\n")
        if not data:
            self.eof = True
        return data


# ---------------------------------------------------------------------------------------------------------


# Indexes into _Suite.counts: per-element totals, then per-attempt totals (see the module notes).
_E_TESTS, _E_FAILURES, _E_ERRORS, _E_SKIPPED, _A_TESTS, _A_FAILURES, _A_ERRORS, _A_SKIPPED = range(8)
_A_OUTCOME = {"failed": _A_FAILURES, "error": _A_ERRORS, "skipped": _A_SKIPPED}


@dataclass(slots=True)
class _Suite:
    """An open suite. Counts cover the testcases read directly in it; a closing suite adds its counts to
    its parent, so each testcase updates one suite only."""

    kind: str
    name: str
    line: int | None
    timestamp: datetime | None
    declared: dict[str, int]
    result_name: str
    # Childless passed testcases (one element, one passed attempt), counted apart for the fast path.
    plain: int = 0
    counts: list[int] = field(default_factory=lambda: [0] * 8)

    def per_element(self) -> dict[str, int]:
        c = self.counts
        return {
            "tests": c[_E_TESTS] + self.plain,
            "failures": c[_E_FAILURES],
            "errors": c[_E_ERRORS],
            "skipped": c[_E_SKIPPED],
        }

    def per_attempt(self) -> dict[str, int]:
        c = self.counts
        return {
            "tests": c[_A_TESTS] + self.plain,
            "failures": c[_A_FAILURES],
            "errors": c[_A_ERRORS],
            "skipped": c[_A_SKIPPED],
        }

    def add_to(self, parent: _Suite) -> None:
        parent.plain += self.plain
        totals = parent.counts
        for i, number in enumerate(self.counts):
            totals[i] += number


@dataclass
class _Attempt:
    outcome: str
    duration: float | None
    failure_type: str
    message: str
    details: str
    system_out: str
    system_err: str


class JUnitReader:
    """Stream the test attempts of one JUnit-XML report.

    Parameters
    ----------
    source : str, os.PathLike, bytes or binary file object
        A path (a ``str`` is always a path, never XML text), the raw bytes, or an open binary stream. A
        stream is read once and not closed.
    filename : str, optional
        Name used in messages; defaults to the path, or the stream's ``name``.

    Attributes
    ----------
    warnings : list of str
        Filled during iteration (header totals that disagree with the testcases read, unreadable times).
    suite_count : int
        Number of ``testsuite`` elements seen.
    declared_totals : dict of str to int
        ``tests``/``failures``/``errors``/``skipped`` declared by the root element, or summed over the
        top-level suites when the root declares none.
    parsed_totals : dict of str to int
        The same four counts for what was read, per ``testcase`` element (the convention of pytest and
        Surefire; see the module notes).

    Examples
    --------
    >>> reader = JUnitReader(b'<testsuite name="s" tests="1"><testcase name="t" time="0.5"/></testsuite>')
    >>> [(r.name, r.outcome, r.duration) for r in reader], reader.warnings
    ([('t', 'passed', 0.5)], [])
    """

    def __init__(
        self,
        source: str | os.PathLike[str] | bytes | BinaryIO,
        *,
        filename: str | None = None,
    ) -> None:
        self.source = source
        self.filename = filename
        self.warnings: list[str] = []
        self.suite_count = 0
        self.declared_totals: dict[str, int] = {}
        self.parsed_totals: dict[str, int] = {}

    # -- public ------------------------------------------------------------------------------------------

    def __iter__(self) -> Iterator[ParsedResult]:
        return self._parse()

    # -- internals ---------------------------------------------------------------------------------------

    def _warn(self, text: str) -> None:
        self.warnings.append(text)

    def _open_checked(self, raw: BinaryIO, filename: str) -> _ReplayStream:
        head = b""
        while True:
            chunk = raw.read(_READ_CHUNK)
            at_eof = not chunk
            head += chunk
            if at_eof and not head.strip():
                raise JUnitParseError(ERR_EMPTY, filename=filename)
            verdict = _MORE
            if len(head) > _PROLOG_PEEK:
                # The prolog is almost always short: decide on a prefix first (the scan only decides on
                # what it has seen, so a decision there is the one the whole head would give).
                text = _sniff_decode(head[:_PROLOG_PEEK])
                verdict, offset = _prolog_scan(text, at_eof=False)
            if verdict == _MORE:
                text = _sniff_decode(head)
                verdict, offset = _prolog_scan(text, at_eof=at_eof)
            line = text.count("\n", 0, offset) + 1
            if verdict == _DOCTYPE:
                raise JUnitParseError(ERR_DOCTYPE, filename=filename, line=line)
            if verdict == _NOT_XML:
                raise JUnitParseError(ERR_NOT_XML, filename=filename, line=line)
            if verdict == _ROOT or at_eof:
                return _ReplayStream(head, raw)
            if len(head) > _PROLOG_LIMIT:
                raise JUnitParseError(ERR_PROLOG, filename=filename, line=line)

    def _syntax_error(
        self, exc: etree.XMLSyntaxError, stream: _ReplayStream, filename: str
    ) -> JUnitParseError:
        line, detail = exc.lineno, exc.msg or ""
        last = exc.error_log.last_error if exc.error_log else None
        kind = last.type_name if last is not None else ""
        if (not line or detail == "no element found") and last is not None:
            line, detail = last.line, last.message
        detail = re.sub(r", line \d+, column \d+$", "", detail)
        at_end = stream.eof and line is not None and line >= stream.newlines + 1
        cut_off = "Premature end of data" in detail or (at_end and kind not in _NOT_TRUNCATION)
        reason = ERR_TRUNCATED if cut_off else ERR_MALFORMED
        return JUnitParseError(reason, filename=filename, line=line or None, detail=detail)

    def _parse(self) -> Iterator[ParsedResult]:
        """Open the source and run the event loop, all in one generator (each extra generator layer costs
        a delegation per result); the childless passed testcase, the common case, is handled inline."""
        source = self.source
        raw: BinaryIO
        if isinstance(source, (str, os.PathLike)):
            filename = self.filename or os.fspath(source)
            raw = open(source, "rb")  # noqa: SIM115 - closed in the finally below
            owned = True
        elif isinstance(source, (bytes, bytearray, memoryview)):
            filename = self.filename or "<bytes>"
            raw, owned = io.BytesIO(bytes(source)), False
        else:
            filename = self.filename or str(getattr(source, "name", "") or "<stream>")
            raw, owned = source, False
        try:
            self.warnings = []
            self.suite_count = 0
            self.declared_totals = {}
            self.parsed_totals = dict.fromkeys(_TOTAL_KEYS, 0)
            stream = self._open_checked(raw, filename)
            etree.clear_error_log()
            events = etree.iterparse(
                stream,
                events=("start", "end"),
                resolve_entities=False,
                no_network=True,
                load_dtd=False,
                dtd_validation=False,
                huge_tree=True,
                remove_comments=True,
                remove_pis=True,
                recover=False,
            )
            state = _ParseState(filename=filename)
            suites = state.suites
            attempts = state.attempts
            attempts_setdefault = attempts.setdefault
            intern = sys.intern
            build = _tuple_new
            result_type = ParsedResult
            inf = math.inf
            testcase_depth = 0
            released = 0
            # Childless passed testcases read since the innermost suite last changed; added to its ``plain``
            # count when a suite opens or closes (or the loop stops), not once per testcase.
            plain = 0
            suite_name = ""
            suite_timestamp: datetime | None = None
            local_names: dict[object, str] = {}
            local_get = local_names.get
            try:
                for event, elem in events:
                    tag = elem.tag
                    if tag == "testcase":
                        local = tag
                    else:
                        local = local_get(tag)
                        if local is None:
                            local = local_names[tag] = _local(tag)
                    if event == "end":
                        if local == "testcase":
                            if testcase_depth != 1:
                                testcase_depth -= 1
                                self._warn(
                                    WARN_NESTED_TESTCASE.format(filename=filename, line=elem.sourceline)
                                )
                                continue
                            testcase_depth = 0
                            if len(elem):
                                yield from self._testcase(elem, state, filename)
                                elem.clear(keep_tail=False)
                            else:
                                # Fast path: no children, so one passed attempt with nothing to cap; it
                                # never absorbs a teardown error, so it need not wait in state.pending.
                                # Bytes keys: lxml then skips encoding the attribute name on each call.
                                get = elem.get
                                classname = intern(get(b"classname", ""))
                                name = get(b"name", "")
                                raw_time = get(b"time")
                                if raw_time is None:
                                    duration = None
                                else:
                                    try:
                                        duration = float(raw_time)
                                    except ValueError:
                                        duration = None
                                    if duration is None or not 0.0 <= duration < inf:
                                        duration = junit_time_parse(raw_time)
                                        if duration is None and raw_time.strip():
                                            state.note_bad_time(elem.sourceline, raw_time)
                                plain += 1
                                key = (classname, name)
                                # One dictionary operation for a first attempt (the usual case), two after.
                                seen = len(attempts)
                                number = attempts_setdefault(key, 1)
                                if len(attempts) == seen:
                                    number += 1
                                    attempts[key] = number
                                if state.pending:
                                    yield from state.flush()
                                # Same as ParsedResult(...) with these values (see _parsed_new), inlined.
                                yield build(
                                    result_type,
                                    (
                                        suite_name,
                                        classname,
                                        name,
                                        get(b"file", ""),
                                        "passed",
                                        duration,
                                        number,
                                        "",
                                        "",
                                        "",
                                        "",
                                        "",
                                        (),
                                        suite_timestamp,
                                        (),
                                    ),
                                )
                            # A childless element holds only its attributes: it is freed with its siblings
                            # below rather than cleared one by one.
                            released += 1
                            if released >= _RELEASE_EVERY:
                                released = 0
                                _release(elem)
                        elif testcase_depth or local not in _SUITE_TAGS:
                            # Inside a testcase (read when it ends), or suite-level properties, output and
                            # unknown elements (not attached; detached with the siblings of the next released
                            # element, or with their suite).
                            continue
                        else:
                            suite = suites.pop()
                            suite.plain += plain
                            plain = 0
                            self._suite_check(suite, filename)
                            if suites:
                                suite.add_to(suites[-1])
                                suite_name, suite_timestamp = suites[-1].result_name, suites[-1].timestamp
                            else:
                                self.parsed_totals = suite.per_element()
                            _release(elem)
                    elif local == "testcase":
                        testcase_depth += 1
                        if not suites:
                            self._root_check(elem, local, filename)
                    elif testcase_depth == 0:
                        if not suites:
                            self._root_check(elem, local, filename)
                        if local in _SUITE_TAGS:
                            if suites:
                                suites[-1].plain += plain
                                plain = 0
                            self._suite_open(elem, local, state, filename)
                            suite_name, suite_timestamp = suites[-1].result_name, suites[-1].timestamp
            except etree.XMLSyntaxError as exc:
                raise self._syntax_error(exc, stream, filename) from None
            finally:
                if suites:
                    # Stopped early (bad XML, or the caller stopped): count what was read so far.
                    suites[-1].plain += plain
                    self.parsed_totals = _totals_open(suites)
            yield from state.flush()
            if state.bad_times:
                line, value = state.first_bad_time
                self._warn(WARN_TIME.format(filename=filename, count=state.bad_times, line=line, value=value))
            if len(self.warnings) > MAX_WARNINGS:
                hidden = len(self.warnings) - MAX_WARNINGS
                self.warnings = self.warnings[:MAX_WARNINGS] + [
                    WARN_MORE.format(filename=filename, count=hidden)
                ]
        finally:
            if owned:
                raw.close()

    def _root_check(self, elem: etree._Element, tag: str, filename: str) -> None:
        """Called on a start event while no suite is open, which only the root element can cause."""
        docinfo = elem.getroottree().docinfo
        if docinfo.doctype or docinfo.internalDTD is not None:
            raise JUnitParseError(ERR_DOCTYPE, filename=filename, line=elem.sourceline)
        if tag not in _SUITE_TAGS:
            raise JUnitParseError(ERR_ROOT, filename=filename, line=elem.sourceline, detail=f"found <{tag}>")

    def _suite_open(self, elem: etree._Element, tag: str, state: _ParseState, filename: str) -> None:
        name = elem.get("name", "")
        line = elem.sourceline
        if tag == "testsuite":
            self.suite_count += 1
        declared: dict[str, int] = {}
        for key in _TOTAL_KEYS:
            raw_value = elem.get(key)
            if raw_value is None and key == "skipped":
                raw_value = elem.get("skips")
            if raw_value is None or not raw_value.strip():
                continue
            try:
                declared[key] = int(raw_value.strip())
            except ValueError:
                self._warn(
                    WARN_HEADER.format(
                        filename=filename,
                        line=line,
                        suite=name,
                        attr=key,
                        value=raw_value,
                    )
                )
        timestamp = state.suites[-1].timestamp if state.suites else None
        raw_ts = elem.get("timestamp")
        if raw_ts is not None and raw_ts.strip():
            parsed_ts = _timestamp_parse(raw_ts)
            if parsed_ts is None:
                self._warn(WARN_TIMESTAMP.format(filename=filename, line=line, suite=name, value=raw_ts))
            else:
                timestamp = parsed_ts
        if not state.suites or (len(state.suites) == 1 and not state.suites[0].declared):
            for key, number in declared.items():
                if not state.suites:
                    self.declared_totals[key] = number
                else:
                    self.declared_totals[key] = self.declared_totals.get(key, 0) + number
        outer_name = state.suites[-1].result_name if state.suites else ""
        state.suites.append(
            _Suite(
                kind=tag,
                name=name,
                line=line,
                timestamp=timestamp,
                declared=declared,
                result_name=name if tag == "testsuite" else outer_name,
            )
        )

    def _suite_check(self, suite: _Suite, filename: str) -> None:
        if not suite.declared:
            return
        per_element = suite.per_element()
        for counted in (per_element, suite.per_attempt()):
            if all(counted[key] == number for key, number in suite.declared.items()):
                return
        declared = ", ".join(f"{key}={number}" for key, number in suite.declared.items())
        parsed = ", ".join(f"{key}={per_element[key]}" for key in suite.declared)
        self._warn(
            WARN_TOTALS.format(
                filename=filename,
                line=suite.line,
                suite=suite.name,
                declared=declared,
                parsed=parsed,
            )
        )

    def _testcase(self, elem: etree._Element, state: _ParseState, filename: str) -> Iterator[ParsedResult]:
        classname = sys.intern(elem.get("classname", ""))
        name = elem.get("name", "")
        raw_time = elem.get("time")
        duration = junit_time_parse(raw_time)
        if duration is None and raw_time is not None and raw_time.strip():
            state.note_bad_time(elem.sourceline, raw_time)

        results: list[etree._Element] = []
        skipped: etree._Element | None = None
        before: list[_Attempt] = []
        after: list[_Attempt] = []
        outs: list[str] = []
        errs: list[str] = []
        properties: list[tuple[str, str]] = []
        for child in elem:
            ctag = _local(child.tag)
            if ctag in _RESULT_TAGS:
                results.append(child)
            elif ctag == "skipped":
                skipped = child if skipped is None else skipped
            elif ctag in _BEFORE_TAGS:
                before.append(self._rerun_attempt(child, _BEFORE_TAGS[ctag], state))
            elif ctag in _AFTER_TAGS:
                after.append(self._rerun_attempt(child, _AFTER_TAGS[ctag], state))
            elif ctag == "system-out":
                outs.append(_all_text(child))
            elif ctag == "system-err":
                errs.append(_all_text(child))
            elif ctag == "properties":
                for prop in child:
                    if _local(prop.tag) == "property":
                        value = prop.get("value")
                        properties.append(
                            (
                                prop.get("name", ""),
                                value if value is not None else _all_text(prop),
                            )
                        )

        if results:
            first = results[0]
            outcome = "failed" if _local(first.tag) == "failure" else "error"
            failure_type, message, details = (
                first.get("type", ""),
                first.get("message", ""),
                _all_text(first),
            )
            for extra in results[1:]:
                details += f"\n\n[{_local(extra.tag)}] {extra.get('type', '')}: {extra.get('message', '')}\n"
                details += _all_text(extra)
        elif skipped is not None:
            outcome = "skipped"
            failure_type, message, details = (
                skipped.get("type", ""),
                skipped.get("message", ""),
                _all_text(skipped),
            )
        else:
            outcome, failure_type, message, details = "passed", "", "", ""
        main = _Attempt(
            outcome,
            duration,
            failure_type,
            message,
            details,
            "".join(outs),
            "".join(errs),
        )

        has_failure = any(_local(r.tag) == "failure" for r in results)
        has_error = any(_local(r.tag) == "error" for r in results)
        attempts = [*before, main, *after]
        innermost = state.suites[-1]
        counts = innermost.counts
        counts[_E_TESTS] += 1
        counts[_E_FAILURES] += has_failure
        counts[_E_ERRORS] += has_error
        counts[_E_SKIPPED] += skipped is not None and not results
        counts[_A_TESTS] += len(attempts)
        for attempt in attempts:
            index = _A_OUTCOME.get(attempt.outcome)
            if index is not None:
                counts[index] += 1

        suite_name = innermost.result_name
        timestamp = innermost.timestamp
        key = (classname, name)
        if (
            state.pending
            and state.pending_key == key
            and state.pending[-1].outcome == "failed"
            and not before
            and not after
            and skipped is None
            and len(results) == 1
            and outcome == "error"
            and message.startswith(_PYTEST_TEARDOWN_PREFIX)
        ):
            state.pending[-1] = _absorb_teardown(state.pending[-1], main)
            return
        yield from state.flush()
        built = []
        for attempt in attempts:
            state.attempts[key] += 1
            built.append(
                _result(
                    attempt,
                    suite=suite_name,
                    classname=classname,
                    name=name,
                    file=elem.get("file", ""),
                    number=state.attempts[key],
                    timestamp=timestamp,
                    properties=tuple(properties),
                )
            )
        state.pending, state.pending_key = built, key

    def _rerun_attempt(self, elem: etree._Element, outcome: str, state: _ParseState) -> _Attempt:
        traces, outs, errs = [], [], []
        for child in elem:
            ctag = _local(child.tag)
            if ctag == "stackTrace":
                traces.append(_all_text(child))
            elif ctag == "system-out":
                outs.append(_all_text(child))
            elif ctag == "system-err":
                errs.append(_all_text(child))
        own = (elem.text or "").strip()
        if own:
            traces.insert(0, elem.text or "")
        raw_time = elem.get("time")
        duration = junit_time_parse(raw_time)
        if duration is None and raw_time is not None and raw_time.strip():
            state.note_bad_time(elem.sourceline, raw_time)
        return _Attempt(
            outcome,
            duration,
            elem.get("type", ""),
            elem.get("message", ""),
            "\n".join(traces),
            "".join(outs),
            "".join(errs),
        )


@dataclass
class _ParseState:
    filename: str
    suites: list[_Suite] = field(default_factory=list)
    attempts: Counter[tuple[str, str]] = field(default_factory=Counter)
    pending: list[ParsedResult] = field(default_factory=list)
    pending_key: tuple[str, str] | None = None
    bad_times: int = 0
    first_bad_time: tuple[int | None, str] = (None, "")

    def note_bad_time(self, line: int | None, value: str) -> None:
        if not self.bad_times:
            self.first_bad_time = (line, value)
        self.bad_times += 1

    def flush(self) -> Iterator[ParsedResult]:
        pending, self.pending, self.pending_key = self.pending, [], None
        yield from pending


def _totals_open(suites: list[_Suite]) -> dict[str, int]:
    """Per-element totals of the testcases read so far beneath still-open suites."""
    totals = dict.fromkeys(_TOTAL_KEYS, 0)
    for suite in suites:
        for key, number in suite.per_element().items():
            totals[key] += number
    return totals


def _result(
    attempt: _Attempt,
    *,
    suite: str,
    classname: str,
    name: str,
    file: str,
    number: int,
    timestamp: datetime | None,
    properties: tuple[tuple[str, str], ...],
) -> ParsedResult:
    failure_type, message, details = attempt.failure_type, attempt.message, attempt.details
    system_out, system_err = attempt.system_out, attempt.system_err
    truncated: list[tuple[str, int]] = []
    if not (
        len(failure_type) <= MESSAGE_CAP
        and len(message) <= MESSAGE_CAP
        and len(details) <= DETAILS_CAP
        and len(system_out) <= OUTPUT_CAP
        and len(system_err) <= OUTPUT_CAP
    ):  # something to cap (the usual case skips the five calls)
        failure_type = _cap(failure_type, MESSAGE_CAP, "failure_type", truncated)
        message = _cap(message, MESSAGE_CAP, "message", truncated)
        details = _cap(details, DETAILS_CAP, "details", truncated)
        system_out = _cap(system_out, OUTPUT_CAP, "system_out", truncated)
        system_err = _cap(system_err, OUTPUT_CAP, "system_err", truncated)
    return _parsed_new(
        suite, classname, name, file, attempt.outcome, attempt.duration, number, failure_type, message, details,
        system_out, system_err, tuple(truncated), timestamp, properties,
    )


def _absorb_teardown(previous: ParsedResult, teardown: _Attempt) -> ParsedResult:
    """Fold pytest's separate teardown-error testcase into the failed attempt it belongs to."""
    extra = f"\n\n[teardown error] {teardown.message}\n{teardown.details}"
    out = previous.system_out + (
        teardown.system_out if teardown.system_out not in previous.system_out else ""
    )
    err = previous.system_err + (
        teardown.system_err if teardown.system_err not in previous.system_err else ""
    )
    truncated = dict(previous.truncated)
    details = previous.details + extra
    if len(details) > DETAILS_CAP:
        truncated.setdefault("details", len(details))
        details = details[:DETAILS_CAP]
    if len(out) > OUTPUT_CAP:
        truncated.setdefault("system_out", len(out))
        out = out[:OUTPUT_CAP]
    if len(err) > OUTPUT_CAP:
        truncated.setdefault("system_err", len(err))
        err = err[:OUTPUT_CAP]
    return previous._replace(
        details=details,
        system_out=out,
        system_err=err,
        truncated=tuple(truncated.items()),
    )


def _release(elem: etree._Element) -> None:
    """Free a finished element and the siblings before it, so memory stays flat while streaming."""
    elem.clear(keep_tail=False)
    parent = elem.getparent()
    if parent is not None:
        del parent[: parent.index(elem)]


def parse_junit(
    source: str | os.PathLike[str] | bytes | BinaryIO, *, filename: str | None = None
) -> tuple[list[ParsedResult], list[str]]:
    """Read a whole report: all attempts and the warnings.

    Parameters
    ----------
    source : str, os.PathLike, bytes or binary file object
        See :class:`JUnitReader`.
    filename : str, optional
        Name used in messages.

    Returns
    -------
    results : list of ParsedResult
    warnings : list of str

    Raises
    ------
    JUnitParseError
        On anything that is not a readable JUnit-XML report; nothing is returned then.
    """
    reader = JUnitReader(source, filename=filename)
    results = list(reader)
    return results, reader.warnings
