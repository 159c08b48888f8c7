"""The ledger's tables and the database triggers that make entries and blobs append-only and guard query tables."""

from __future__ import annotations

from sqlalchemy import Column, Float, ForeignKey, Index, Integer, LargeBinary, MetaData, String, Table, Text

metadata = MetaData()

GENESIS_HASH = "0" * 64

entries = Table(
    "entries",
    metadata,
    Column("seq", Integer, primary_key=True, autoincrement=False),
    Column("kind", String(32), nullable=False),
    Column("body", Text, nullable=False),
    Column("prev_hash", String(64), nullable=False),
    Column("hash", String(64), nullable=False, unique=True),
)

blobs = Table(
    "blobs",
    metadata,
    Column("digest", String(64), primary_key=True),
    Column("size", Integer, nullable=False),
    Column("data", LargeBinary, nullable=False),
)

# Which blobs an entry brought with it (derived: rebuilt from appends, checked by verify).
entry_blobs = Table(
    "entry_blobs",
    metadata,
    Column("seq", Integer, ForeignKey("entries.seq"), nullable=False),
    Column("digest", String(64), nullable=False),
    Index("ix_entry_blobs_seq", "seq"),
)

# ---- derived query tables: one row per producing entry, keyed by that entry's seq ----
cases = Table(
    "cases",
    metadata,
    Column("seq", Integer, primary_key=True, autoincrement=False),
    Column("case_id", String(64), nullable=False, unique=True),
    Column("recorded_at", String(32), nullable=False),
    Column("model_name", Text, nullable=False),
    Column("model_version", Text, nullable=False),
    Column("model_digest", String(64), nullable=False),
    Column("label", Text, nullable=False),
    Column("confidence", Float),
    Column("status", String(16), nullable=False),
    Column("file_name", Text, nullable=False),
    Column("file_sha256", String(64), nullable=False),
    Column("run_key", String(64), nullable=False, unique=True),
    # 1 when the case was sent to a person by a flag (casefile.flags); older records: the default rule
    Column("flagged", Integer, nullable=False),
    Index("ix_cases_model", "model_name", "model_version"),
    Index("ix_cases_label", "label"),
    Index("ix_cases_status", "status"),
    Index("ix_cases_recorded_at", "recorded_at"),
)

# One row per check of each case: what `audit --check NAME=OUTCOME` and the audit columns read.
case_checks = Table(
    "case_checks",
    metadata,
    Column("seq", Integer, ForeignKey("entries.seq"), nullable=False),
    Column("case_id", String(64), nullable=False),
    Column("name", String(64), nullable=False),
    Column("outcome", String(16), nullable=False),
    Column("flags", Integer, nullable=False),
    Index("ix_case_checks_seq", "seq"),
    Index("ix_case_checks_outcome", "name", "outcome"),
)

failures = Table(
    "failures",
    metadata,
    Column("seq", Integer, primary_key=True, autoincrement=False),
    Column("attempted_at", String(32), nullable=False),
    Column("file_name", Text, nullable=False),
    Column("file_sha256", String(64)),
    Column("reason", Text, nullable=False),
)

amendments = Table(
    "amendments",
    metadata,
    Column("seq", Integer, primary_key=True, autoincrement=False),
    Column("amends_seq", Integer, nullable=False),
    Column("case_id", String(64)),
    Index("ix_amendments_amends", "amends_seq"),
)

reviews = Table(
    "reviews",
    metadata,
    Column("seq", Integer, primary_key=True, autoincrement=False),
    Column("case_id", String(64), nullable=False),
    Column("reader", Text, nullable=False),
    Column("verdict", String(16), nullable=False),
    Column("label", Text),
    Column("amends_seq", Integer),
    Column("draw_id", String(64)),
    Index("ix_reviews_case", "case_id"),
)

# A third reader's decision on a case where readers disagree with each other.
adjudications = Table(
    "adjudications",
    metadata,
    Column("seq", Integer, primary_key=True, autoincrement=False),
    Column("case_id", String(64), nullable=False),
    Column("adjudicator", Text, nullable=False),
    Column("label", Text, nullable=False),
    Column("draw_id", String(64)),
    Index("ix_adjudications_case", "case_id"),
)

draws = Table(
    "draws",
    metadata,
    Column("seq", Integer, primary_key=True, autoincrement=False),
    Column("draw_id", String(64), nullable=False, unique=True),
    Column("plan", String(16), nullable=False),
    Column("population_size", Integer, nullable=False),
    Column("sample_size", Integer, nullable=False),
)

seals = Table(
    "seals",
    metadata,
    Column("seq", Integer, primary_key=True, autoincrement=False),
    Column("tree_size", Integer, nullable=False),
    Column("merkle_root", String(64), nullable=False),
    Column("signed", Integer, nullable=False),
)

# The ledger's schema version: one row when a ledger is made (seq 0) and one per upgrade (the seq of the
# `upgrade` entry that records it). A ledger without this table was made before versions were recorded:
# version 1. Upgrades only ever add (tables, columns, entry kinds); see casefile.ledger.upgrade.
SCHEMA_VERSION = 2
schema_versions = Table(
    "schema_versions",
    metadata,
    Column("version", Integer, primary_key=True, autoincrement=False),
    Column("seq", Integer, nullable=False),
)

