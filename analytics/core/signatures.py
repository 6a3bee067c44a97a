"""Failure signatures: reduce a failure to the part that identifies its cause.

A failure as ingested from a JUnit-XML report carries a failure type, a message and a
details text (usually a stack trace). Two occurrences of one cause differ in numbers,
addresses, temporary paths, ports, quoted values and library line numbers; they agree on
the exception type, the stable words of the message and the project's own frames. This
module keeps the latter and masks the former.

Pure module: plain strings in, a frozen dataclass out; no Django, no I/O.

Stack-trace shapes understood
-----------------------------
``python``
    ``Traceback (most recent call last):`` with ``File "path", line N, in func`` frames,
    chained sections ("The above exception was the direct cause ...", "During handling
    ...") and pytest's report style (``path.py:N: in func`` / ``E   Error: ...``).
``jvm``
    ``pkg.Exception: message`` followed by ``at pkg.Class.method(File.java:N)`` frames and
    ``Caused by:`` sections; the last ``Caused by:`` is the root cause.
``javascript``
    Node stacks: ``Error: message`` then ``at fn (file:line:col)`` or ``at file:line:col``.
``dotnet``
    ``Ns.Exception: message ---> Ns.Inner: message`` then
    ``at Ns.Class.Method(args) in path:line N``; the innermost exception is the root cause.
``unknown``
    Anything else: the signature uses the failure type and the message only.
"""

from __future__ import annotations

import hashlib
import re
from collections.abc import Callable, Sequence
from dataclasses import dataclass

__all__ = [
    "DEFAULT_LIBRARY_PATTERNS",
    "MAX_FRAMES",
    "MAX_MESSAGE_CHARS",
    "RULES",
    "Frame",
    "Signature",
    "collapse_whitespace",
    "failure_signature",
    "is_library_frame",
    "mask_durations",
    "mask_hex",
    "mask_ip_addresses",
    "mask_numbers",
    "mask_paths",
    "mask_ports",
    "mask_quoted",
    "mask_timestamps",
    "mask_uuids",
    "normalise_message",
]

#: Frames whose location matches one of these are library frames and are left out of the
#: signature. A pattern ending in ``.`` is a qualified-name prefix (JVM, .NET); any other
#: pattern is a substring of the frame's file path.
DEFAULT_LIBRARY_PATTERNS: tuple[str, ...] = (
    "site-packages",
    "dist-packages",
    "/usr/lib/python",
    "/lib/python",
    "<frozen ",
    "java.",
    "javax.",
    "sun.",
    "jdk.",
    "kotlin.",
    "org.junit.",
    "org.opentest4j.",
    "node_modules",
    "node:",
    "System.",
    "Microsoft.",
)

#: Number of project frames (innermost first) kept in a signature.
MAX_FRAMES = 3
#: Longest normalised message kept in a signature text.
MAX_MESSAGE_CHARS = 200

# --------------------------------------------------------------------------------------------
# Masking rules. Each takes a string and returns it with one kind of varying value replaced
# by a placeholder in angle brackets. RULES lists them in the order they are applied.
# --------------------------------------------------------------------------------------------

