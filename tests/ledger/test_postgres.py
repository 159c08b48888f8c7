"""The ledger on a real PostgreSQL server: the URL forms, four writers at once, and the writer role.

Outside sources: PostgreSQL's documentation — "Explicit Locking", Advisory Locks (a transaction-level
advisory lock is held until commit or rollback, so appends queue at the chain head), "Privileges" (a
role without UPDATE, DELETE or TRUNCATE on a table is refused them with SQLSTATE 42501,
insufficient_privilege) and "CREATE TRIGGER" (BEFORE … FOR EACH STATEMENT triggers on TRUNCATE).
SQLAlchemy's URL syntax for the psycopg driver (``postgresql+psycopg://``). The gap-free chain is
casefile's own rule (DESIGN.md, "The ledger").
"""

from __future__ import annotations

import subprocess
import sys

import psycopg
import pytest

from casefile.errors import LedgerError
from casefile.ledger import Ledger
from casefile.ledger.postgres import writer_role_sql
from tests.ledger.bodies import amendment_body, case_body
from tests.ledger.rawdb import Raw
from tests.ledger.test_concurrency import ROOT


@pytest.mark.parametrize("url", ["postgresql://host/db", "postgres://host/db", "postgresql+psycopg2://host/db"])
def test_a_postgresql_url_must_name_the_psycopg_driver(url):
    with pytest.raises(LedgerError, match=r"postgresql\+psycopg://USER"):
        Ledger(url)


def test_a_url_without_a_database_and_an_unreachable_server_are_refused(pg_cluster):
    with pytest.raises(LedgerError, match="names no database"):
        Ledger(f"postgresql+psycopg://u@127.0.0.1:{pg_cluster.port}")
    closed = pg_cluster.url(pg_cluster.new_database()).replace(f":{pg_cluster.port}/", ":1/")
    with pytest.raises(LedgerError, match="cannot open ledger") as info:
        Ledger(closed)
    assert "\n" not in str(info.value)


def test_another_programs_database_is_refused_and_left_alone(pg_cluster):
    name = pg_cluster.new_database()
    pg_cluster.sql("CREATE TABLE invoices (id integer)", name)
    with pytest.raises(LedgerError, match="not a casefile ledger"):
        Ledger(pg_cluster.url(name))
    with pytest.raises(LedgerError, match="no ledger here"):
        Ledger(pg_cluster.url(pg_cluster.new_database()), create=False)
    con = Raw(pg_cluster.url(name))
    assert {r[0] for r in con.execute("SELECT tablename FROM pg_tables WHERE schemaname = 'public'")} == {"invoices"}
    con.close()


def test_truncate_is_refused_by_the_triggers(pg_url):
    with Ledger(pg_url) as led:
        led.append("case", case_body(1, blob=b"picture"), blobs=[b"picture"])
    con = Raw(pg_url)
    for table in ("entries", "blobs", "cases"):
        with pytest.raises(con.Error, match="cannot be deleted"):
            con.execute(f"TRUNCATE {table} CASCADE")
    con.close()
    with Ledger(pg_url) as led:
        assert led.count() == 1 and led.verify().ok


def test_four_processes_append_2500_each(pg_url):
    Ledger(pg_url).close()
    procs = [subprocess.Popen([sys.executable, "-m", "tests.ledger.appender", pg_url, "2500", tag, "1"], cwd=ROOT,
                              stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True) for tag in "ABCD"]
    for p in procs:
        _, err = p.communicate(timeout=600)
        assert p.returncode == 0, err
    with Ledger(pg_url) as led:
        assert [e.seq for e in led.entries()] == list(range(1, 10_001))  # gap-free, in order
        reasons = [e.body["reason"] for e in led.entries()]
        for tag in "ABCD":
            mine = [int(r.split()[1]) for r in reasons if r.startswith(tag + " ")]
            assert mine == list(range(2500))  # every append of each writer, in its own order
        report = led.verify()
        assert report.ok and report.entries == 10_000  # one linear chain


def test_the_writer_role_appends_and_reads_but_cannot_change_or_remove(pg_cluster):
    name = pg_cluster.new_database()
    owner_url = pg_cluster.url(name)
    with Ledger(owner_url) as led:
        led.append("case", case_body(1, blob=b"picture"), blobs=[b"picture"])
    sql = writer_role_sql("writer_" + name[2:], name)
    pg_cluster.sql(sql, name)
    writer_url = pg_cluster.url(name, user="writer_" + name[2:])
    with Ledger(writer_url) as led:  # opens a complete ledger without DDL
        e = led.append("amendment", amendment_body(1, led.get(1).hash))
        assert e.seq == 2 and led.verify().ok
    con = Raw(writer_url)
    for statement in ("UPDATE entries SET kind = 'seal'", "DELETE FROM entries", "DELETE FROM blobs",
                      "UPDATE blobs SET size = 0", "TRUNCATE entries CASCADE", "UPDATE cases SET label = 'x'",
                      "DROP TRIGGER entries_no_update ON entries", "DROP TABLE seals"):
        with pytest.raises(psycopg.Error) as info:
            con.execute(statement)
        assert info.value.sqlstate == "42501", (statement, info.value)  # insufficient_privilege
    con.close()
    with Ledger(owner_url) as led:  # the owner rebuilds; the default privileges reach the new tables
        led.rebuild_derived("query tables re-created by the owner")
    with Ledger(writer_url) as led:
        assert led.append("case", case_body(2)).seq == 4 and led.verify().ok


def test_writer_role_sql_grants_only_insert_and_select():
    sql = writer_role_sql("ledger_writer", "casefile")
    grants = [line for line in sql.splitlines() if line.startswith(("GRANT", "ALTER DEFAULT"))]
    on = next(g for g in grants if g.startswith("GRANT SELECT, INSERT ON ")).split(" ON ", 1)[1].split(" TO ")[0]
    assert {"entries", "blobs", "cases"} <= set(on.split(", "))
    history = [g for g in grants if " ON claims " not in g]  # claims are work in progress, not history
    assert not any(word in g for g in history for word in ("UPDATE", "DELETE", "TRUNCATE", " ALL "))
    assert "GRANT SELECT, INSERT, UPDATE ON claims TO ledger_writer;" in grants
    with pytest.raises(ValueError, match="plain identifier"):
        writer_role_sql("writer; DROP TABLE entries")
