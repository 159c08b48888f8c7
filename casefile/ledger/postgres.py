"""The ledger's rules in PostgreSQL's own words: trigger functions that keep entries and blobs append-only
and guard the query tables, the lock that serialises appends, and the SQL that makes a writer role.

A bottom module of the ledger package: it imports only the table definitions.
"""

from __future__ import annotations

import re

from casefile.ledger import tables as t

# One advisory-lock key for every casefile ledger ("casefile" in ASCII, as a signed 64-bit integer); a
# transaction-level lock, so it is released at COMMIT or ROLLBACK, and a killed client releases it too.
HEAD_LOCK_KEY = int.from_bytes(b"casefile", "big")  # below 2**63, so a valid bigint
LOCK_SQL = f"SELECT pg_advisory_xact_lock({HEAD_LOCK_KEY})"

_FUNCTIONS = [
    # raises the message it is given (one function for every refusing trigger)
    """CREATE OR REPLACE FUNCTION casefile_refuse() RETURNS trigger LANGUAGE plpgsql AS $$
    BEGIN RAISE EXCEPTION USING MESSAGE = TG_ARGV[0], ERRCODE = 'P0001'; END $$""",
    # a new entry must extend the head: next seq, prev_hash = hash of the head entry. It takes the head
    # lock itself, so even an INSERT that bypasses casefile queues behind concurrent appends.
    f"""CREATE OR REPLACE FUNCTION casefile_extend_head() RETURNS trigger LANGUAGE plpgsql AS $$
    DECLARE head_seq integer; head_hash varchar;
    BEGIN
      PERFORM pg_advisory_xact_lock({HEAD_LOCK_KEY});
      SELECT seq, hash INTO head_seq, head_hash FROM entries ORDER BY seq DESC LIMIT 1;
      IF NEW.seq <> COALESCE(head_seq, 0) + 1 OR NEW.prev_hash <> COALESCE(head_hash, '{t.GENESIS_HASH}') THEN
        RAISE EXCEPTION 'casefile ledger is append-only: a new entry must extend the head' USING ERRCODE = 'P0001';
      END IF;
      RETURN NEW;
    END $$""",
    # a query-table row may be added only with its entry (the head, in the same transaction)
    """CREATE OR REPLACE FUNCTION casefile_head_only() RETURNS trigger LANGUAGE plpgsql AS $$
    BEGIN
      IF NEW.seq IS DISTINCT FROM (SELECT MAX(seq) FROM entries) THEN
        RAISE EXCEPTION USING MESSAGE = TG_ARGV[0], ERRCODE = 'P0001';
      END IF;
      RETURN NEW;
    END $$""",
]


def _refuse(name: str, when: str, table: str, message: str) -> str:
    level = "STATEMENT" if when == "TRUNCATE" else "ROW"
    return (f"CREATE OR REPLACE TRIGGER {name} BEFORE {when} ON {table} FOR EACH {level} "
            f"EXECUTE FUNCTION casefile_refuse('{message}')")


def _entry_triggers() -> list[str]:
    out = []
    for table, what in (("entries", "entries"), ("blobs", "blobs"), ("schema_versions", "schema versions")):
        out.append(_refuse(f"{table}_no_update", "UPDATE", table,
                           f"casefile ledger is append-only: {what} cannot be changed"))
        for verb, op in (("delete", "DELETE"), ("truncate", "TRUNCATE")):
            out.append(_refuse(f"{table}_no_{verb}", op, table,
                               f"casefile ledger is append-only: {what} cannot be deleted"))
    out.append("CREATE OR REPLACE TRIGGER entries_extend_head BEFORE INSERT ON entries FOR EACH ROW "
               "EXECUTE FUNCTION casefile_extend_head()")
    return out


def derived_guards(table: str) -> list[str]:
    """The PostgreSQL triggers that guard one query table (the same rules as tables.derived_guards)."""
    said = f"casefile query table {table} is derived from the entries"
    hint = "rebuild them with `casefile rebuild --reason TEXT`"
    return [
        _refuse(f"{table}_no_update", "UPDATE", table, f"{said}: rows cannot be changed; {hint}"),
        _refuse(f"{table}_no_delete", "DELETE", table, f"{said}: rows cannot be deleted; {hint}"),
        _refuse(f"{table}_no_truncate", "TRUNCATE", table, f"{said}: rows cannot be deleted; {hint}"),
        f"CREATE OR REPLACE TRIGGER {table}_head_only BEFORE INSERT ON {table} FOR EACH ROW "
        f"EXECUTE FUNCTION casefile_head_only('{said}: a row may be added only with its entry; {hint}')",
    ]


ENTRY_TRIGGERS = _entry_triggers()
DERIVED_TRIGGERS = [ddl for tb in t.DERIVED_TABLES for ddl in derived_guards(tb.name)]
DDL = _FUNCTIONS + ENTRY_TRIGGERS + DERIVED_TRIGGERS


def trigger_names(ddl: list[str]) -> list[tuple[str, str]]:
    """(table, trigger) for each CREATE TRIGGER statement."""
    out = []
    for s in ddl:
        m = re.match(r"CREATE OR REPLACE TRIGGER (\w+) BEFORE \w+ ON (\w+)", s)
        if m:
            out.append((m.group(2), m.group(1)))
    return out


TRIGGERS = trigger_names(ENTRY_TRIGGERS + DERIVED_TRIGGERS)
_IDENT = re.compile(r"^[a-z_][a-z0-9_]{0,62}$")


def writer_role_sql(role: str = "casefile_writer", database: str = "casefile", schema: str = "public") -> str:
    """The SQL an administrator runs, as the ledger's owner, to make a login role that may append to the
    ledger and read it (INSERT and SELECT) but never change or remove a row (no UPDATE, DELETE or
    TRUNCATE), except the work claims of ``explain --workers``, which it may also UPDATE. The default
    privileges carry the same grants to query tables a rebuild re-creates.

    Names are checked (lowercase PostgreSQL identifiers) so the text can be run as it is.
    """
    for what, name in (("role", role), ("database", database), ("schema", schema)):
        if not _IDENT.match(name):
            raise ValueError(f"{what} name {name!r}: use lowercase letters, digits and _ (a plain identifier)")
    everything = ", ".join(tb.name for tb in t.metadata.sorted_tables)
    tables = ", ".join(tb.name for tb in t.metadata.sorted_tables if tb.name != t.claims.name)
    return "\n".join([
        f"-- run as the owner of the ledger's tables (the role that ran `casefile init`), in database {database}",
        f"CREATE ROLE {role} LOGIN;  -- then give it a password: ALTER ROLE {role} PASSWORD '...';",
        f"GRANT CONNECT ON DATABASE {database} TO {role};",
        f"GRANT USAGE ON SCHEMA {schema} TO {role};",
        f"REVOKE ALL ON {everything} FROM {role};",
        f"GRANT SELECT, INSERT ON {tables} TO {role};",
        "-- work claims of `explain --workers` are taken and finished, so they change (they are not history)",
        f"GRANT SELECT, INSERT, UPDATE ON {t.claims.name} TO {role};",
        f"ALTER DEFAULT PRIVILEGES IN SCHEMA {schema} GRANT SELECT, INSERT ON TABLES TO {role};",
        "",
    ])