_UUID = re.compile(r"\b[0-9a-fA-F]{8}-[0-9a-fA-F]{4}-[0-9a-fA-F]{4}-[0-9a-fA-F]{4}-[0-9a-fA-F]{12}\b")
_TIMESTAMP = re.compile(
    r"\b\d{4}-\d{2}-\d{2}(?:[T ]\d{2}:\d{2}(?::\d{2}(?:[.,]\d+)?)?(?:Z|[+-]\d{2}:?\d{2})?)?\b"
    r"|\b\d{1,2}:\d{2}:\d{2}(?:[.,]\d+)?\b"
)
_QUOTED = re.compile(
    r"(?<![\w'])'[^'\n]{0,300}'(?!\w)"  # 'value'  (an apostrophe inside a word is not a quote)
    r'|(?<![\w"])"[^"\n]{0,300}"(?!\w)'  # "value"
    r"|`[^`\n]{0,300}`"  # `value`
    r"|(?<=[:=] )<[^<>\n]{0,300}>|(?<=[:=])<[^<>\n]{0,300}>"  # expected:<value> but was:<value>
)
_TEMP_PATH = re.compile(
    r"(?:/private)?/(?:tmp|var/tmp|var/folders|dev/shm)/[^\s'\"(),;]*"
    r"|[A-Za-z]:\\[^\s'\"]*?\\(?:Temp|tmp)\\[^\s'\"(),;]*",
    re.IGNORECASE,
)
_IPV4 = re.compile(r"(?<![\w.])\d{1,3}(?:\.\d{1,3}){3}(?![\w.])")
_IPV6 = re.compile(r"\[[0-9a-fA-F:]*:[0-9a-fA-F:]*\]")
_HOST_PORT = re.compile(r"(<ip>|\blocalhost|\b[\w-]+(?:\.[\w-]+)*\.[A-Za-z]{2,})(:)\d{1,5}\b")
_PORT_WORD = re.compile(r"\b(port)(\s*[=:]?\s*)\d{1,5}\b", re.IGNORECASE)
_HEX = re.compile(
    r"\b0[xX][0-9a-fA-F]+\b"  # 0x7f3a...
    r"|(?<=@)[0-9a-fA-F]{4,}\b"  # Java identity hash: Object@1b6d3586
    r"|\b(?=[0-9a-fA-F]*\d)(?=[0-9a-fA-F]*[a-fA-F])[0-9a-fA-F]{8,}\b"  # digests, object ids
)
_DURATION = re.compile(
    r"(?<![\w.])\d+(?:\.\d+)?\s*"
    r"(?:ns|us|µs|ms|s|sec|secs|second|seconds|min|mins|minute|minutes|h|hr|hours?)\b",
    re.IGNORECASE,
)
_NUMBER = re.compile(r"(?<![A-Za-z0-9.])\d+(?:\.\d+)?(?:[eE][-+]?\d+)?")
_WHITESPACE = re.compile(r"\s+")


def mask_uuids(text: str) -> str:
    """Replace UUIDs (8-4-4-4-12 hex digits) with ``<uuid>``."""
    return _UUID.sub("<uuid>", text)


def mask_timestamps(text: str) -> str:
    """Replace ISO 8601 dates/date-times and clock times (``12:30:05.123``) with ``<ts>``."""
    return _TIMESTAMP.sub("<ts>", text)


def mask_quoted(text: str) -> str:
    """Replace quoted literal values (``'..'``, ``".."``, backticks, ``:<..>``) with ``<str>``.

    An apostrophe inside a word (``can't``) does not open a quote.
    """
    return _QUOTED.sub("<str>", text)


def mask_paths(text: str) -> str:
    """Replace temporary paths (``/tmp/..``, ``/var/folders/..``, ``..\\Temp\\..``) with ``<tmp>``."""
    return _TEMP_PATH.sub("<tmp>", text)


def mask_ip_addresses(text: str) -> str:
    """Replace IPv4 addresses and bracketed IPv6 addresses with ``<ip>``."""
    return _IPV6.sub("<ip>", _IPV4.sub("<ip>", text))


def mask_ports(text: str) -> str:
    """Replace port numbers after a host (``localhost:5432``) or the word port with ``<port>``."""
    text = _HOST_PORT.sub(r"\1\2<port>", text)
    return _PORT_WORD.sub(r"\1\2<port>", text)


def mask_hex(text: str) -> str:
    """Replace hex addresses (``0x7f..``), identity hashes (``@1b6d3586``) and digests with ``<hex>``."""
    return _HEX.sub("<hex>", text)


def mask_durations(text: str) -> str:
    """Replace durations (``1.5s``, ``250 ms``, ``30 seconds``) with ``<dur>``."""
    return _DURATION.sub("<dur>", text)


def mask_numbers(text: str) -> str:
    """Replace numbers not glued to a letter (``42``, ``3.14``, ``user_7``) with ``<n>``.

    Digits that end an identifier (``Int32``, ``utf8``) are kept: they name things.
    """
    return _NUMBER.sub("<n>", text)


