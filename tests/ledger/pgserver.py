"""A throwaway PostgreSQL cluster for the tests: initdb in a temporary folder, a free loopback port, removed after.

Debian's ``postgresql`` package puts its programs in /usr/lib/postgresql/VERSION/bin (not on PATH). initdb
refuses to run as root, so under root the cluster belongs to the unprivileged user ``nobody`` and its
programs run through ``runuser``.
"""

from __future__ import annotations

import glob
import os
import shutil
import socket
import subprocess
import tempfile
import time
import uuid
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

SUPERUSER = "casefile_admin"


def find_bin() -> Path | None:
    """The newest installed PostgreSQL's bin folder, or None when no initdb is installed."""
    found = sorted(glob.glob("/usr/lib/postgresql/*/bin/initdb"), key=lambda p: int(Path(p).parts[-3]))
    if found:
        return Path(found[-1]).parent
    on_path = shutil.which("initdb")
    return Path(on_path).parent if on_path else None


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class Cluster:
    """A running cluster: ``url(db)`` for SQLAlchemy, ``new_database()`` for a fresh empty one."""

    def __init__(self, bindir: Path, folder: Path, port: int, as_user: list[str]) -> None:
        self.bindir, self.folder, self.port, self.as_user = bindir, folder, port, as_user

    def url(self, database: str = "postgres", user: str = SUPERUSER) -> str:
        return f"postgresql+psycopg://{user}@127.0.0.1:{self.port}/{database}"

    def sql(self, statement: str, database: str = "postgres") -> None:
        import psycopg

        with psycopg.connect(host="127.0.0.1", port=self.port, user=SUPERUSER, dbname=database,
                             autocommit=True) as conn:
            conn.execute(statement)

    def new_database(self) -> str:
        name = "t_" + uuid.uuid4().hex[:12]
        self.sql(f"CREATE DATABASE {name}")
        return name

    def run(self, *args: str) -> subprocess.CompletedProcess:
        return subprocess.run([*self.as_user, *args], capture_output=True, text=True, timeout=120)


@contextmanager
def cluster(*, durable: bool = False) -> Iterator[Cluster]:
    """Create, start, yield, then stop and remove a cluster (raises RuntimeError when it will not start).
    ``durable``: keep PostgreSQL's own fsync on every commit (benchmarks); off by default (tests)."""
    bindir = find_bin()
    if bindir is None:
        raise FileNotFoundError("initdb")
    folder = Path(tempfile.mkdtemp(prefix="casefile-pg-"))
    as_user: list[str] = []
    if os.geteuid() == 0:
        os.chown(folder, 65534, 65534)  # nobody:nogroup (Debian's fixed ids)
        as_user = ["runuser", "-u", "nobody", "--"]
    data, port = folder / "data", _free_port()
    c = Cluster(bindir, folder, port, as_user)
    try:
        done = c.run(str(bindir / "initdb"), "-D", str(data), "-U", SUPERUSER, "--auth=trust",
                     "--no-sync", "-E", "UTF8", "--locale=C")
        if done.returncode != 0:
            raise RuntimeError(f"initdb failed: {done.stderr.strip()}")
        # loopback only; the unix socket in our own folder. fsync off: a throwaway cluster needs no
        # durability across a power cut (a killed client still loses only its open transaction).
        opts = (f"-c listen_addresses=127.0.0.1 -c port={port} -c unix_socket_directories={folder} "
                "-c max_connections=60")
        if not durable:
            opts += " -c fsync=off -c synchronous_commit=off -c full_page_writes=off"
        done = c.run(str(bindir / "pg_ctl"), "-D", str(data), "-l", str(folder / "server.log"), "-w",
                     "-t", "60", "-o", opts, "start")
        if done.returncode != 0:
            log = (folder / "server.log").read_text(errors="replace")[-2000:]
            raise RuntimeError(f"the server did not start: {done.stderr.strip()} {log}")
        for _ in range(100):
            try:
                c.sql("SELECT 1")
                break
            except Exception:  # waiting for the server to accept connections
                time.sleep(0.1)
        yield c
    finally:
        if (data / "postmaster.pid").exists():
            c.run(str(bindir / "pg_ctl"), "-D", str(data), "-m", "immediate", "-w", "stop")
        shutil.rmtree(folder, ignore_errors=True)
