"""A raw connection to a ledger's database, as an attacker with write access would use: sqlite3 on a file,
psycopg on a PostgreSQL URL; ``?`` placeholders on both, optionally with every guard trigger dropped."""

from __future__ import annotations

import sqlite3
from typing import Any

import psycopg

from casefile.ledger import postgres as pg
from casefile.ledger import tables as t


def is_postgres(where: str) -> bool:
    return str(where).startswith("postgresql")


class Raw:
    """``execute(sql, params)`` returns a cursor (fetchone, fetchall, iteration) on either engine."""

    def __init__(self, where: str, *, drop_triggers: bool = False) -> None:
        self.postgres = is_postgres(where)
        self.Error: type[Exception] = psycopg.DatabaseError if self.postgres else sqlite3.DatabaseError
        if self.postgres:
            self.con: Any = psycopg.connect(str(where).replace("postgresql+psycopg://", "postgresql://"),
                                            autocommit=True)
        else:
            self.con = sqlite3.connect(where, isolation_level=None)
        if drop_triggers:
            self.drop_triggers()

    def drop_triggers(self) -> None:
        if self.postgres:
            for table, name in pg.TRIGGERS:
                self.con.execute(f"DROP TRIGGER IF EXISTS {name} ON {table}")
            # and no foreign-key checks either (as in a raw sqlite3 connection, where they are off)
            self.con.execute("SET session_replication_role = replica")
        else:
            for name in t.TRIGGER_NAMES:
                self.con.execute(f"DROP TRIGGER IF EXISTS {name}")

    def execute(self, sql: str, params: tuple = ()) -> Any:
        return self.con.execute(sql.replace("?", "%s") if self.postgres else sql, params)

    def triggers(self) -> set[str]:
        """Names of the triggers on the ledger's tables."""
        if self.postgres:
            return {r[0] for r in self.con.execute("SELECT tgname FROM pg_trigger WHERE NOT tgisinternal")}
        return {r[0] for r in self.con.execute("SELECT name FROM sqlite_master WHERE type = 'trigger'")}

    def close(self) -> None:
        self.con.close()