def collapse_whitespace(text: str) -> str:
    """Collapse runs of whitespace to one space and strip the ends."""
    return _WHITESPACE.sub(" ", text).strip()


#: The masking rules, in the order :func:`normalise_message` applies them. Quoted values go
#: first so that later rules see only the unquoted words; numbers go last because the other
#: rules recognise values that contain digits.
RULES: tuple[Callable[[str], str], ...] = (
    mask_uuids,
    mask_timestamps,
    mask_quoted,
    mask_paths,
    mask_ip_addresses,
    mask_ports,
    mask_hex,
    mask_durations,
    mask_numbers,
    collapse_whitespace,
)


def normalise_message(text: str) -> str:
    """Apply every rule of :data:`RULES` in order."""
    for rule in RULES:
        text = rule(text)
    return text


# --------------------------------------------------------------------------------------------
# Stack-trace parsing
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Frame:
    """One stack frame: where (file path or qualified name) and which function."""

    location: str
    function: str
    basename: str


@dataclass(frozen=True)
class _Section:
    """One exception of a chain with its frames, innermost frame first."""

    exception: str
    message: str
    frames: tuple[Frame, ...]


@dataclass(frozen=True)
class Signature:
    """The normalised identity of a failure.

    Attributes
    ----------
    text : str
        Human-readable normalised form: ``"<exception>: <message> @ <frames> | via <outer>"``.
    key : str
        First 16 hex digits of the SHA-1 of ``text``; equal texts give equal keys.
    exception : str
        Type of the root-cause exception (``""`` if unknown).
    frames : tuple of str
        Up to :data:`MAX_FRAMES` project frames, innermost first, as ``"basename:function"``.
    language : str
        ``'python'``, ``'jvm'``, ``'javascript'``, ``'dotnet'`` or ``'unknown'``.
    """

    text: str
    key: str
    exception: str
    frames: tuple[str, ...]
    language: str


def _basename(path: str) -> str:
    return re.split(r"[/\\]", path.rstrip("/\\"))[-1]


def is_library_frame(frame: Frame, patterns: Sequence[str] = DEFAULT_LIBRARY_PATTERNS) -> bool:
    """Whether ``frame`` belongs to a library, the runtime or the test framework.

    A pattern ending in ``.`` matches the start of a qualified name (after a JVM module prefix
    such as ``java.base/``); any other pattern matches anywhere in the file path.
    """
    location = frame.location
    qualified = location.split("/", 1)[1] if re.match(r"^[\w.]+(?:@[\w.]+)?/", location) else location
    for pattern in patterns:
        if pattern.endswith("."):
            if qualified.startswith(pattern) or location.startswith(pattern):
                return True
        elif pattern in location:
            return True
    return False


_GENERATED_NAME = re.compile(r"<(\w+)>[a-z]__\d+")  # .NET async/iterator state machines
_SYNTHETIC_SUFFIX = re.compile(r"\$\d+")  # JVM anonymous classes and lambdas


def _clean_function(name: str) -> str:
    name = _GENERATED_NAME.sub(r"\1", name)
    name = _SYNTHETIC_SUFFIX.sub("$<n>", name)
    return name.removesuffix(".MoveNext")


_EXCEPTION_LINE = re.compile(
    r"^\s*(?P<type>[A-Za-z_$][\w$.]*)(?:\s*\[\w+\])?(?:\s*\(-?\d+\))?(?::\s?(?P<msg>.*))?$"
)
_EXCEPTION_NAME = re.compile(r"(?:Error|Exception|Failure|Failed|Fault|Exit|Interrupt|Throwable|Warning)$")


def _split_exception_line(line: str) -> tuple[str, str]:
    """Split ``"pkg.Type: message"`` into type and message; ``("", line)`` if no type leads."""
    match = _EXCEPTION_LINE.match(line)
    if match:
        name, msg = match.group("type"), match.group("msg")
        if _EXCEPTION_NAME.search(name) or ("." in name.strip(".") and msg is not None):
            return name, (msg or "").strip()
    return "", line.strip()


