"""What differs between the two database engines a ledger lives on, SQLite and PostgreSQL, behind one face.

The store (store.py) writes the same rows on both; this module knows how each engine is opened, how its
tables and guard triggers are made, how the chain head is locked for an append, and how driver-level SQL
is spelt (SQLite's ``?`` or psycopg's ``%s``).
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from sqlalchemy import create_engine, event, func, inspect, select
from sqlalchemy.engine import Connection, Engine
from sqlalchemy.exc import DBAPIError

from casefile.errors import LedgerError
from casefile.ledger import postgres as pg
from casefile.ledger import tables as t
from casefile.ledger.location import Location, check_ledger_file


class SqliteEngine:
    """A ledger in one SQLite file: WAL, BEGIN IMMEDIATE for writes (one writer at a time)."""

    name = "sqlite"
    blob_insert = "INSERT OR IGNORE INTO blobs (digest, size, data) VALUES (?, ?, ?)"

    def __init__(self, loc: Location, synchronous: str) -> None:
        self.loc, self.synchronous = loc, synchronous

    def check(self, create: bool) -> None:
        check_ledger_file(self.loc.path, create=create)

    def make_engine(self) -> Engine:
        engine = create_engine(self.loc.url, connect_args={"timeout": 60})

        @event.listens_for(engine, "connect")
        def _on_connect(dbapi_conn: Any, _record: Any) -> None:
            dbapi_conn.isolation_level = None  # we issue BEGIN ourselves
            cur = dbapi_conn.cursor()
            cur.execute("PRAGMA journal_mode=WAL")
            cur.execute(f"PRAGMA synchronous={self.synchronous}")
            cur.execute("PRAGMA foreign_keys=ON")
            cur.close()

        @event.listens_for(engine, "begin")
        def _on_begin(conn: Connection) -> None:
            # BEGIN IMMEDIATE takes the write lock up front, so two writers queue instead of racing
            # for the chain head.
            mode = "IMMEDIATE" if conn.get_execution_options().get("write") else "DEFERRED"
            conn.exec_driver_sql(f"BEGIN {mode}")

        return engine

    @staticmethod
    def sql(text: str) -> str:
        return text

    def lock(self, conn: Connection) -> None:
        """Nothing to do: BEGIN IMMEDIATE already holds the one write lock."""

    def create(self, conn: Connection) -> int:
        """Make a new ledger, or put back dropped guards of one at this release's version; return the
        ledger's schema version (an older ledger is left as it is: `casefile init` upgrades it)."""
        return _open_schema(conn, self.install)

    @staticmethod
    def install(conn: Connection) -> None:
        t.metadata.create_all(conn)
        for ddl in t.SQLITE_TRIGGERS:
            conn.exec_driver_sql(ddl)

    @staticmethod
    def columns(conn: Connection, table: str) -> set[str]:
        return {r[1] for r in conn.exec_driver_sql(f"PRAGMA table_info({table})")}

    @staticmethod
    def drop_derived_guards(conn: Connection) -> None:
        for name in t.DERIVED_TRIGGER_NAMES:
            conn.exec_driver_sql(f"DROP TRIGGER IF EXISTS {name}")

    @staticmethod
    def create_derived_guards(conn: Connection) -> None:
        for ddl in t.DERIVED_TRIGGERS:
            conn.exec_driver_sql(ddl)


