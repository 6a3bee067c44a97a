"""Defect exports of any shape: readers, the column map, and row validation.

Pure module: a file path in, plain Python rows out; no Django. The import service stores what
:func:`defect_rows` yields.

Reading (:func:`read_source_rows`)
    CSV with ``,``, ``;`` or tab between cells (sniffed), in UTF-8, UTF-8 with BOM, UTF-16 with BOM, or
    Latin-1 when the bytes are not valid UTF-8 (reported in :attr:`ReadInfo.warnings`); quoted cells may
    span lines. JSON: an array of objects, an object holding one array of objects, or one object per line
    (JSON lines). Both stream: memory does not grow with the number of records.

Mapping (:class:`ColumnMap`)
    Our own JSON format, saved per export source::

        {"name": "berth-desk-export",
         "fields": {"key": "Ticket No", "title": "Headline", "created": "Opened On", "components": "Area"},
         "closed_statuses": ["Done", "Won't Fix"], "open_statuses": ["New", "In Work"],
         "severity_order": ["Low", "Medium", "High", "Critical"], "priority_order": ["P4", "P3", "P2", "P1"],
         "multi_value_delimiter": ";", "date_format": null}

    ``open_statuses`` is optional. For JSON sources a mapped column is a dotted path
    (``"fields.component.name"``); a list met along the path yields every element's value.

Validation (:func:`defect_rows`)
    Exactly one item per source record, in file order: a :class:`DefectRow`, or a :class:`RowError`
    naming the physical line, the source column and the first problem found (fields checked in
    :data:`DEFECT_FIELDS` order, then dates against each other, then the key's uniqueness). Blank lines
    are not records. Decisions:

    * a key seen earlier in the same file is a :class:`RowError` (:data:`DUPLICATE_KEY_MSG`); the first
      valid row with that key is kept. Nothing is overwritten silently.
    * a status is closed when it is in ``closed_statuses`` (case-insensitive, trimmed); with no
      ``closed_statuses`` a defect is closed when it has a resolved date. When ``open_statuses`` and
      ``closed_statuses`` are both given, any other status is a :class:`RowError`.
    * severity and priority are compared with their order lists case-insensitively; an unlisted value is
      kept as text with rank None and one warning per distinct value.
    * a created or resolved date later than ``now`` plus :data:`FUTURE_GRACE` is an error; the grace
      covers exports written in local time without a zone (read as UTC) from zones up to UTC+14.
    * a single-valued field that receives several JSON values gets them joined by the delimiter; a field
      that receives a JSON object is an error asking for a dotted path.
    * a CSV record with more non-empty cells than the header is an error; missing trailing cells read
      as empty.
"""

from __future__ import annotations

import codecs
import csv
import difflib
import io
import json
import os
from collections.abc import Iterable, Iterator, Mapping
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from typing import Any

from ingest.parsers.dates import (
    AMBIGUOUS_DATES_MSG,
    AmbiguousDatesError,
    DateFormatResolver,
    DateParseError,
    DefectExportError,
    is_valid_date_format,
    parse_date,
    resolve_date_format,
)

__all__ = [
    "AMBIGUOUS_DATES_MSG",
    "DEFECT_FIELDS",
    "MULTI_VALUED_FIELDS",
    "REQUIRED_FIELDS",
    "ColumnMap",
    "ColumnMapError",
    "DefectExportError",
    "DefectExportResult",
    "DefectRow",
    "ReadInfo",
    "RowError",
    "SourceRow",
    "defect_rows",
    "read_source_rows",
    "resolve_date_format",
]

DEFECT_FIELDS: tuple[str, ...] = (
    "key",
    "title",
    "description",
    "created",
    "resolved",
    "status",
    "severity",
    "priority",
    "components",
    "type",
    "found_in",
    "fixed_in",
    "reporter",
    "assignee",
    "labels",
)
REQUIRED_FIELDS: tuple[str, ...] = ("key", "title", "created")
MULTI_VALUED_FIELDS: tuple[str, ...] = ("components", "labels")
DATE_FIELDS: tuple[str, ...] = ("created", "resolved")
FUTURE_GRACE = timedelta(hours=14)
MAP_KEYS: tuple[str, ...] = (
    "name",
    "fields",
    "closed_statuses",
    "open_statuses",
    "severity_order",
    "priority_order",
    "multi_value_delimiter",
    "date_format",
)