def _simple_name(exception: str) -> str:
    return exception.rsplit(".", 1)[-1]


# Python ------------------------------------------------------------------------------------

_PY_FRAME = re.compile(r'^\s*File "(?P<path>[^"]+)", line \d+, in (?P<func>.+?)\s*$')
_PY_CHAIN = re.compile(
    r"^\s*(?:The above exception was the direct cause of the following exception:"
    r"|During handling of the above exception, another exception occurred:)\s*$",
    re.MULTILINE,
)
_PY_EXC_LINE = re.compile(r"^([A-Za-z_][\w.]*)(?::\s?(.*))?$")
_PYTEST_LOCATION = re.compile(r"^(?P<path>[^\s:][^:\n]*\.py):\d+:(?: in (?P<func>\S+)| (?P<exc>[\w.]+))?\s*$")
_PYTEST_ERROR = re.compile(r"^E\s{1,8}(.*)$")
_PY_DEF = re.compile(r"^\s*(?:async\s+)?def (\w+)\(")


def _parse_python_section(block: str) -> _Section | None:
    lines = block.splitlines()
    frames: list[Frame] = []
    last_frame_index = -1
    for index, line in enumerate(lines):
        match = _PY_FRAME.match(line)
        if match:
            path = match.group("path")
            frames.append(Frame(path, match.group("func"), _basename(path)))
            last_frame_index = index
    exception, message = "", ""
    for line in lines[last_frame_index + 1 :]:
        if not line or line[0].isspace() or line.startswith(("Traceback", "[")):
            continue
        match = _PY_EXC_LINE.match(line)
        if match:
            exception, message = match.group(1), (match.group(2) or "")
            break
    if not frames and not exception:
        return None
    return _Section(exception, message, tuple(reversed(frames)))


def _parse_python(details: str) -> list[_Section]:
    sections = []
    for block in _PY_CHAIN.split(details):
        section = _parse_python_section(block)
        if section is not None:
            sections.append(section)
    # Python prints the chain root cause first; return outermost first, root cause last.
    return list(reversed(sections))


def _parse_pytest(details: str) -> list[_Section]:
    frames: list[Frame] = []
    exception, message = "", ""
    current_def = ""
    for line in details.splitlines():
        definition = _PY_DEF.match(line)
        if definition:
            current_def = definition.group(1)
        error = _PYTEST_ERROR.match(line)
        if error and not message:
            exception, message = _split_exception_line(error.group(1))
        location = _PYTEST_LOCATION.match(line)
        if location:
            path = location.group("path")
            function = location.group("func") or current_def or "?"
            frames.append(Frame(path, function, _basename(path)))
            if location.group("exc"):
                exception = location.group("exc")
            current_def = ""
    return [_Section(exception, message, tuple(reversed(frames)))]


# JVM ---------------------------------------------------------------------------------------

_JVM_FRAME = re.compile(
    r"^\s*at (?P<qual>[\w$./<>-]+)\.(?P<method>[\w$<>]+)"
    r"\((?P<file>[\w$.-]+\.(?:java|kt|scala|groovy|clj)(?::\d+)?|Native Method|Unknown Source)\)"
)
_JVM_CAUSE = re.compile(r"^\s*Caused by:\s*(.*)$")


def _parse_jvm(details: str) -> list[_Section]:
    sections: list[_Section] = []
    header: str | None = None
    frames: list[Frame] = []
    in_suppressed = False

    def close() -> None:
        if header is not None:
            exception, message = _split_exception_line(header)
            sections.append(_Section(exception, message, tuple(frames)))

    for line in details.splitlines():
        cause = _JVM_CAUSE.match(line)
        if cause:
            close()
            header, frames, in_suppressed = cause.group(1), [], False
            continue
        if re.match(r"^\s+Suppressed:", line):
            in_suppressed = True
            continue
        frame = _JVM_FRAME.match(line)
        if frame:
            if header is None:
                header = ""
            if not in_suppressed:
                qualified = frame.group("qual")
                simple_class = qualified.rsplit(".", 1)[-1].rsplit("/", 1)[-1]
                file_name = frame.group("file").split(":")[0]
                basename = file_name if "." in file_name else simple_class
                function = _clean_function(f"{simple_class}.{frame.group('method')}")
                frames.append(Frame(f"{qualified}.{frame.group('method')}", function, basename))
            continue
        if header is None and line.strip():
            header = line.strip()
    close()
    return sections