# Work claims of `casefile explain --workers`: which worker is explaining which input of a shared
# listing. Not history (rows are taken, renewed and finished, so they change); not hashed, copied or
# verified, and the one table a writer role may UPDATE.
claims = Table(
    "claims",
    metadata,
    Column("claim_key", String(64), primary_key=True),
    Column("position", Integer, nullable=False),
    Column("input", Text, nullable=False),
    Column("worker", String(128)),
    Column("claimed_at", Float),
    Column("done", Integer, nullable=False),
    Index("ix_claims_open", "done", "position"),
)

# A recorded case computed again (casefile replay): whether it reproduced; the latest per case is shown.
replays = Table(
    "replays",
    metadata,
    Column("seq", Integer, primary_key=True, autoincrement=False),
    Column("case_id", String(64), nullable=False),
    Column("case_seq", Integer, nullable=False),
    Column("reproduces", Integer, nullable=False),
    Index("ix_replays_case", "case_id"),
)

DERIVED_TABLES = (entry_blobs, cases, case_checks, failures, amendments, reviews, adjudications, draws, seals,
                  replays)

# Append-only, enforced by SQLite itself: an UPDATE or DELETE on entries or blobs aborts, and an
# INSERT must extend the chain at its head (next seq, prev_hash = hash of the head entry).
ENTRY_TRIGGERS = [
    """CREATE TRIGGER IF NOT EXISTS entries_no_update BEFORE UPDATE ON entries
       BEGIN SELECT RAISE(ABORT, 'casefile ledger is append-only: entries cannot be changed'); END""",
    """CREATE TRIGGER IF NOT EXISTS entries_no_delete BEFORE DELETE ON entries
       BEGIN SELECT RAISE(ABORT, 'casefile ledger is append-only: entries cannot be deleted'); END""",
    """CREATE TRIGGER IF NOT EXISTS blobs_no_update BEFORE UPDATE ON blobs
       BEGIN SELECT RAISE(ABORT, 'casefile ledger is append-only: blobs cannot be changed'); END""",
    """CREATE TRIGGER IF NOT EXISTS blobs_no_delete BEFORE DELETE ON blobs
       BEGIN SELECT RAISE(ABORT, 'casefile ledger is append-only: blobs cannot be deleted'); END""",
    """CREATE TRIGGER IF NOT EXISTS schema_versions_no_update BEFORE UPDATE ON schema_versions
       BEGIN SELECT RAISE(ABORT, 'casefile ledger is append-only: schema versions cannot be changed'); END""",
    """CREATE TRIGGER IF NOT EXISTS schema_versions_no_delete BEFORE DELETE ON schema_versions
       BEGIN SELECT RAISE(ABORT, 'casefile ledger is append-only: schema versions cannot be deleted'); END""",
    f"""CREATE TRIGGER IF NOT EXISTS entries_extend_head BEFORE INSERT ON entries
       WHEN NEW.seq != COALESCE((SELECT MAX(seq) FROM entries), 0) + 1
         OR NEW.prev_hash != COALESCE((SELECT hash FROM entries ORDER BY seq DESC LIMIT 1), '{GENESIS_HASH}')
       BEGIN SELECT RAISE(ABORT, 'casefile ledger is append-only: a new entry must extend the head'); END""",
]


def derived_guards(table: str) -> list[str]:
    """The triggers that guard one query table: no UPDATE, no DELETE, and an INSERT only for the head entry
    (append writes an entry and then its rows, in one transaction). The rebuild path drops and re-creates
    them inside its own transaction; nothing else writes these tables.

    On PostgreSQL the same three rules are a BEFORE UPDATE OR DELETE trigger and a BEFORE INSERT trigger
    calling a PL/pgSQL function that raises; DDL is transactional there too, so rebuild works the same way.
    """
    said = f"casefile query table {table} is derived from the entries"
    hint = "rebuild them with `casefile rebuild --reason TEXT`"
    return [
        f"CREATE TRIGGER IF NOT EXISTS {table}_no_update BEFORE UPDATE ON {table} "
        f"BEGIN SELECT RAISE(ABORT, '{said}: rows cannot be changed; {hint}'); END",
        f"CREATE TRIGGER IF NOT EXISTS {table}_no_delete BEFORE DELETE ON {table} "
        f"BEGIN SELECT RAISE(ABORT, '{said}: rows cannot be deleted; {hint}'); END",
        f"CREATE TRIGGER IF NOT EXISTS {table}_head_only BEFORE INSERT ON {table} "
        "WHEN NEW.seq != COALESCE((SELECT MAX(seq) FROM entries), 0) "
        f"BEGIN SELECT RAISE(ABORT, '{said}: a row may be added only with its entry; {hint}'); END",
    ]


# Every derived table is guarded, including tables added to DERIVED_TABLES later.
DERIVED_TRIGGERS = [ddl for tb in DERIVED_TABLES for ddl in derived_guards(tb.name)]
SQLITE_TRIGGERS = ENTRY_TRIGGERS + DERIVED_TRIGGERS


def trigger_name(ddl: str) -> str:
    return ddl.split("IF NOT EXISTS", 1)[1].split()[0]


TRIGGER_NAMES = [trigger_name(ddl) for ddl in SQLITE_TRIGGERS]
DERIVED_TRIGGER_NAMES = [trigger_name(ddl) for ddl in DERIVED_TRIGGERS]
