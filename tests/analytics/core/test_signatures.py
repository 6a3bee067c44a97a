"""Failure signatures: each masking rule, each stack-trace shape, equal/different causes.

Sources of the expected shapes:
- Python: tracebacks produced by the running interpreter (``traceback.format_exc``), and the
  report text of pytest's ``--junitxml`` (produced by running pytest in a subprocess);
- JVM: ``java.lang.Throwable.printStackTrace`` format (Java SE API documentation: header
  ``toString()``, ``\\tat`` frames, ``Caused by:`` sections, ``... n more``) (from memory);
- JavaScript: Node.js ``error.stack`` format (Node.js "Errors" documentation:
  ``at fn (file:line:column)``) (from memory);
- .NET: ``System.Exception.ToString()`` format (``--->`` inner exceptions, ``at ... in path:line N``,
  ``--- End of inner exception stack trace ---``) (from memory).
"""

from __future__ import annotations

import subprocess
import sys
import textwrap
import traceback
import uuid
import xml.etree.ElementTree as ET  # parsing pytest's own output written by the test itself
from pathlib import Path

import pytest

from analytics.core.signatures import (
    DEFAULT_LIBRARY_PATTERNS,
    RULES,
    Frame,
    failure_signature,
    is_library_frame,
    mask_durations,
    mask_hex,
    mask_ip_addresses,
    mask_numbers,
    mask_paths,
    mask_ports,
    mask_quoted,
    mask_timestamps,
    mask_uuids,
    normalise_message,
)

REPO = Path(__file__).resolve().parents[3]


# -- rules ------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        # RFC 9562 (formerly RFC 4122) textual UUID layout 8-4-4-4-12
        (
            "booking 3f2b8c1e-9a4d-4c6f-8e2a-1b7d9c0e5f3a not found",
            "booking <uuid> not found",
        ),
        ("ID 3F2B8C1E-9A4D-4C6F-8E2A-1B7D9C0E5F3A", "ID <uuid>"),
        ("no uuid in 3f2b8c1e-9a4d", "no uuid in 3f2b8c1e-9a4d"),
    ],
)
def test_mask_uuids(text, expected):
    assert mask_uuids(text) == expected


def test_mask_uuids_on_values_from_the_uuid_module():
    # Python's uuid module (reference implementation of RFC 9562 layouts)
    for _ in range(5):
        assert mask_uuids(f"job {uuid.uuid4()} failed") == "job <uuid> failed"


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        # ISO 8601 extended formats (date, date-time with fraction and offset)
        ("slot 2024-05-01 is full", "slot <ts> is full"),
        ("at 2024-05-01T10:15:30.123Z", "at <ts>"),
        ("at 2024-05-01 10:15:30+02:00 done", "at <ts> done"),
        ("stamp 2024-05-01T10:15", "stamp <ts>"),
        ("clock 09:15:02.500 drift", "clock <ts> drift"),
        ("ratio 3:4 stays", "ratio 3:4 stays"),
    ],
)
def test_mask_timestamps(text, expected):
    assert mask_timestamps(text) == expected


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("KeyError: 'berth-17'", "KeyError: <str>"),
        ('expected "Harbour A" got "Harbour B"', "expected <str> got <str>"),
        (
            "can't reach the gate",
            "can't reach the gate",
        ),  # an apostrophe inside a word is no quote
        ("column `fee_total` missing", "column <str> missing"),
        # JUnit 4 assertEquals message layout "expected:<..> but was:<..>" (from memory)
        ("expected:<42> but was:<41>", "expected:<str> but was:<str>"),
        # JUnit 5 layout "expected: <..> but was: <..>" (from memory)
        ("expected: <42> but was: <41>", "expected: <str> but was: <str>"),
        (
            "'NoneType' object has no attribute 'skipper'",
            "<str> object has no attribute <str>",
        ),
    ],
)
def test_mask_quoted(text, expected):
    assert mask_quoted(text) == expected


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        (
            "missing /tmp/pytest-of-ci/pytest-12/test_x0/manifest_3.json",
            "missing <tmp>",
        ),
        ("at /var/folders/xy/abc123/T/berths.db, retry", "at <tmp>, retry"),
        (r"open C:\Users\ci\AppData\Local\Temp\tmp8x2k\fees.csv", "open <tmp>"),
        (
            "config /etc/marina/app.toml",
            "config /etc/marina/app.toml",
        ),  # stable paths are kept
    ],
)
def test_mask_paths(text, expected):
    assert mask_paths(text) == expected