# JavaScript --------------------------------------------------------------------------------

_JS_FRAME = re.compile(
    r"^\s*at (?:(?:async |new )?(?P<func>[^\s(][^(]*?) \((?P<loc1>[^()]+?):\d+:\d+\)"
    r"|(?:async )?(?P<loc2>[^\s()]+?):\d+:\d+)\s*$"
)


def _parse_javascript(details: str) -> list[_Section]:
    frames: list[Frame] = []
    header = ""
    for line in details.splitlines():
        match = _JS_FRAME.match(line)
        if match:
            location = match.group("loc1") or match.group("loc2") or ""
            function = (match.group("func") or "<anonymous>").strip()
            frames.append(Frame(location, function, _basename(location)))
        elif not frames and not header and line.strip():
            header = line.strip()
    exception, message = _split_exception_line(header)
    return [_Section(exception, message, tuple(frames))]


# .NET --------------------------------------------------------------------------------------

_DOTNET_FRAME = re.compile(
    r"^\s*at (?P<qual>[\w.`<>$+|\[\],]+?)\.(?P<method>[\w`<>$|]+(?:\[[^\]]*\])?)\((?P<args>[^)]*)\)"
    r"(?: in (?P<path>.+?):line \d+)?\s*$"
)
_DOTNET_INNER_END = re.compile(r"^\s*--- End of inner exception stack trace ---")


def _parse_dotnet(details: str) -> list[_Section]:
    header_lines: list[str] = []
    # frames_by_level[0] belongs to the innermost exception, the last list to the outermost.
    frames_by_level: list[list[Frame]] = [[]]
    seen_frame = False
    for line in details.splitlines():
        if _DOTNET_INNER_END.match(line):
            frames_by_level.append([])
            continue
        match = _DOTNET_FRAME.match(line)
        if match:
            seen_frame = True
            qualified = match.group("qual")
            simple_class = re.sub(r"\+.*$", "", qualified.rsplit(".", 1)[-1])
            simple_class = _GENERATED_NAME.sub(r"\1", simple_class)
            method = match.group("method")
            if method == "MoveNext":
                outer = re.search(r"<(\w+)>[a-z]__\d+$", qualified)
                if outer:
                    method = outer.group(1)
                    simple_class = qualified.rsplit(".", 2)[-2] if qualified.count(".") >= 2 else simple_class
            function = _clean_function(f"{simple_class}.{method}")
            basename = _basename(match.group("path")) if match.group("path") else simple_class
            frames_by_level[-1].append(Frame(f"{qualified}.{method}", function, basename))
        elif not seen_frame and line.strip():
            header_lines.append(line.strip())
    chain = [part.strip() for part in re.split(r"\s*--->\s*", " ".join(header_lines)) if part.strip()]
    sections = []
    for depth, part in enumerate(chain):
        exception, message = _split_exception_line(part)
        level = len(chain) - 1 - depth  # the outermost header owns the last frame list
        frames = frames_by_level[level] if level < len(frames_by_level) else []
        sections.append(_Section(exception, message, tuple(frames)))
    return sections


# Dispatch ----------------------------------------------------------------------------------


def _detect_language(details: str) -> str:
    if "Traceback (most recent call last)" in details or re.search(
        r'^\s*File "[^"]+", line \d+', details, re.MULTILINE
    ):
        return "python"
    if re.search(r"^\s*at \S.*\) in .+:line \d+\s*$", details, re.MULTILINE) or re.search(
        r"--- End of inner exception stack trace ---", details
    ):
        return "dotnet"
    if re.search(
        r"^\s*at \S+\((?:[\w$.-]+\.(?:java|kt|scala|groovy|clj)(?::\d+)?|Native Method|Unknown Source)\)",
        details,
        re.MULTILINE,
    ):
        return "jvm"
    if re.search(r"^\s*at (?:.+ \()?[^\s()]+:\d+:\d+\)?\s*$", details, re.MULTILINE):
        return "javascript"
    if re.search(r"^\s*at [\w.`<>+]+\([^)]*\)\s*$", details, re.MULTILINE):
        return "dotnet"
    if re.search(r"^[^\s:]+\.py:\d+:", details, re.MULTILINE):
        return "python"
    return "unknown"


