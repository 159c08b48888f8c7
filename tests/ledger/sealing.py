"""Shared set-up for the seal tests: a small ledger, key pairs, a signed seal file, and the CLI."""

from __future__ import annotations

import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path

from casefile.ledger import Ledger, generate_key
from tests.ledger.bodies import case_body

ROOT = Path(__file__).resolve().parents[2]


@dataclass
class Sealed:
    db: Path
    key: Path
    pub: Path
    other_key: Path
    other_pub: Path
    seal: Path


def make_sealed(tmp: Path, n: int = 4) -> Sealed:
    """A ledger of ``n`` cases sealed with a fresh key (seal file beside it), plus a second key pair.
    Keys live in their own folder, apart from the ledger, as SECURITY.md asks."""
    keys = tmp / "keys"
    keys.mkdir()
    key, other = keys / "seal.key", keys / "other.key"
    pub, other_pub = generate_key(key), generate_key(other)
    db = tmp / "ledger.db"
    with Ledger(str(db)) as led:
        for i in range(1, n + 1):
            led.append("case", case_body(i))
        led.seal(str(key), output=tmp / "seal.json")
    return Sealed(db, key, pub, other, other_pub, tmp / "seal.json")


def cli(db: Path, *args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "casefile.cli", "--store", str(db), *args], cwd=ROOT,
                          capture_output=True, text=True)


def refused_line(done: subprocess.CompletedProcess) -> str:
    """The one stderr line of a refused command; fails unless it exited 1 with one line and no traceback.
    Tests assert on the words of that line themselves."""
    assert done.returncode == 1, (done.stdout, done.stderr)
    assert "Traceback" not in done.stderr
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1, done.stderr
    return lines[0]
