"""Fast bulk insert behind one function: PostgreSQL COPY, or executemany elsewhere."""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from typing import Any

from django.db import connection


def rows_bulk_insert(*, table: str, columns: Sequence[str], rows: Iterable[Sequence[Any]]) -> int:
    """Insert ``rows`` into ``table``; returns the number of rows written.

    On PostgreSQL this streams the rows through ``COPY ... FROM STDIN`` (the database's own bulk-load path);
    on SQLite it uses one prepared ``executemany``. Must run inside the caller's transaction.
    """
    cols = ", ".join(connection.ops.quote_name(c) for c in columns)
    count = 0
    with connection.cursor() as cursor:
        if connection.vendor == "postgresql":
            raw = cursor.cursor  # psycopg 3 cursor
            with raw.copy(f"COPY {connection.ops.quote_name(table)} ({cols}) FROM STDIN") as copy:
                for row in rows:
                    copy.write_row(row)
                    count += 1
        else:
            placeholders = ", ".join(["%s"] * len(columns))
            batch = list(rows)
            cursor.executemany(f"INSERT INTO {connection.ops.quote_name(table)} ({cols}) VALUES ({placeholders})", batch)
            count = len(batch)
    return count