_PARSERS = {
    "jvm": _parse_jvm,
    "javascript": _parse_javascript,
    "dotnet": _parse_dotnet,
}


def _project_frames(sections: Sequence[_Section], patterns: Sequence[str], limit: int) -> tuple[str, ...]:
    """Top project frames: the root cause's first, then those of the wrapping exceptions."""
    picked: list[str] = []
    for section in reversed(sections):  # root cause first
        for frame in section.frames:
            if is_library_frame(frame, patterns):
                continue
            name = f"{frame.basename}:{frame.function}"
            if picked and picked[-1] == name:  # recursion: one entry per run of equal frames
                continue
            if name not in picked:
                picked.append(name)
            if len(picked) == limit:
                return tuple(picked)
    return tuple(picked)


def _first_line(text: str) -> str:
    for line in text.splitlines():
        if line.strip():
            return line.strip()
    return ""


def failure_signature(
    *,
    failure_type: str,
    message: str,
    details: str,
    library_patterns: Sequence[str] = DEFAULT_LIBRARY_PATTERNS,
    max_frames: int = MAX_FRAMES,
) -> Signature:
    """Normalised signature of one failure.

    Parameters
    ----------
    failure_type : str
        The failure's type as reported (``type`` attribute of a JUnit ``failure``), may be empty.
    message : str
        The failure message, may be empty.
    details : str
        The failure body, usually a stack trace; may be empty.
    library_patterns : sequence of str, default DEFAULT_LIBRARY_PATTERNS
        Frames matching one of these are left out (see :func:`is_library_frame`).
    max_frames : int, default MAX_FRAMES
        Number of project frames kept, innermost first.

    Returns
    -------
    Signature

    Notes
    -----
    The root cause decides the exception and the message: the last ``Caused by:`` of a JVM
    trace, the innermost ``--->`` exception of a .NET trace, the first exception of a Python
    chain. Wrapping exception types are kept at the end of the text (``| via ...``). Line
    numbers are never part of a frame, so library line numbers cannot split a cause; library
    frames are dropped altogether.

    Examples
    --------
    >>> sig = failure_signature(failure_type="KeyError", message="'berth-17'", details="")
    >>> sig.text
    'KeyError: <str>'
    """
    language = _detect_language(details or "")
    if language == "python":
        sections = _parse_python(details) if 'File "' in details else _parse_pytest(details)
    elif language in _PARSERS:
        sections = _PARSERS[language](details)
    else:
        sections = []

    root = sections[-1] if sections else None
    exception = (root.exception if root else "") or (failure_type or "").strip()
    raw_message = root.message if root and (root.message or not message) else ""
    if not raw_message:
        raw_message = _first_line(message or "")
        type_prefix, rest = _split_exception_line(raw_message)
        if type_prefix and (not exception or _simple_name(type_prefix) == _simple_name(exception)):
            exception = exception or type_prefix
            raw_message = rest
    normalised = normalise_message(_first_line(raw_message))[:MAX_MESSAGE_CHARS]

    frames = _project_frames(sections, library_patterns, max_frames) if sections else ()
    wrappers = [
        section.exception for section in sections[:-1] if section.exception and section.exception != exception
    ]

    text = exception or "<unknown>"
    if normalised:
        text += f": {normalised}"
    if frames:
        text += " @ " + " < ".join(frames)
    if wrappers:
        text += " | via " + " < ".join(reversed(wrappers))
    key = hashlib.sha1(text.encode("utf-8")).hexdigest()[:16]
    if not sections:
        language = "unknown"
    return Signature(text=text, key=key, exception=exception, frames=frames, language=language)