def test_mask_paths_on_a_real_temporary_directory(tmp_path):
    # the temporary path the platform's tempfile module hands out (pytest's tmp_path uses it)
    assert mask_paths(f"No such file: {tmp_path / 'x.txt'}") == "No such file: <tmp>"


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("connect 127.0.0.1 refused", "connect <ip> refused"),  # RFC 791 dotted quad
        (
            "peer [::1]:8080 reset",
            "peer <ip>:8080 reset",
        ),  # RFC 3986 bracketed IPv6 literal
        ("version 1.2.3 ok", "version 1.2.3 ok"),  # three parts are not an address
    ],
)
def test_mask_ip_addresses(text, expected):
    assert mask_ip_addresses(text) == expected


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("localhost:5432 refused", "localhost:<port> refused"),
        ("<ip>:6379 refused", "<ip>:<port> refused"),
        ("db.marina.example:5432 down", "db.marina.example:<port> down"),
        ("listening on port 8080", "listening on port <port>"),
        ("port=31337 closed", "port=<port> closed"),
    ],
)
def test_mask_ports(text, expected):
    assert mask_ports(text) == expected


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("<Berth object at 0x7f3a2c1b9d60>", "<Berth object at <hex>>"),
        (
            "com.marina.Pool@1b6d3586 closed",
            "com.marina.Pool@<hex> closed",
        ),  # Object.toString() layout
        (
            "commit 9fceb02d0ae598e95dc970b74767f19372d61af8 broke it",
            "commit <hex> broke it",
        ),
        ("deadline exceeded", "deadline exceeded"),
    ],
)
def test_mask_hex(text, expected):
    assert mask_hex(text) == expected


def test_mask_hex_on_a_real_repr():
    # CPython's default object repr "<... object at 0x...>"
    assert mask_hex(repr(object())) == "<object object at <hex>>"


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("timed out after 3.5s", "timed out after <dur>"),
        ("took 250 ms", "took <dur>"),
        ("waited 30 seconds", "waited <dur>"),
        ("3 berths", "3 berths"),
    ],
)
def test_mask_durations(text, expected):
    assert mask_durations(text) == expected


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("assert 3 == 4", "assert <n> == <n>"),
        ("fee 12.50 over 1e3", "fee <n> over <n>"),
        ("key user_42", "key user_<n>"),
        (
            "Int32 overflow in utf8",
            "Int32 overflow in utf8",
        ),  # digits that end a name are kept
        ("line 1 column 5 (char 4)", "line <n> column <n> (char <n>)"),
    ],
)
def test_mask_numbers(text, expected):
    assert mask_numbers(text) == expected


def test_rules_are_ordered_and_named():
    names = [rule.__name__ for rule in RULES]
    assert names[0] == "mask_uuids" and names[-2:] == [
        "mask_numbers",
        "collapse_whitespace",
    ]
    # a UUID must be masked before its digits are: the composed rules give one placeholder
    assert normalise_message("id 3f2b8c1e-9a4d-4c6f-8e2a-1b7d9c0e5f3a at 10:00:01") == "id <uuid> at <ts>"


