"""Upgrade a ledger made by an older release to this release's schema version, only ever adding.

What an upgrade may do: create tables this release defines and the ledger lacks, give query tables the
columns they lack (re-deriving them from the entries), and start writing new entry kinds. It never
removes or changes a table, column or row. It is one transaction that ends with an ``upgrade`` entry
(from and to which version, what was added, rows re-derived) and the new version's row in
``schema_versions``: all of it is done and recorded, or none of it.
"""

from __future__ import annotations

from sqlalchemy import inspect
from sqlalchemy.engine import Connection

from casefile.errors import LedgerError
from casefile.ledger import tables as t
from casefile.ledger.engines import recorded_version
from casefile.ledger.store import Entry, Store, utc_now

# Entry kinds each version added (the kinds a version's readers may meet for the first time).
KINDS_ADDED = {2: ["upgrade", "reader", "sign_in_failed", "replay"]}
# Columns that no upgrade can add: without them the entries or blobs are not what this release reads.
_CORE = {"entries": {"seq", "kind", "body", "prev_hash", "hash"}, "blobs": {"digest", "size", "data"}}


def _not_additive(store: Store, conn: Connection, tables: set[str]) -> str | None:
    for name, wanted in _CORE.items():
        lacking = sorted(wanted - store.flavour.columns(conn, name)) if name in tables else sorted(wanted)
        if lacking:
            return (f"table {name} lacks {', '.join(lacking)}, which no upgrade can add (entries and blobs are "
                    "never rewritten)")
    if "schema_versions" in tables and not {"version", "seq"} <= store.flavour.columns(conn, "schema_versions"):
        return "table schema_versions is not the one casefile keeps"
    return None


def upgrade(store: Store) -> Entry | None:
    """Bring ``store`` to this release's schema version and record an ``upgrade`` entry; None when it is
    current already. Refused in one line, with nothing changed, when the difference is not one an
    upgrade can make by adding."""
    if store.schema_version >= t.SCHEMA_VERSION:
        return None

    def work(conn: Connection) -> Entry | None:
        before = recorded_version(conn)
        if before >= t.SCHEMA_VERSION:
            return None  # another process upgraded it meanwhile
        tables = set(inspect(conn).get_table_names())
        problem = _not_additive(store, conn, tables)
        if problem:
            raise LedgerError(f"{store.path}: cannot upgrade from schema version {before} to {t.SCHEMA_VERSION}: "
                              f"{problem}; nothing was changed")
        added = [f"table {tb.name}" for tb in t.metadata.sorted_tables if tb.name not in tables]
        added += [f"column {tb.name}.{c.name}" for tb in t.DERIVED_TABLES if tb.name in tables
                  for c in tb.columns if c.name not in store.flavour.columns(conn, tb.name)]
        added += [f"entry kind {k}" for v in range(before + 1, t.SCHEMA_VERSION + 1) for k in KINDS_ADDED.get(v, [])]
        t.metadata.create_all(conn)
        rows: dict[str, int] = {}
        derived = {tb.name for tb in t.DERIVED_TABLES}
        if any(a.split()[0] in ("table", "column") and a.split()[1].split(".")[0] in derived for a in added):
            _, rows = store.rederive(conn)
        store.flavour.install(conn)
        body = {"upgraded_at": utc_now(), "from_version": before, "to_version": t.SCHEMA_VERSION, "added": added,
                "rows": rows}
        entry = store.append_in(conn, "upgrade", body)
        conn.execute(t.schema_versions.insert().values(version=t.SCHEMA_VERSION, seq=entry.seq))
        return entry

    entry = store.transaction(work, upgrading=True)
    store.schema_version = t.SCHEMA_VERSION
    return entry