# Column-map messages.
MAP_NOT_OBJECT_MSG = "column map must be a JSON object, got {kind}"
MAP_UNKNOWN_KEY_MSG = "column map {name!r}: unknown key {key!r}; allowed keys: {allowed}"
MAP_BAD_VALUE_MSG = "column map {name!r}: {key!r} must be {expected}, got {value!r}"
MAP_UNKNOWN_FIELD_MSG = (
    "column map {name!r}: unknown field {field!r} in 'fields'; defect fields are: {allowed}"
)
MAP_REQUIRED_FIELD_MSG = "column map {name!r}: required field {field!r} is not mapped in 'fields'"
MAP_CLI_PAIR_MSG = "column mapping {pair!r} must look like FIELD=SOURCE COLUMN, e.g. 'key=Ticket No'"
# Whole-file messages.
UNREADABLE_MSG = "{source}: cannot read the file: {detail}"
NO_HEADER_MSG = "{source}: the file has no header row"
MISSING_COLUMN_MSG = (
    "{source}: mapped column {column!r} (field {field!r}) is not in the header{hint}; columns: {found}"
)
MISSING_PATH_MSG = "{source}: mapped path {column!r} (field {field!r}) is absent from every record"
BAD_CSV_MSG = "{source}: line {line}: {detail}"
BAD_JSON_MSG = "{source}: not a JSON array of objects nor JSON lines: {detail}"
# Row messages (RowError.reason).
MISSING_VALUE_MSG = "missing {field}: column {column!r} is empty"
FUTURE_DATE_MSG = "{field} date {value} is in the future"
RESOLVED_BEFORE_CREATED_MSG = "resolved date {resolved} is before created date {created}"
UNKNOWN_STATUS_MSG = "unknown status {value!r}; known statuses: {known}"
DUPLICATE_KEY_MSG = "duplicate key {key!r}: already on line {first_line}; this row was not imported"
EXTRA_CELLS_MSG = "the record has {count} cells but the header has {expected}"
BAD_JSON_LINE_MSG = "not valid JSON: {detail}"
NOT_AN_OBJECT_MSG = "the record is a JSON {kind}, not an object"
NESTED_VALUE_MSG = "the value is a JSON object; map a dotted path to one of its members ({members})"
# Warnings.
LATIN1_WARNING = "not valid UTF-8 (first bad byte on line {line}): read as Latin-1"
DUPLICATE_HEADER_WARNING = (
    "column {column!r} appears {count} times in the header: its cells are read as a list"
)
WRAPPED_ARRAY_WARNING = "records read from the array under {member!r}"
UNRANKED_WARNING = "{field} {value!r} is not in {field}_order: kept as text without rank (rows: {count}, first on line {line})"
SHARED_DAY_MONTH_WARNING = "column {column!r} read {reading} like column {other!r} of the same file"

_CHUNK = 1 << 16
_SNIFF_BYTES = 1 << 16
_DELIMITERS = (",", ";", "\t")


class ColumnMapError(ValueError):
    """A column map is malformed; the message names the map and the bad key."""


# --------------------------------------------------------------------------- column map


def _str_list(name: str, key: str, value: Any) -> list[str]:
    if value is None:
        return []
    if not isinstance(value, list) or not all(isinstance(item, str) for item in value):
        raise ColumnMapError(
            MAP_BAD_VALUE_MSG.format(name=name, key=key, expected="a list of strings", value=value)
        )
    return list(value)