def test_is_library_frame_patterns():
    # library locations from the brief: site-packages, stdlib, JVM runtime, node_modules, .NET runtime
    assert is_library_frame(Frame("/venv/lib/python3.11/site-packages/requests/api.py", "get", "api.py"))
    assert is_library_frame(
        Frame(
            "java.base/jdk.internal.reflect.Method.invoke",
            "Method.invoke",
            "Method.java",
        )
    )
    assert is_library_frame(Frame("/app/node_modules/mocha/lib/runner.js", "next", "runner.js"))
    assert is_library_frame(Frame("System.Net.Sockets.Socket.Connect", "Socket.Connect", "Socket"))
    assert not is_library_frame(Frame("/app/marina/booking.py", "book", "booking.py"))
    assert not is_library_frame(
        Frame("com.marina.BerthService.book", "BerthService.book", "BerthService.java")
    )
    # configurable: a project can declare its vendored code a library
    custom = (*DEFAULT_LIBRARY_PATTERNS, "com.marina.vendor.")
    assert is_library_frame(Frame("com.marina.vendor.Csv.read", "Csv.read", "Csv.java"), custom)


# -- Python, from the running interpreter ---------------------------------------------------------


def _lookup(registry, key):
    return registry[key]


def _caller_one(key):
    return _lookup({}, key)


def _caller_two(key):
    return _lookup({"other": 1}, key)


def _format(callable_, *args):
    try:
        callable_(*args)
    except Exception as exc:  # noqa: BLE001 - capturing any failure is the point
        return type(exc).__name__, str(exc), traceback.format_exc()
    raise AssertionError("expected a failure")


def test_python_traceback_from_the_interpreter():
    # traceback.format_exc of the running CPython is the reference layout
    failure_type, message, details = _format(_caller_one, "berth-17")
    signature = failure_signature(failure_type=failure_type, message=message, details=details)
    assert signature.language == "python"
    assert signature.exception == "KeyError"
    assert signature.frames[:2] == (
        "test_signatures.py:_lookup",
        "test_signatures.py:_caller_one",
    )
    assert "berth" not in signature.text and "17" not in signature.text
    assert signature.key == failure_signature(failure_type="", message="", details=details).key


def test_python_same_cause_same_signature_different_cause_different():
    one = failure_signature(**dict(zip(("failure_type", "message", "details"), _format(_caller_one, "a-1"))))
    again = failure_signature(
        **dict(zip(("failure_type", "message", "details"), _format(_caller_one, "zz-99")))
    )
    other_caller = failure_signature(
        **dict(zip(("failure_type", "message", "details"), _format(_caller_two, "a")))
    )
    division = failure_signature(**dict(zip(("failure_type", "message", "details"), _format(lambda: 1 / 0))))
    assert one.key == again.key and one.text == again.text
    assert one.key != other_caller.key  # another call path is another signature (clustering joins them)
    assert one.key != division.key and division.exception == "ZeroDivisionError"


def test_python_chained_exception_root_cause_comes_first():
    def open_channel(port):
        try:
            raise ConnectionRefusedError(111, "Connection refused")
        except ConnectionRefusedError as exc:
            raise ConnectionError(f"gate controller unreachable at 127.0.0.1:{port}") from exc

    _, _, details = _format(open_channel, 40123)
    signature = failure_signature(failure_type="ConnectionError", message="", details=details)
    assert signature.exception == "ConnectionRefusedError"
    assert signature.text.endswith("| via ConnectionError")
    assert signature.frames[0] == "test_signatures.py:open_channel"


def test_pytest_junitxml_report_text(tmp_path):
    # pytest's --junitxml failure body (long traceback style) as produced by pytest itself
    (tmp_path / "test_marina.py").write_text(
        textwrap.dedent(
            """
            def lookup(registry, key):
                return registry[key]

            def test_first():
                lookup({}, "berth-3")

            def test_second():
                lookup({}, "berth-44")

            def test_assert():
                fee = 3
                assert fee == 4
            """
        )
    )
    report = tmp_path / "report.xml"
    subprocess.run(
        [
            sys.executable,
            "-m",
            "pytest",
            "-q",
            "-p",
            "no:cacheprovider",
            "-p",
            "no:django",
            f"--junitxml={report}",
        ],
        cwd=tmp_path,
        capture_output=True,
        check=False,
        timeout=120,
    )
    failures = {
        case.get("name"): case.find("failure") for case in ET.parse(report).getroot().iter("testcase")
    }
    signatures = {
        name: failure_signature(
            failure_type=element.get("type") or "",
            message=element.get("message") or "",
            details=element.text or "",
        )
        for name, element in failures.items()
    }
    first, second, assertion = (
        signatures["test_first"],
        signatures["test_second"],
        signatures["test_assert"],
    )
    assert first.language == "python" and first.exception == "KeyError"
    assert first.frames == ("test_marina.py:lookup", "test_marina.py:test_first")
    assert second.frames[0] == "test_marina.py:lookup" and first.key != second.key
    assert assertion.exception == "AssertionError" and assertion.text.startswith(
        "AssertionError: assert <n> == <n>"
    )


