"""The SQLite result store: keys, transactions, resume state, disk-full translation.

Atomic commit and rollback are SQLite's documented behaviour
(https://www.sqlite.org/atomiccommit.html); the checks below make sure the store
uses them (a failing block leaves nothing) and that keys follow their definition.
"""

from __future__ import annotations

import hashlib
import sqlite3

import pytest

from fracto.campaign.store import ResultStore, result_key, settings_hash
from fracto.errors import FractoInputError


def _put(store, key, status="ok", **kw):
    store.put_result(
        key,
        content_sha256="c" * 64,
        settings_hash="s" * 64,
        tool_version="0.1",
        kind="sem",
        status=status,
        error=kw.get("error"),
        result=kw.get("result", {"x": 1.5}),
        seconds=0.1,
    )


def test_key_definition():
    # SHA-256 of "content\nsettings\nversion" (FIPS 180-4 via hashlib)
    want = hashlib.sha256(b"abc\ndef\n1.0").hexdigest()
    assert result_key("abc", "def", "1.0") == want
    assert settings_hash({"b": 1, "a": [1, 2]}) == settings_hash({"a": [1, 2], "b": 1})
    assert settings_hash({"a": 1}) != settings_hash({"a": 2})


def test_results_roundtrip_and_done(tmp_path):
    db = tmp_path / "r.sqlite"
    with ResultStore(db) as s:
        _put(s, "k1")
        _put(s, "k2", status="error", error="bad file.", result=None)
        _put(s, "k1", result={"x": 2.5})  # replaced, never duplicated
        assert s.count() == 2
        assert s.done_keys(["k1", "k2", "k3"]) == {"k1"}  # errors are retried
        got = s.get_results(["k1", "k2"])
    assert got["k1"]["result"] == {"x": 2.5} and got["k2"]["error"] == "bad file."
    with sqlite3.connect(db) as c:
        assert c.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    with ResultStore(db) as s:  # reopened: still there
        assert s.done_keys(["k1"]) == {"k1"}


def test_failed_transaction_leaves_nothing(tmp_path):
    with ResultStore(tmp_path / "r.sqlite") as s:
        with pytest.raises(RuntimeError):
            with s.transaction() as c:
                c.execute(
                    "INSERT INTO results VALUES ('k', 'c', 's', 'v', 'sem', 'ok', NULL, "
                    "'{}', 0.1, 'now')"
                )
                raise RuntimeError("stopped half-way")
        assert s.count() == 0
        s.link_rows("m", [(0, "a.png", "S1", "k"), (1, "b.png", "S1", None)])
        s.link_rows("m", [(0, "a.png", "S1", "k")])  # re-linking replaces the manifest's rows
        assert s.count("manifest_rows") == 1


def test_not_a_database(tmp_path):
    p = tmp_path / "r.sqlite"
    p.write_bytes(b"this is not sqlite" * 100)
    with pytest.raises(FractoInputError, match="not a fracto result database"):
        ResultStore(p)


def test_disk_full_is_one_sentence(tmp_path, monkeypatch):
    from fracto.campaign import store as st

    s = ResultStore(tmp_path / "r.sqlite")
    _put(s, "k1")

    class Full:
        def __init__(self, conn):
            self.conn = conn

        def execute(self, sql, *a):
            if sql.startswith("INSERT"):
                raise sqlite3.OperationalError("database or disk is full")
            return self.conn.execute(sql, *a)

    monkeypatch.setattr(s, "_conn", Full(s._conn))
    with pytest.raises(FractoInputError, match="disk is full"):
        _put(s, "k2")
    monkeypatch.undo()
    assert s.count() == 1 and s.done_keys(["k1", "k2"]) == {"k1"}
    s.close()
    assert st.DB_NAME == "results.sqlite"