@dataclass
class ColumnMap:
    """How one export source's columns map to Barometer's defect fields.

    Parameters
    ----------
    name : str
        The map's name.
    fields : dict of str to str
        Defect field -> source column (CSV header name, or dotted path in JSON records).
    closed_statuses, open_statuses : list of str
        Status values meaning closed / open; compared case-insensitively after trimming.
    severity_order, priority_order : list of str
        Values from lowest to highest; rank = position + 1.
    multi_value_delimiter : str
        Splits ``components`` and ``labels`` cells.
    date_format : str or None
        One of ``"iso"``, ``"epoch_s"``, ``"epoch_ms"``, ``"dayfirst"``, ``"monthfirst"``, a strptime format,
        or None to infer per column.

    Examples
    --------
    >>> cmap = ColumnMap.from_cli(["key=Ticket No", "title=Headline", "created=Opened On"])
    >>> cmap.fields["key"]
    'Ticket No'
    """

    name: str
    fields: dict[str, str]
    closed_statuses: list[str] = field(default_factory=list)
    severity_order: list[str] = field(default_factory=list)
    priority_order: list[str] = field(default_factory=list)
    multi_value_delimiter: str = ";"
    date_format: str | None = None
    open_statuses: list[str] = field(default_factory=list)

    def __post_init__(self) -> None:
        name = self.name
        for fname, column in self.fields.items():
            if fname not in DEFECT_FIELDS:
                raise ColumnMapError(
                    MAP_UNKNOWN_FIELD_MSG.format(name=name, field=fname, allowed=", ".join(DEFECT_FIELDS))
                )
            if not isinstance(column, str) or not column.strip():
                raise ColumnMapError(
                    MAP_BAD_VALUE_MSG.format(
                        name=name,
                        key=f"fields.{fname}",
                        expected="a non-empty column name",
                        value=column,
                    )
                )
        for fname in REQUIRED_FIELDS:
            if fname not in self.fields:
                raise ColumnMapError(MAP_REQUIRED_FIELD_MSG.format(name=name, field=fname))
        if not isinstance(self.multi_value_delimiter, str) or not self.multi_value_delimiter:
            raise ColumnMapError(
                MAP_BAD_VALUE_MSG.format(
                    name=name,
                    key="multi_value_delimiter",
                    expected="a non-empty string",
                    value=self.multi_value_delimiter,
                )
            )
        if self.date_format is not None and (
            not isinstance(self.date_format, str) or not is_valid_date_format(self.date_format)
        ):
            raise ColumnMapError(
                MAP_BAD_VALUE_MSG.format(
                    name=name,
                    key="date_format",
                    expected='"iso", "epoch_s", "epoch_ms", "dayfirst", "monthfirst", a strptime format or null',
                    value=self.date_format,
                )
            )

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> ColumnMap:
        """Build a map from its JSON form; raise :class:`ColumnMapError` naming the bad key."""
        if not isinstance(d, Mapping):
            raise ColumnMapError(MAP_NOT_OBJECT_MSG.format(kind=type(d).__name__))
        name = d.get("name")
        if not isinstance(name, str) or not name.strip():
            raise ColumnMapError(
                MAP_BAD_VALUE_MSG.format(name=name, key="name", expected="a non-empty string", value=name)
            )
        for key in d:
            if key not in MAP_KEYS:
                raise ColumnMapError(
                    MAP_UNKNOWN_KEY_MSG.format(name=name, key=key, allowed=", ".join(MAP_KEYS))
                )
        fields = d.get("fields")
        if not isinstance(fields, Mapping):
            raise ColumnMapError(
                MAP_BAD_VALUE_MSG.format(name=name, key="fields", expected="an object", value=fields)
            )
        delimiter = d.get("multi_value_delimiter", ";")
        return cls(
            name=name,
            fields=dict(fields),
            closed_statuses=_str_list(name, "closed_statuses", d.get("closed_statuses")),
            open_statuses=_str_list(name, "open_statuses", d.get("open_statuses")),
            severity_order=_str_list(name, "severity_order", d.get("severity_order")),
            priority_order=_str_list(name, "priority_order", d.get("priority_order")),
            multi_value_delimiter=";" if delimiter is None else delimiter,
            date_format=d.get("date_format"),
        )

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON form; ``open_statuses`` appears only when set."""
        out: dict[str, Any] = {
            "name": self.name,
            "fields": dict(self.fields),
            "closed_statuses": list(self.closed_statuses),
            "severity_order": list(self.severity_order),
            "priority_order": list(self.priority_order),
            "multi_value_delimiter": self.multi_value_delimiter,
            "date_format": self.date_format,
        }
        if self.open_statuses:
            out["open_statuses"] = list(self.open_statuses)
        return out

    @classmethod
    def from_cli(
        cls,
        pairs: Iterable[str],
        *,
        name: str = "command-line",
        closed_statuses: Iterable[str] = (),
        open_statuses: Iterable[str] = (),
        severity_order: Iterable[str] = (),
        priority_order: Iterable[str] = (),
        multi_value_delimiter: str = ";",
        date_format: str | None = None,
    ) -> ColumnMap:
        """Build a map from ``FIELD=SOURCE COLUMN`` pairs (split on the first ``=``)."""
        fields: dict[str, str] = {}
        for pair in pairs:
            fname, sep, column = pair.partition("=")
            if not sep or not fname.strip() or not column.strip():
                raise ColumnMapError(MAP_CLI_PAIR_MSG.format(pair=pair))
            fields[fname.strip()] = column.strip()
        return cls(
            name=name,
            fields=fields,
            closed_statuses=list(closed_statuses),
            open_statuses=list(open_statuses),
            severity_order=list(severity_order),
            priority_order=list(priority_order),
            multi_value_delimiter=multi_value_delimiter,
            date_format=date_format,
        )


# --------------------------------------------------------------------------- reading


@dataclass(frozen=True)
class SourceRow:
    """One record of the source file.

    ``line`` is the 1-based physical line where the record starts (CSV: header = line 1; JSON lines: the
    line), or the 1-based record index in a JSON array. ``values`` maps header names (CSV; a list when the
    header repeats a name) or holds the JSON object. ``problem`` is non-empty when the record itself is
    broken (invalid JSON line, extra CSV cells, not an object).
    """

    line: int
    values: Mapping[str, Any]
    problem: str = ""


@dataclass
class ReadInfo:
    """What the reader found out about a file.

    ``columns`` holds the CSV header, or for JSON the dotted paths present in the first record.
    """

    format: str
    encoding: str
    delimiter: str
    warnings: list[str] = field(default_factory=list)
    columns: tuple[str, ...] = ()
    source: str = ""


def _detect_encoding(path: str | os.PathLike[str]) -> tuple[str, list[str]]:
    with open(path, "rb") as fh:
        head = fh.read(4)
        if head.startswith(codecs.BOM_UTF8):
            encoding = "utf-8-sig"
        elif head.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)):
            return "utf-16", []
        else:
            encoding = "utf-8"
        fh.seek(0)
        decoder = codecs.getincrementaldecoder(encoding)()
        newlines = 0
        while True:
            chunk = fh.read(_CHUNK)
            try:
                decoder.decode(chunk, final=not chunk)
            except UnicodeDecodeError as exc:
                line = newlines + chunk.count(b"\n", 0, max(exc.start, 0)) + 1
                return "latin-1", [LATIN1_WARNING.format(line=line)]
            if not chunk:
                return encoding, []
            newlines += chunk.count(b"\n")


def _sniff_delimiter(sample: str) -> str:
    best, best_score = ",", (-1, -1)
    for delimiter in _DELIMITERS:
        records = [r for r in csv.reader(io.StringIO(sample), delimiter=delimiter) if r][:50]
        if len(records) > 1 and not sample.endswith(("\n", "\r")):
            records = records[:-1]  # the sample may cut the last record
        if not records:
            continue
        width = len(records[0])
        consistent = sum(len(r) == width for r in records[1:])
        score = (width > 1 and consistent == len(records) - 1, width)
        if score > best_score:
            best, best_score = delimiter, score
    return best


def _csv_reader(fh: Iterable[str], delimiter: str) -> Any:
    return csv.reader(fh, delimiter=delimiter, strict=True)


def _flatten_paths(value: Any, prefix: str = "") -> list[str]:
    if isinstance(value, Mapping):
        out: list[str] = []
        for key, item in value.items():
            out.extend(_flatten_paths(item, f"{prefix}.{key}" if prefix else str(key)))
        return out
    if isinstance(value, list) and value and isinstance(value[0], Mapping):
        return _flatten_paths(value[0], prefix)
    return [prefix]


def _iter_csv(path: Any, encoding: str, delimiter: str, source: str) -> Iterator[SourceRow]:
    with open(path, encoding=encoding, newline="") as fh:
        reader = _csv_reader(fh, delimiter)
        header: list[str] | None = None
        counts: dict[str, int] = {}
        while True:
            start = reader.line_num + 1
            try:
                record = next(reader)
            except StopIteration:
                return
            except csv.Error as exc:
                raise DefectExportError(BAD_CSV_MSG.format(source=source, line=start, detail=exc)) from exc
            if not any(cell.strip() for cell in record):
                continue  # blank lines are not records
            if header is None:
                header = [cell.strip() for cell in record]
                for name in header:
                    counts[name] = counts.get(name, 0) + 1
                continue
            values: dict[str, Any] = {}
            for name, cell in zip(header, record, strict=False):
                if counts[name] > 1:
                    values.setdefault(name, []).append(cell)
                else:
                    values[name] = cell
            problem = ""
            if len(record) > len(header) and any(cell.strip() for cell in record[len(header) :]):
                problem = EXTRA_CELLS_MSG.format(count=len(record), expected=len(header))
            yield SourceRow(line=start, values=values, problem=problem)


def _iter_json_array(fh: io.TextIOBase, source: str) -> Iterator[tuple[int, Any]]:
    """Yield (index, item) from a top-level JSON array, reading the text in chunks."""
    decoder = json.JSONDecoder()
    buffer = fh.read(_CHUNK).lstrip()
    if not buffer.startswith("["):
        raise DefectExportError(BAD_JSON_MSG.format(source=source, detail="expected '['"))
    pos, index, eof = 1, 0, False
    expect_item = True
    while True:
        while True:  # skip blanks and one comma
            while pos < len(buffer) and buffer[pos] in " \t\r\n":
                pos += 1
            if pos < len(buffer) or eof:
                break
            more = fh.read(_CHUNK)
            eof = not more
            buffer, pos = buffer[pos:] + more, 0
        if pos >= len(buffer):
            raise DefectExportError(BAD_JSON_MSG.format(source=source, detail="the array is not closed"))
        char = buffer[pos]
        if char == "]":
            return
        if char == "," and not expect_item:
            pos += 1
            expect_item = True
            continue
        try:
            item, end = decoder.raw_decode(buffer, pos)
        except json.JSONDecodeError as exc:
            if eof:
                raise DefectExportError(
                    BAD_JSON_MSG.format(source=source, detail=f"record {index + 1}: {exc.msg}")
                ) from exc
            more = fh.read(_CHUNK)
            eof = not more
            buffer, pos = buffer[pos:] + more, 0
            continue
        if end == len(buffer) and not eof and not isinstance(item, (dict, list, str)):
            more = fh.read(_CHUNK)  # a bare number may continue in the next chunk
            eof = not more
            buffer, pos = buffer[pos:] + more, 0
            continue
        index += 1
        yield index, item
        buffer, pos = buffer[end:], 0
        expect_item = False


def _json_row(line: int, item: Any) -> SourceRow:
    if isinstance(item, dict):
        return SourceRow(line=line, values=item)
    kind = {list: "array", str: "string", bool: "boolean", type(None): "null"}.get(type(item), "number")
    return SourceRow(line=line, values={}, problem=NOT_AN_OBJECT_MSG.format(kind=kind))


def _iter_json(path: Any, encoding: str, fmt: str, member: str | None, source: str) -> Iterator[SourceRow]:
    with open(path, encoding=encoding) as fh:
        if fmt == "jsonl":
            for number, text in enumerate(fh, start=1):
                if not text.strip():
                    continue
                try:
                    item = json.loads(text)
                except json.JSONDecodeError as exc:
                    yield SourceRow(
                        line=number,
                        values={},
                        problem=BAD_JSON_LINE_MSG.format(detail=exc.msg),
                    )
                    continue
                yield _json_row(number, item)
        elif member is None:
            for index, item in _iter_json_array(fh, source):
                yield _json_row(index, item)
        else:
            data = json.load(fh)
            items = data[member] if member else [data]
            for index, item in enumerate(items, start=1):
                yield _json_row(index, item)


def _json_layout(path: Any, encoding: str, source: str) -> tuple[str, str | None, list[str]]:
    """Return (format, member, warnings): member None = top-level array, '' = single object."""
    with open(path, encoding=encoding) as fh:
        first = ""
        for text in fh:
            if text.strip():
                first = text
                break
        second_record = any(text.strip() for text in fh)
    stripped = first.lstrip()
    if stripped.startswith("["):
        return "json", None, []
    if not stripped.startswith("{"):
        raise DefectExportError(BAD_JSON_MSG.format(source=source, detail="expected '[' or '{'"))
    try:
        json.loads(first)
        first_is_object = True
    except json.JSONDecodeError:
        first_is_object = False
    if first_is_object and second_record:
        return "jsonl", None, []
    with open(path, encoding=encoding) as fh:
        try:
            data = json.load(fh)
        except json.JSONDecodeError as exc:
            raise DefectExportError(
                BAD_JSON_MSG.format(source=source, detail=f"line {exc.lineno}: {exc.msg}")
            ) from exc
    arrays = [k for k, v in data.items() if isinstance(v, list) and v and all(isinstance(i, dict) for i in v)]
    if len(arrays) == 1:
        return "json", arrays[0], [WRAPPED_ARRAY_WARNING.format(member=arrays[0])]
    return "json", "", []


def read_source_rows(
    path: str | os.PathLike[str], *, filename: str | None = None
) -> tuple[ReadInfo, Iterator[SourceRow]]:
    """Open a defect export and return what was found plus a lazy iterator of its records.

    Parameters
    ----------
    path : str or path-like
        The file on disk.
    filename : str, optional
        The name to show in messages and to choose the format by extension (an upload's original name);
        defaults to the base name of *path*. ``.json``/``.jsonl``/``.ndjson`` are JSON; other names are
        CSV unless the content starts with ``[`` or ``{``.

    Returns
    -------
    info : ReadInfo
    rows : iterator of SourceRow
        Reads the file while iterated; raises :class:`DefectExportError` on broken CSV quoting or a
        broken JSON array, naming the file and line.

    Raises
    ------
    DefectExportError
        The file cannot be opened or holds no header.
    """
    source = filename or os.path.basename(os.fspath(path))
    try:
        encoding, warnings = _detect_encoding(path)
        with open(path, encoding=encoding, newline="") as fh:
            sample = fh.read(_SNIFF_BYTES)
    except OSError as exc:
        raise DefectExportError(UNREADABLE_MSG.format(source=source, detail=exc.strerror or exc)) from exc
    lowered = source.lower()
    more: list[str]
    member: str | None
    looks_json = sample.lstrip().startswith(("[", "{"))
    if lowered.endswith((".jsonl", ".ndjson")):
        fmt, member, more = "jsonl", None, []
    elif lowered.endswith(".json") or (looks_json and not lowered.endswith((".csv", ".tsv", ".txt"))):
        fmt, member, more = _json_layout(path, encoding, source)
    else:
        fmt, member, more = "csv", None, []
    warnings.extend(more)
    if fmt != "csv":
        first = next(iter(_iter_json(path, encoding, fmt, member, source)), None)
        columns = tuple(_flatten_paths(first.values)) if first and first.values else ()
        info = ReadInfo(fmt, encoding, "", warnings, columns, source)
        return info, _iter_json(path, encoding, fmt, member, source)
    delimiter = _sniff_delimiter(sample)
    header: list[str] = []
    for record in _csv_reader(io.StringIO(sample), delimiter):
        if any(cell.strip() for cell in record):
            header = [cell.strip() for cell in record]
            break
    if not header:
        raise DefectExportError(NO_HEADER_MSG.format(source=source))
    for name in dict.fromkeys(header):
        if header.count(name) > 1:
            warnings.append(DUPLICATE_HEADER_WARNING.format(column=name, count=header.count(name)))
    info = ReadInfo("csv", encoding, delimiter, warnings, tuple(header), source)
    return info, _iter_csv(path, encoding, delimiter, source)


# --------------------------------------------------------------------------- validation


@dataclass(frozen=True)
class DefectRow:
    """One valid defect, with dates in UTC."""

    line: int
    key: str
    title: str
    description: str
    created: datetime
    resolved: datetime | None
    status: str
    is_closed: bool
    severity: str
    severity_rank: int | None
    priority: str
    priority_rank: int | None
    components: tuple[str, ...]
    type: str
    found_in: str
    fixed_in: str
    reporter: str
    assignee: str
    labels: tuple[str, ...]


@dataclass(frozen=True)
class RowError:
    """Why one record was not imported: ``column`` is the source column ('' for the whole record)."""

    line: int
    column: str
    field: str
    reason: str


_MISSING = object()


def _lookup(values: Mapping[str, Any], path: str) -> Any:
    """Dotted-path lookup; a literal key wins, lists collect their elements' values."""
    if path in values:
        return values[path]
    head, dot, rest = path.partition(".")
    if not dot or head not in values:
        return _MISSING
    inner = values[head]
    if isinstance(inner, Mapping):
        return _lookup(inner, rest)
    if isinstance(inner, list):
        found = [_lookup(item, rest) for item in inner if isinstance(item, Mapping)]
        found = [item for item in found if item is not _MISSING]
        return found if found else _MISSING
    return _MISSING


def _scalar_text(value: Any) -> str:
    if value is None or value is _MISSING:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    return str(value).strip()


class _Problem(Exception):
    def __init__(self, column: str, field_name: str, reason: str) -> None:
        super().__init__(reason)
        self.column, self.field_name, self.reason = column, field_name, reason


def _flat(value: Any) -> list[Any]:
    if isinstance(value, list):
        return [leaf for item in value for leaf in _flat(item)]
    return [value]


class DefectExportResult:
    """A checked defect export: iterate it for one :class:`DefectRow` or :class:`RowError` per record.

    Each iteration reads the file again from disk (streaming); :attr:`row_warnings` is refilled by each
    complete iteration.

    Attributes
    ----------
    info : ReadInfo
    column_map : ColumnMap
    date_formats : dict of str to str or None
        Source column -> date format used (None: the column held no value).
    file_warnings : list of str
        Warnings known before iterating (encoding, header, shared day/month reading).
    row_warnings : list of str
        Warnings from the last complete iteration (unranked severities and priorities).
    """

    def __init__(
        self,
        *,
        path: str | os.PathLike[str],
        info: ReadInfo,
        column_map: ColumnMap,
        date_formats: dict[str, str | None],
        file_warnings: list[str],
        now: datetime,
    ) -> None:
        self.path = path
        self.info = info
        self.column_map = column_map
        self.date_formats = date_formats
        self.file_warnings = file_warnings
        self.row_warnings: list[str] = []
        self.now = now

    @property
    def warnings(self) -> list[str]:
        """File warnings followed by the last iteration's row warnings."""
        return [*self.file_warnings, *self.row_warnings]

    def __iter__(self) -> Iterator[DefectRow | RowError]:
        cmap = self.column_map
        closed = {s.strip().casefold() for s in cmap.closed_statuses}
        opened = {s.strip().casefold() for s in cmap.open_statuses}
        check_status = bool(closed and opened)
        known = ", ".join(repr(s) for s in [*cmap.open_statuses, *cmap.closed_statuses])
        ranks = {
            "severity": {v.strip().casefold(): i + 1 for i, v in enumerate(cmap.severity_order)},
            "priority": {v.strip().casefold(): i + 1 for i, v in enumerate(cmap.priority_order)},
        }
        unranked: dict[tuple[str, str], list[int]] = {}
        seen: dict[str, int] = {}
        limit = self.now + FUTURE_GRACE
        _, rows = read_source_rows(self.path, filename=self.info.source)

        def text(fname: str, values: Mapping[str, Any]) -> str:
            column = cmap.fields.get(fname)
            if column is None:
                return ""
            raw = values[column] if column in values else _lookup(values, column)
            if type(raw) is str:  # the common case: one CSV cell or JSON string
                return raw.strip()
            leaves = _flat(raw)
            for leaf in leaves:
                if isinstance(leaf, Mapping):
                    members = ", ".join(f"{column}.{k}" for k in list(leaf)[:5])
                    raise _Problem(column, fname, NESTED_VALUE_MSG.format(members=members))
            texts = [t for t in (_scalar_text(leaf) for leaf in leaves) if t]
            return cmap.multi_value_delimiter.join(texts)

        def multi(fname: str, values: Mapping[str, Any]) -> tuple[str, ...]:
            column = cmap.fields.get(fname)
            if column is None:
                return ()
            raw = _lookup(values, column)
            if isinstance(raw, list) and self.info.format != "csv":
                parts = [_scalar_text(leaf) for leaf in _flat(raw) if not isinstance(leaf, Mapping)]
            else:
                parts = text(fname, values).split(cmap.multi_value_delimiter)
            return tuple(dict.fromkeys(p.strip() for p in parts if p.strip()))

        def when(fname: str, values: Mapping[str, Any]) -> datetime | None:
            value = text(fname, values)
            if not value:
                return None
            column = cmap.fields[fname]
            try:
                moment = parse_date(value, cmap.date_format or self.date_formats.get(column) or "iso")
            except DateParseError as exc:
                raise _Problem(column, fname, str(exc)) from exc
            if moment > limit:
                raise _Problem(
                    column,
                    fname,
                    FUTURE_DATE_MSG.format(field=fname, value=moment.isoformat()),
                )
            return moment

        def rank(fname: str, value: str, line: int) -> int | None:
            if not value:
                return None
            found = ranks[fname].get(value.casefold())
            if found is None:
                unranked.setdefault((fname, value), [0, line])[0] += 1
            return found

        def build(row: SourceRow) -> DefectRow:
            values = row.values
            got: dict[str, str] = {}
            for fname in ("key", "title", "description"):
                got[fname] = text(fname, values)
                if fname in REQUIRED_FIELDS and not got[fname]:
                    column = cmap.fields[fname]
                    raise _Problem(
                        column,
                        fname,
                        MISSING_VALUE_MSG.format(field=fname, column=column),
                    )
            created = when("created", values)
            if created is None:
                column = cmap.fields["created"]
                raise _Problem(
                    column,
                    "created",
                    MISSING_VALUE_MSG.format(field="created", column=column),
                )
            resolved = when("resolved", values)
            status = text("status", values)
            if check_status and status.casefold() not in closed | opened:
                raise _Problem(
                    cmap.fields["status"],
                    "status",
                    UNKNOWN_STATUS_MSG.format(value=status, known=known),
                )
            severity, priority = text("severity", values), text("priority", values)
            severity_rank, priority_rank = (
                rank("severity", severity, row.line),
                rank("priority", priority, row.line),
            )
            components, labels = multi("components", values), multi("labels", values)
            rest = {f: text(f, values) for f in ("type", "found_in", "fixed_in", "reporter", "assignee")}
            if resolved is not None and resolved < created:
                raise _Problem(
                    cmap.fields["resolved"],
                    "resolved",
                    RESOLVED_BEFORE_CREATED_MSG.format(
                        resolved=resolved.isoformat(), created=created.isoformat()
                    ),
                )
            if got["key"] in seen:
                raise _Problem(
                    cmap.fields["key"],
                    "key",
                    DUPLICATE_KEY_MSG.format(key=got["key"], first_line=seen[got["key"]]),
                )
            seen[got["key"]] = row.line
            return DefectRow(
                line=row.line,
                key=got["key"],
                title=got["title"],
                description=got["description"],
                created=created,
                resolved=resolved,
                status=status,
                is_closed=status.casefold() in closed if closed else resolved is not None,
                severity=severity,
                severity_rank=severity_rank,
                priority=priority,
                priority_rank=priority_rank,
                components=components,
                labels=labels,
                **rest,
            )

        for row in rows:
            if row.problem:
                yield RowError(line=row.line, column="", field="", reason=row.problem)
                continue
            try:
                yield build(row)
            except _Problem as problem:
                yield RowError(
                    line=row.line,
                    column=problem.column,
                    field=problem.field_name,
                    reason=problem.reason,
                )
        self.row_warnings = [
            UNRANKED_WARNING.format(field=fname, value=value, count=count, line=line)
            for (fname, value), (count, line) in unranked.items()
        ]


def defect_rows(
    path: str | os.PathLike[str],
    column_map: ColumnMap,
    *,
    filename: str | None = None,
    now: datetime | None = None,
) -> DefectExportResult:
    """Check a defect export against a column map and return its rows, lazily.

    Reads the file once now (constant memory) to check the mapped columns and settle each date
    column's format; the rows themselves are produced while the result is iterated.

    Parameters
    ----------
    path : str or path-like
    column_map : ColumnMap
    filename : str, optional
        Name for messages and format detection (see :func:`read_source_rows`).
    now : datetime, optional
        Reference for "in the future" (default: the current UTC time); naive = UTC.

    Returns
    -------
    DefectExportResult

    Raises
    ------
    DefectExportError
        The file is unreadable, a mapped column is missing, or a date column is ambiguous
        (:data:`AMBIGUOUS_DATES_MSG`) or unreadable in every row; the message names file and column.
    """
    now = datetime.now(UTC) if now is None else (now.replace(tzinfo=UTC) if now.tzinfo is None else now)
    info, rows = read_source_rows(path, filename=filename)
    source = info.source
    file_warnings = list(info.warnings)
    mapped = list(column_map.fields.items())
    if info.format == "csv":
        for fname, column in mapped:
            if column not in info.columns:
                close = difflib.get_close_matches(column, info.columns, n=1)
                hint = f" (did you mean {close[0]!r}?)" if close else ""
                raise DefectExportError(
                    MISSING_COLUMN_MSG.format(
                        source=source,
                        column=column,
                        field=fname,
                        hint=hint,
                        found=", ".join(repr(c) for c in info.columns),
                    )
                )
    date_columns = list(dict.fromkeys(column_map.fields[f] for f in DATE_FIELDS if f in column_map.fields))
    resolvers = {c: DateFormatResolver(column=c, filename=source) for c in date_columns}
    absent = {column for _, column in mapped} if info.format != "csv" else set()
    if absent or column_map.date_format is None:
        for row in rows:
            if absent:
                absent = {column for column in absent if _lookup(row.values, column) is _MISSING}
            if column_map.date_format is None:
                for column, resolver in resolvers.items():
                    raw = _lookup(row.values, column)
                    for leaf in [raw] if type(raw) is str else _flat(raw):
                        if leaf is not _MISSING and not isinstance(leaf, (Mapping, bool)):
                            resolver.add(leaf)
    for fname, column in mapped:
        if column in absent:
            raise DefectExportError(MISSING_PATH_MSG.format(source=source, column=column, field=fname))
    date_formats: dict[str, str | None] = {}
    if column_map.date_format is not None:
        date_formats = dict.fromkeys(date_columns, column_map.date_format)
    else:
        pending: list[str] = []
        for column, resolver in resolvers.items():
            try:
                date_formats[column] = resolver.resolve()
            except AmbiguousDatesError:
                pending.append(column)
        for column in pending:
            proven = [(c, f) for c, f in date_formats.items() if f in ("dayfirst", "monthfirst")]
            if not proven:
                resolvers[column].resolve()  # raises the ambiguity error
            other, reading = proven[0]
            date_formats[column] = resolvers[column].resolve(prefer=reading)
            file_warnings.append(SHARED_DAY_MONTH_WARNING.format(column=column, reading=reading, other=other))
    return DefectExportResult(
        path=path,
        info=info,
        column_map=column_map,
        date_formats=date_formats,
        file_warnings=file_warnings,
        now=now,
    )