# -- JVM ------------------------------------------------------------------------------------------

JVM_TRACE = """\
java.lang.IllegalStateException: Could not book berth {berth} for {day}
\tat com.marina.booking.BerthService.book(BerthService.java:88)
\tat com.marina.booking.BerthServiceTest.lambda$booksBerth${lam}(BerthServiceTest.java:31)
\tat java.base/jdk.internal.reflect.NativeMethodAccessorImpl.invoke0(Native Method)
\tat org.junit.platform.commons.util.ReflectionUtils.invokeMethod(ReflectionUtils.java:{junit_line})
Caused by: {root}
\tat com.marina.db.Pool.acquire(Pool.java:51)
\tat com.marina.booking.BerthService.book(BerthService.java:80)
\t... {more} more
"""


def test_jvm_caused_by_root_cause_decides():
    refused = [
        JVM_TRACE.format(
            berth=berth,
            day=day,
            lam=lam,
            junit_line=line,
            root=f"java.sql.SQLException: Connection refused: localhost:{port} (pool@{hash_:x})",
            more=more,
        )
        for berth, day, lam, line, port, hash_, more in [
            (42, "2024-05-01T10:00:00Z", 3, 725, 5432, 0x1B6D3586, 12),
            (7, "2025-01-30T08:30:00Z", 0, 727, 55432, 0x4554617C, 14),
        ]
    ]
    timeout = JVM_TRACE.format(
        berth=42,
        day="2024-05-01T10:00:00Z",
        lam=3,
        junit_line=725,
        root="java.util.concurrent.TimeoutException: lock on berth 42 not acquired within 3000 ms",
        more=12,
    )
    a, b, c = (failure_signature(failure_type="", message="", details=trace) for trace in (*refused, timeout))
    assert a.language == "jvm" and a.exception == "java.sql.SQLException"
    assert a.key == b.key  # same cause: only values, lambda number and library line numbers differ
    assert (
        c.exception == "java.util.concurrent.TimeoutException" and c.key != a.key
    )  # same wrapper, other root
    assert a.frames == (
        "Pool.java:Pool.acquire",
        "BerthService.java:BerthService.book",
        "BerthServiceTest.java:BerthServiceTest.lambda$booksBerth$<n>",
    )
    assert "junit" not in a.text and "reflect" not in a.text  # library frames are dropped


# -- JavaScript -----------------------------------------------------------------------------------

JS_TRACE = """\
TypeError: Cannot read properties of undefined (reading '{field}')
    at getBerth (/app/src/berths.js:{line}:15)
    at async Object.<anonymous> (/app/test/berths.test.js:5:3)
    at Module._compile (node:internal/modules/cjs/loader:{loader}:14)
    at /app/node_modules/runner/build/utils.js:298:28
"""


def test_javascript_node_stack():
    a = failure_signature(
        failure_type="TypeError",
        message="",
        details=JS_TRACE.format(field="id", line=12, loader=1105),
    )
    b = failure_signature(
        failure_type="",
        message="",
        details=JS_TRACE.format(field="name", line=12, loader=1364),
    )
    assert a.language == "javascript" and a.exception == "TypeError"
    assert a.frames == ("berths.js:getBerth", "berths.test.js:Object.<anonymous>")
    assert a.key == b.key
    refused = failure_signature(
        failure_type="",
        message="",
        details="Error: connect ECONNREFUSED 127.0.0.1:5432\n    at TCPConnectWrap.afterConnect [as oncomplete] "
        "(node:net:1555:16)\n",
    )
    assert refused.exception == "Error" and refused.text == "Error: connect ECONNREFUSED <ip>:<port>"


