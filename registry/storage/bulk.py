"""Many rows at once: executemany and keyed lookups with little work per row.

SQLAlchemy Core's executemany builds one parameter dict per row and runs every
value through its type; for 10,000 spectra that cost more than SQLite spent
storing them. Here each column's own bind processor (the same conversion the
ORM would apply, e.g. UTC datetimes to SQLite text) runs once per distinct
value, and ``exec_driver_sql`` hands plain tuples to the driver, still inside
the session's transaction and with SQLAlchemy's error wrapping.
The SQL is the same on SQLite and PostgreSQL but for the parameter marker.
"""

from __future__ import annotations

from typing import Iterable, Iterator, Sequence

from sqlalchemy import Table
from sqlmodel import Session

#: Keys per ``IN (...)`` list: below SQLite's bound-parameter limit with room for others.
IN_BLOCK = 900


def in_blocks(values: Sequence) -> Iterator[list]:
    """``values`` in consecutive blocks of at most :data:`IN_BLOCK` (one ``IN (...)`` list each)."""
    values = list(values)
    for start in range(0, len(values), IN_BLOCK):
        yield values[start:start + IN_BLOCK]


def _marker(session: Session) -> str:
    return "?" if session.connection().dialect.paramstyle == "qmark" else "%s"


def _converted(values: list, processor) -> list:
    """``values`` through ``processor``, computed once per distinct value (timestamps of
    one import repeat; payloads do not and are converted one by one)."""
    if processor is None:
        return values
    if values and isinstance(values[0], (bytes, bytearray, memoryview)):
        return [processor(value) for value in values]
    memo: dict = {}
    out = []
    for value in values:
        try:
            out.append(memo[value])
        except KeyError:
            memo[value] = converted = processor(value)
            out.append(converted)
        except TypeError:  # unhashable (bytearray, memoryview): convert each
            out.append(processor(value))
    return out


def insert_rows(session: Session, table: Table, columns: Sequence[str],
                rows: Sequence[Sequence]) -> None:
    """``INSERT`` tuples of ``columns`` values in one executemany (no ids returned)."""
    if not rows:
        return
    session.flush()  # ORM objects this batch may refer to must exist first
    dialect = session.connection().dialect
    by_column = [list(col) for col in zip(*rows)]
    columns = list(columns)
    # Columns left out get their model default, as the ORM would give them (a column added
    # to a table later must not arrive NULL through this path).
    for column in table.columns:
        if column.name in columns or column.primary_key:
            continue
        if column.default is None:
            if not column.nullable and column.server_default is None:
                raise ValueError(f"insert_rows into {table.name}: no value for {column.name}")
            continue
        if not column.default.is_scalar:
            raise ValueError(f"insert_rows into {table.name}: {column.name} has a computed "
                             "default; pass its value")
        columns.append(column.name)
        by_column.append([column.default.arg] * len(rows))
    for k, name in enumerate(columns):
        # dialect_impl: the type as this dialect stores it (SQLite: datetimes as fixed text)
        column_type = table.c[name].type.dialect_impl(dialect)
        by_column[k] = _converted(by_column[k], column_type.bind_processor(dialect))
    mark = _marker(session)
    sql = (f"INSERT INTO {table.name} ({', '.join(columns)}) "
           f"VALUES ({', '.join([mark] * len(columns))})")
    session.connection().exec_driver_sql(sql, list(zip(*by_column)))


def select_in(session: Session, table: Table, columns: Sequence[str], key: str,
              values: Iterable, *, where: dict | None = None) -> list[tuple]:
    """Rows (tuples of ``columns``, raw driver values) whose ``key`` is in ``values``,
    optionally also matching ``where`` (column = value); in blocks of :data:`IN_BLOCK`."""
    values = list(values)
    mark = _marker(session)
    where = where or {}
    extra = "".join(f" AND {name} = {mark}" for name in where)
    conn = session.connection()
    out: list[tuple] = []
    for part in in_blocks(values):
        sql = (f"SELECT {', '.join(columns)} FROM {table.name} "
               f"WHERE {key} IN ({', '.join([mark] * len(part))}){extra}")
        out += [tuple(row) for row in conn.exec_driver_sql(sql, (*part, *where.values()))]
    return out
