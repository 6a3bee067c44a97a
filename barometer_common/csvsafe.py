"""CSV output that spreadsheet programs cannot run as formulas (CSV injection).

Every CSV file Barometer writes goes through :func:`write_safe_csv`.

Following the OWASP "CSV Injection" guidance, a text cell that begins with ``=``, ``+``, ``-``, ``@``,
a tab or a carriage return gets a single quote in front, so a spreadsheet shows it as text instead of
evaluating it; every cell is wrapped in double quotes and embedded double quotes are doubled.

Numbers are the one exception, by choice: an ``int``, ``float``, ``Decimal`` or ``Fraction`` that Barometer
computed itself (a count, a forecast, a negative trend) is written as it is, so ``-3`` stays a number in
the spreadsheet. A *string* such as ``"-3"`` comes from outside (an uploaded export, a test name) and is
prefixed like any other text, as OWASP recommends. ``bool`` is treated as text (``True``/``False``).

References
----------
OWASP Foundation, "CSV Injection", https://owasp.org/www-community/attacks/CSV_Injection
"""

from __future__ import annotations

import csv
import numbers
from collections.abc import Iterable
from typing import IO, Any

__all__ = ["FORMULA_PREFIXES", "neutralise_cell", "write_safe_csv"]

FORMULA_PREFIXES: tuple[str, ...] = ("=", "+", "-", "@", "\t", "\r")


def neutralise_cell(value: Any) -> str:
    """Return *value* as CSV cell text that a spreadsheet will not evaluate.

    Parameters
    ----------
    value : object
        ``None`` becomes ``""``; numbers (not ``bool``) become ``str(value)`` unchanged; anything else
        becomes ``str(value)``, with a ``'`` in front when it starts with one of :data:`FORMULA_PREFIXES`.

    Examples
    --------
    >>> neutralise_cell("=1+2")
    "'=1+2"
    >>> neutralise_cell(-3)
    '-3'
    >>> neutralise_cell("-3")
    "'-3"
    """
    if value is None:
        return ""
    if isinstance(value, numbers.Number) and not isinstance(value, bool):
        return str(value)
    text = str(value)
    if text.startswith(FORMULA_PREFIXES):
        return "'" + text
    return text


def write_safe_csv(fileobj: IO[str], header: Iterable[Any], rows: Iterable[Iterable[Any]]) -> int:
    """Write *header* and *rows* as CSV with every cell passed through :func:`neutralise_cell`.

    Parameters
    ----------
    fileobj : text file
        Opened with ``newline=""`` (as the :mod:`csv` module requires) or an ``io.StringIO``.
    header : iterable
        Column names (neutralised too: they may come from uploaded data).
    rows : iterable of iterables
        Streamed: rows are written one at a time.

    Returns
    -------
    int
        Number of data rows written (header excluded).
    """
    writer = csv.writer(fileobj, quoting=csv.QUOTE_ALL, lineterminator="\r\n")
    writer.writerow([neutralise_cell(cell) for cell in header])
    count = 0
    for row in rows:
        writer.writerow([neutralise_cell(cell) for cell in row])
        count += 1
    return count
