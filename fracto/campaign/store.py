"""The batch's result store: one SQLite file (embedded, no server) in the output folder.

Tables
------
``results``
    One row per scored item, keyed by ``key`` = SHA-256 of (file content
    SHA-256, settings hash, tool version): the result JSON, a status
    (``ok`` or ``error``), the error sentence and the seconds it took.
``manifest_rows``
    One row per manifest row of each manifest seen (manifest id, row index),
    linking it to its result key.

Safety
------
The database runs in write-ahead-log mode with ``synchronous=FULL``; every
result is written in its own transaction (``INSERT OR REPLACE`` on the
primary key), so a Ctrl-C or a kill at any moment leaves either the whole row
or none of it, and a re-run never duplicates a key. SQLite documents this
atomic commit behaviour (https://www.sqlite.org/atomiccommit.html and
https://www.sqlite.org/wal.html).

A disk that fills up ends the batch with one sentence; what was committed
before stays readable.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import sqlite3
import time
from collections.abc import Iterable, Iterator
from pathlib import Path

from fracto.errors import FractoInputError
from fracto.io.safe import dumps_json

#: Name of the database file inside the output folder.
DB_NAME = "results.sqlite"
SCHEMA_VERSION = 1

_SCHEMA = """
CREATE TABLE IF NOT EXISTS meta (name TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS results (
    key TEXT PRIMARY KEY,
    content_sha256 TEXT NOT NULL,
    settings_hash TEXT NOT NULL,
    tool_version TEXT NOT NULL,
    kind TEXT NOT NULL,
    status TEXT NOT NULL CHECK (status IN ('ok', 'error')),
    error TEXT,
    result_json TEXT,
    seconds REAL,
    created_utc TEXT NOT NULL
);
CREATE TABLE IF NOT EXISTS manifest_rows (
    manifest_id TEXT NOT NULL,
    row_index INTEGER NOT NULL,
    path TEXT NOT NULL,
    specimen TEXT NOT NULL,
    key TEXT,
    PRIMARY KEY (manifest_id, row_index)
);
"""


def result_key(content_sha256: str, settings_hash: str, tool_version: str) -> str:
    """The store key of one item: SHA-256 of its three parts joined by newlines."""
    text = f"{content_sha256}\n{settings_hash}\n{tool_version}"
    return hashlib.sha256(text.encode()).hexdigest()


def settings_hash(settings: dict) -> str:
    """SHA-256 of the settings as canonical JSON (sorted keys, no spaces)."""
    text = json.dumps(
        json.loads(dumps_json(settings, indent=None)), sort_keys=True, separators=(",", ":")
    )
    return hashlib.sha256(text.encode()).hexdigest()


def _disk_full(exc: BaseException) -> bool:
    msg = str(exc).lower()
    return "disk is full" in msg or "no space" in msg or getattr(exc, "errno", None) == 28


@contextlib.contextmanager
def _translate(db: Path) -> Iterator[None]:
    try:
        yield
    except sqlite3.OperationalError as exc:
        if _disk_full(exc):
            raise FractoInputError(
                f"The disk is full; results stored so far in '{db}' are kept, free some space "
                "and run the batch again to resume."
            ) from exc
        if "readonly" in str(exc).lower() or "unable to open" in str(exc).lower():
            raise FractoInputError(f"The result database '{db}' cannot be written.") from exc
        raise
    except sqlite3.DatabaseError as exc:
        raise FractoInputError(
            f"'{db}' is not a fracto result database or is damaged ({exc})."
        ) from exc


class ResultStore:
    """The SQLite store of a batch output folder.

    Parameters
    ----------
    path : path-like
        The database file (created when missing).
    """

    def __init__(self, path: str | Path):
        self.path = Path(path)
        with _translate(self.path):
            self._conn = sqlite3.connect(self.path, timeout=30.0, isolation_level=None)
            self._conn.execute("PRAGMA journal_mode=WAL")
            self._conn.execute("PRAGMA synchronous=FULL")
            self._conn.execute("PRAGMA busy_timeout=30000")
            with self.transaction():
                for stmt in _SCHEMA.strip().split(";"):
                    if stmt.strip():
                        self._conn.execute(stmt)
                self._conn.execute(
                    "INSERT OR IGNORE INTO meta VALUES ('schema_version', ?)",
                    (str(SCHEMA_VERSION),),
                )
            (v,) = self._conn.execute(
                "SELECT value FROM meta WHERE name = 'schema_version'"
            ).fetchone()
        if int(v) != SCHEMA_VERSION:
            raise FractoInputError(
                f"'{self.path}' was written by another fracto store version ({v}); "
                "use a new output folder."
            )

    @contextlib.contextmanager
    def transaction(self) -> Iterator[sqlite3.Connection]:
        """One transaction: committed when the block ends, rolled back on any exception."""
        with _translate(self.path):
            self._conn.execute("BEGIN IMMEDIATE")
            try:
                yield self._conn
            except BaseException:
                self._conn.execute("ROLLBACK")
                raise
            self._conn.execute("COMMIT")

    def close(self) -> None:
        self._conn.close()

    def __enter__(self) -> ResultStore:
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    # ------------------------------------------------------------ results

    def done_keys(self, keys: Iterable[str]) -> set[str]:
        """Keys among `keys` whose result is stored with status ``ok``."""
        keys = list(set(keys))
        out: set[str] = set()
        with _translate(self.path):
            for i in range(0, len(keys), 500):
                chunk = keys[i : i + 500]
                q = ",".join("?" * len(chunk))
                out.update(
                    k
                    for (k,) in self._conn.execute(
                        f"SELECT key FROM results WHERE status = 'ok' AND key IN ({q})", chunk
                    )
                )
        return out

    def put_result(
        self,
        key: str,
        *,
        content_sha256: str,
        settings_hash: str,
        tool_version: str,
        kind: str,
        status: str,
        error: str | None,
        result: dict | None,
        seconds: float | None,
    ) -> None:
        """Store one result in its own transaction (replacing an earlier one of the key)."""
        body = dumps_json(result, indent=None) if result is not None else None
        now = time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime())
        with self.transaction() as c:
            c.execute(
                "INSERT OR REPLACE INTO results VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                (
                    key,
                    content_sha256,
                    settings_hash,
                    tool_version,
                    kind,
                    status,
                    error,
                    body,
                    seconds,
                    now,
                ),
            )

    def get_results(self, keys: Iterable[str]) -> dict[str, dict]:
        """Stored results by key: ``{"status", "error", "result", "seconds", "kind"}``."""
        keys = list(set(k for k in keys if k))
        out: dict[str, dict] = {}
        with _translate(self.path):
            for i in range(0, len(keys), 500):
                chunk = keys[i : i + 500]
                q = ",".join("?" * len(chunk))
                for k, status, err, body, sec, kind in self._conn.execute(
                    "SELECT key, status, error, result_json, seconds, kind FROM results "
                    f"WHERE key IN ({q})",
                    chunk,
                ):
                    out[k] = {
                        "status": status,
                        "error": err,
                        "result": json.loads(body) if body else None,
                        "seconds": sec,
                        "kind": kind,
                    }
        return out

    def count(self, table: str = "results") -> int:
        if table not in ("results", "manifest_rows"):
            raise ValueError(table)
        with _translate(self.path):
            return int(self._conn.execute(f"SELECT COUNT(*) FROM {table}").fetchone()[0])

    # ------------------------------------------------------------ manifest rows

    def link_rows(
        self, manifest_id: str, rows: Iterable[tuple[int, str, str, str | None]]
    ) -> None:
        """Record (row index, path, specimen, key) of every manifest row in one transaction."""
        with self.transaction() as c:
            c.execute("DELETE FROM manifest_rows WHERE manifest_id = ?", (manifest_id,))
            c.executemany(
                "INSERT INTO manifest_rows VALUES (?, ?, ?, ?, ?)",
                [(manifest_id, i, p, s, k) for i, p, s, k in rows],
            )