# -- .NET -----------------------------------------------------------------------------------------

DOTNET_TRACE = """\
System.InvalidOperationException: Booking failed for berth {berth} ---> {inner}
   at System.Net.Sockets.Socket.Connect(EndPoint remoteEP)
   at Marina.Cache.SlotCache.Open() in /src/Marina/Cache/SlotCache.cs:line {line}
   --- End of inner exception stack trace ---
   at Marina.Booking.BerthService.<ReserveAsync>d__{state}.MoveNext() in C:\\src\\Marina\\Booking\\BerthService.cs:line 120
   at Marina.Booking.Tests.BerthTests.Reserves() in C:\\src\\Marina\\Tests\\BerthTests.cs:line 33
"""


def test_dotnet_inner_exception_is_root_cause():
    inner = "System.Net.Sockets.SocketException (111): Connection refused {ip}:{port}"
    a, b = (
        failure_signature(
            failure_type="",
            message="",
            details=DOTNET_TRACE.format(
                berth=berth,
                inner=inner.format(ip=ip, port=port),
                line=line,
                state=state,
            ),
        )
        for berth, ip, port, line, state in [
            (17, "10.0.0.5", 6379, 44, 5),
            (3, "10.0.0.9", 16379, 44, 7),
        ]
    )
    assert a.language == "dotnet" and a.exception == "System.Net.Sockets.SocketException"
    assert a.frames == (
        "SlotCache.cs:SlotCache.Open",
        "BerthService.cs:BerthService.ReserveAsync",
        "BerthTests.cs:BerthTests.Reserves",
    )
    assert a.key == b.key
    assert a.text.endswith("| via System.InvalidOperationException")
    other = failure_signature(
        failure_type="",
        message="",
        details=DOTNET_TRACE.format(
            berth=17,
            inner="System.TimeoutException: The operation has timed out.",
            line=44,
            state=5,
        ),
    )
    assert other.exception == "System.TimeoutException" and other.key != a.key


# -- fallbacks and properties ----------------------------------------------------------------------


def test_unknown_shape_falls_back_to_message():
    a = failure_signature(
        failure_type="",
        message="BerthUnavailable: berth 12 taken at 10:00:05",
        details="",
    )
    b = failure_signature(
        failure_type="",
        message="BerthUnavailable: berth 40 taken at 11:30:00",
        details="log\n",
    )
    assert a.language == "unknown" and a.frames == ()
    assert a.text == "<unknown>: BerthUnavailable: berth <n> taken at <ts>"
    assert a.key == b.key
    typed = failure_signature(
        failure_type="TimeoutError",
        message="TimeoutError: gate 4 silent for 3s",
        details="",
    )
    assert typed.exception == "TimeoutError" and typed.text == "TimeoutError: gate <n> silent for <dur>"


def test_signature_key_is_a_digest_of_the_text():
    import hashlib  # the digest named in the docstring (hashlib, standard library)

    signature = failure_signature(failure_type="ValueError", message="bad length '12m'", details="")
    assert signature.key == hashlib.sha1(signature.text.encode()).hexdigest()[:16]


def test_signature_is_frozen():
    signature = failure_signature(failure_type="ValueError", message="x", details="")
    with pytest.raises(AttributeError):
        signature.text = "y"  # type: ignore[misc]


def test_core_modules_do_not_import_django():
    code = "import sys, analytics.core.signatures, analytics.core.clustering; print('django' in sys.modules)"
    result = subprocess.run(
        [sys.executable, "-c", code],
        cwd=REPO,
        capture_output=True,
        text=True,
        check=True,
        timeout=120,
    )
    assert result.stdout.strip() == "False"