class PostgresEngine:
    """A ledger in a PostgreSQL database (psycopg): an advisory lock serialises appends at the chain head."""

    name = "postgresql"
    blob_insert = "INSERT INTO blobs (digest, size, data) VALUES (%s, %s, %s) ON CONFLICT (digest) DO NOTHING"

    def __init__(self, loc: Location, synchronous: str) -> None:
        self.loc = loc  # synchronous is SQLite's setting; PostgreSQL's durability is the server's own

    def make_engine(self) -> Engine:
        return create_engine(self.loc.url, pool_pre_ping=True)

    def check(self, create: bool) -> None:
        """Refuse, before anything is written, a server that cannot be reached, a database without a
        ledger (unless ``create``) and a database that holds another program's tables."""
        engine = self.make_engine()
        try:
            with engine.connect() as conn:
                tables = set(inspect(conn).get_table_names())
                columns = self.columns(conn, "entries") if "entries" in tables else set()
        except DBAPIError as exc:
            first = str(exc.orig).strip().splitlines()[0] if exc.orig is not None else str(exc)
            raise LedgerError(f"{self.loc.path}: cannot open ledger: {first}") from None
        finally:
            engine.dispose()
        if not tables:
            if not create:
                raise LedgerError(f"{self.loc.path}: no ledger here (an empty database; run `casefile init` first)")
            return
        if not {"seq", "kind", "body", "prev_hash", "hash"} <= columns:
            shown = ", ".join(sorted(tables)[:5]) + (" …" if len(tables) > 5 else "")
            raise LedgerError(f"{self.loc.path}: a database but not a casefile ledger (it holds {shown}); "
                              "nothing was changed")

    @staticmethod
    def sql(text: str) -> str:
        return text.replace("?", "%s")

    @staticmethod
    def lock(conn: Connection) -> None:
        """Take the chain-head lock for the rest of this transaction (released at commit or rollback)."""
        conn.exec_driver_sql(pg.LOCK_SQL)

    def create(self, conn: Connection) -> int:
        """As SqliteEngine.create. A ledger that is complete needs no DDL, so a writer role (INSERT and
        SELECT only) can open it; the lock keeps several first openers from racing."""
        self.lock(conn)
        return _open_schema(conn, self.install)

    @staticmethod
    def install(conn: Connection) -> None:
        have_tables = set(inspect(conn).get_table_names())
        have = {(r[0], r[1]) for r in conn.exec_driver_sql(
            "SELECT c.relname, tg.tgname FROM pg_trigger tg JOIN pg_class c ON c.oid = tg.tgrelid "
            "WHERE NOT tg.tgisinternal AND c.relnamespace = current_schema()::regnamespace")}
        if {tb.name for tb in t.metadata.sorted_tables} <= have_tables and set(pg.TRIGGERS) <= have:
            return
        t.metadata.create_all(conn)
        for ddl in pg.DDL:
            conn.exec_driver_sql(ddl)

    @staticmethod
    def columns(conn: Connection, table: str) -> set[str]:
        return {r[0] for r in conn.exec_driver_sql(
            "SELECT column_name FROM information_schema.columns WHERE table_schema = current_schema() "
            "AND table_name = %s", (table,))}

    @staticmethod
    def drop_derived_guards(conn: Connection) -> None:
        """Nothing to do: dropping a query table drops its triggers with it."""

    @staticmethod
    def create_derived_guards(conn: Connection) -> None:
        for ddl in pg.DERIVED_TRIGGERS:
            conn.exec_driver_sql(ddl)


Flavour = SqliteEngine | PostgresEngine


def recorded_version(conn: Connection) -> int:
    """The schema version a ledger records; 1 for a ledger made before versions were recorded."""
    if not inspect(conn).has_table("schema_versions"):
        return 1
    return int(conn.execute(select(func.max(t.schema_versions.c.version))).scalar() or 1)


def _open_schema(conn: Connection, install: Callable[[Connection], None]) -> int:
    if not inspect(conn).has_table("entries"):  # a new ledger, made at this release's version
        install(conn)
        conn.execute(t.schema_versions.insert().values(version=t.SCHEMA_VERSION, seq=0))
        return t.SCHEMA_VERSION
    version = recorded_version(conn)
    if version == t.SCHEMA_VERSION:
        install(conn)  # puts back a dropped guard (or query table) of this version
    return version


def flavour(loc: Location, synchronous: str) -> Flavour:
    return PostgresEngine(loc, synchronous) if loc.engine == "postgresql" else SqliteEngine(loc, synchronous)
