"""Bulk rows through the driver store exactly what the ORM stores, on both engines."""

from __future__ import annotations

import sqlite3
from datetime import datetime, timedelta, timezone

import pytest
from sqlmodel import select

from registry.storage.bulk import IN_BLOCK, insert_rows, select_in
from registry.storage.engine import SQLITE_PAGE_SIZE, make_engine, session_scope, upgrade
from registry.storage.models import Site

LISBON_SUMMER = timezone(timedelta(hours=1))


def test_bulk_insert_stores_what_the_orm_stores(any_url):
    """Datetimes go through the column's own conversion (aware → UTC; on SQLite the
    fixed-width text the ORM writes, so text order is time order)."""
    engine = make_engine(any_url)
    when = datetime(2027, 6, 1, 9, 30, 0, tzinfo=LISBON_SUMMER)  # 08:30 UTC, no microseconds
    try:
        with session_scope(engine) as s:
            s.add(Site(name="By ORM", timezone="UTC", created_at=when))
            s.flush()
            insert_rows(s, Site.__table__, ["name", "timezone", "created_at"],
                        [("By bulk", "UTC", when), ("Bulk 2", "UTC", when + timedelta(microseconds=5))])
        with session_scope(engine) as s:
            got = {site.name: site.created_at for site in s.exec(select(Site)).all()}
            assert got["By ORM"] == got["By bulk"] == when
            assert got["By bulk"].tzinfo is not None
            assert got["Bulk 2"] - got["By bulk"] == timedelta(microseconds=5)
            raw = {name: at for name, at in
                   s.connection().exec_driver_sql("SELECT name, created_at FROM site")}
            assert raw["By ORM"] == raw["By bulk"]
            if any_url.startswith("sqlite"):
                assert raw["By bulk"] == "2027-06-01 08:30:00.000000"
    finally:
        engine.dispose()


def test_select_in_spans_blocks_and_filters(any_url):
    engine = make_engine(any_url)
    names = [f"site-{k:04d}" for k in range(IN_BLOCK + 50)]
    try:
        with session_scope(engine) as s:
            insert_rows(s, Site.__table__, ["name", "timezone", "created_at"],
                        [(n, "UTC" if k % 2 else "Europe/Lisbon", datetime.now(timezone.utc))
                         for k, n in enumerate(names)])
        with session_scope(engine) as s:
            rows = select_in(s, Site.__table__, ["name", "timezone"], "name", names + ["absent"])
            assert sorted(r[0] for r in rows) == names  # both blocks, nothing invented
            odd = select_in(s, Site.__table__, ["name"], "name", names, where={"timezone": "UTC"})
            assert sorted(r[0] for r in odd) == names[1::2]
            assert select_in(s, Site.__table__, ["name"], "name", []) == []
    finally:
        engine.dispose()


def test_bulk_insert_is_part_of_the_callers_transaction(sqlite_url):
    engine = make_engine(sqlite_url)
    try:
        with pytest.raises(RuntimeError):
            with session_scope(engine) as s:
                insert_rows(s, Site.__table__, ["name", "timezone", "created_at"],
                            [("Rolled back", "UTC", datetime.now(timezone.utc))])
                raise RuntimeError("the user action fails after the insert")
        with session_scope(engine) as s:
            assert s.exec(select(Site).where(Site.name == "Rolled back")).first() is None
    finally:
        engine.dispose()


def test_new_sqlite_files_get_the_large_page_size_and_old_ones_keep_theirs(tmp_path):
    new = tmp_path / "new.db"
    upgrade(f"sqlite:///{new}")
    with sqlite3.connect(new) as con:
        assert con.execute("PRAGMA page_size").fetchone()[0] == SQLITE_PAGE_SIZE
    old = tmp_path / "old.db"
    with sqlite3.connect(old) as con:  # an existing file made elsewhere, default pages
        con.execute("CREATE TABLE keep (x INTEGER)")
        before = con.execute("PRAGMA page_size").fetchone()[0]
    assert before != SQLITE_PAGE_SIZE
    engine = make_engine(f"sqlite:///{old}")
    try:
        with engine.connect() as conn:
            assert conn.exec_driver_sql("PRAGMA page_size").scalar() == before
            assert conn.exec_driver_sql("PRAGMA journal_mode").scalar() == "wal"
    finally:
        engine.dispose()


def test_left_out_columns_get_the_model_default_and_required_ones_are_refused(sqlite_url):
    engine = make_engine(sqlite_url)
    try:
        with session_scope(engine) as s:
            insert_rows(s, Site.__table__, ["name", "created_at"],
                        [("Default zone", datetime.now(timezone.utc))])
            assert s.exec(select(Site).where(Site.name == "Default zone")).one().timezone == "UTC"
            with pytest.raises(ValueError, match="no value for name"):
                insert_rows(s, Site.__table__, ["created_at"], [(datetime.now(timezone.utc),)])
            with pytest.raises(ValueError, match="created_at has a computed default"):
                insert_rows(s, Site.__table__, ["name"], [("No time",)])
    finally:
        engine.dispose()
