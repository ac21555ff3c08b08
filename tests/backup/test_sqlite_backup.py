"""`seepline backup` / `seepline restore` on SQLite: a restored copy still proves its custody and
audit chains and its certificates, a backup taken during a write holds only committed data,
and a restore never silently overwrites data."""

from __future__ import annotations

import sqlite3
from contextlib import closing
from pathlib import Path

import pytest

from service.backup import inspect_sqlite
from service.cli import main
from service.db import head_revision, make_engine
from tests.backup.checks import prove
from tests.backup.conftest import SqliteSource


def _prove_file(path: Path):
    engine = make_engine(f"sqlite:///{path}")
    try:
        return prove(engine)
    finally:
        engine.dispose()


def test_restored_copy_proves_chains_and_certificates(
    sqlite_source: SqliteSource, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    backup_file = tmp_path / "seepline-backup.db"
    restored = tmp_path / "restored" / "seepline.db"

    assert main(["backup", str(backup_file), "--database-url", sqlite_source.url]) == 0
    assert main(["restore", str(backup_file), "--database-url", f"sqlite:///{restored}"]) == 0

    said = capsys.readouterr().out
    original, copy = _prove_file(sqlite_source.path), _prove_file(restored)
    assert copy == original
    assert copy.custody_rows > 0
    assert copy.audit_rows > 0
    # the demo's issued and superseded certificates and the one issued in arrange.populate
    assert {state for _n, _r, state, _h in copy.certificates} >= {"issued", "superseded"}
    for log, rows in (("custody", copy.custody_rows), ("audit", copy.audit_rows)):
        line = next(line for line in said.splitlines() if line.startswith(f"  {log} log:"))
        assert line.startswith(f"  {log} log: {rows} rows in "), line
        assert "every link holds" in line
    assert "integrity ok" in said


def test_backup_during_a_write_holds_committed_rows_only(
    sqlite_source: SqliteSource, tmp_path: Path
) -> None:
    """SQLite's online backup copies one consistent snapshot: a row committed to the WAL but
    not yet checkpointed is in it, a row of a transaction still open is not (SQLite docs,
    'Using the SQLite Online Backup API' and 'Write-Ahead Logging')."""
    backup_file = tmp_path / "during-write.db"
    with closing(sqlite3.connect(sqlite_source.path, timeout=5)) as writer:
        writer.isolation_level = None
        writer.execute("PRAGMA journal_mode=WAL")
        writer.execute("PRAGMA wal_autocheckpoint=0")
        user_id = writer.execute("SELECT min(id) FROM app_user").fetchone()[0]
        insert = (
            "INSERT INTO idempotency_record (key, user_id, request_hash, status_code, response,"
            " created_at) VALUES (?, ?, 'x', 201, '{}', '2026-11-20 10:00:00')"
        )
        writer.execute(insert, ("committed-before-backup", user_id))
        writer.execute("BEGIN IMMEDIATE")
        writer.execute(insert, ("open-during-backup", user_id))
        try:
            assert main(["backup", str(backup_file), "--database-url", sqlite_source.url]) == 0
        finally:
            writer.execute("ROLLBACK")
            writer.execute("DELETE FROM idempotency_record WHERE key = 'committed-before-backup'")

    with closing(sqlite3.connect(backup_file)) as copy:
        keys = {row[0] for row in copy.execute("SELECT key FROM idempotency_record")}
    assert "committed-before-backup" in keys
    assert "open-during-backup" not in keys
    assert inspect_sqlite(backup_file).integrity == "ok"


def test_restore_refuses_a_database_holding_data_unless_forced(
    sqlite_source: SqliteSource, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    backup_file = tmp_path / "b.db"
    target = tmp_path / "busy.db"
    assert main(["backup", str(backup_file), "--database-url", sqlite_source.url]) == 0
    with closing(sqlite3.connect(target)) as other:
        other.execute("CREATE TABLE note (body TEXT)")
        other.execute("INSERT INTO note VALUES ('kept unless forced')")
        other.commit()
    capsys.readouterr()

    refused = main(["restore", str(backup_file), "--database-url", f"sqlite:///{target}"])

    assert refused == 2
    said = capsys.readouterr().err
    assert "not empty (1 rows in 1 tables)" in said
    assert "--force" in said
    assert inspect_sqlite(target).row_counts == {"note": 1}

    forced = main(["restore", str(backup_file), "--database-url", f"sqlite:///{target}", "--force"])
    assert forced == 0
    assert "replaced what was there (--force): 1 rows" in capsys.readouterr().out
    assert inspect_sqlite(target).revision == head_revision()


def test_restore_into_a_migrated_empty_database_needs_no_force(
    sqlite_source: SqliteSource, tmp_path: Path
) -> None:
    from service.db import migrate

    backup_file = tmp_path / "b.db"
    target_url = f"sqlite:///{tmp_path / 'fresh.db'}"
    migrate(target_url)  # `seepline migrate` on a new install: tables, no rows
    assert main(["backup", str(backup_file), "--database-url", sqlite_source.url]) == 0

    assert main(["restore", str(backup_file), "--database-url", target_url]) == 0


@pytest.mark.parametrize(
    ("content", "expected"),
    [
        (b"name,depth\nBH-01,2.5\n", "is not a SQLite database file"),
        (None, "is not a Seepline database (no migration revision)"),
        ("revision-from-the-future", "is at migration revision-from-the-future, which this"),
    ],
    ids=["csv", "no-revision", "unknown-revision"],
)
def test_restore_refuses_a_file_that_is_not_a_usable_backup(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], content: bytes | str | None, expected: str
) -> None:
    source = tmp_path / "not-a-backup.db"
    if isinstance(content, bytes):
        source.write_bytes(content)
    else:
        with closing(sqlite3.connect(source)) as made:
            made.execute("CREATE TABLE sample (lab_id TEXT)")
            if content is not None:
                made.execute("CREATE TABLE alembic_version (version_num TEXT)")
                made.execute("INSERT INTO alembic_version VALUES (?)", (content,))
            made.commit()
    target = tmp_path / "target.db"

    assert main(["restore", str(source), "--database-url", f"sqlite:///{target}"]) == 2

    assert expected in capsys.readouterr().err
    assert not target.exists()


def test_backup_never_replaces_an_existing_file_unless_forced(
    sqlite_source: SqliteSource, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    earlier = tmp_path / "monday.db"
    earlier.write_bytes(b"an earlier backup")

    assert main(["backup", str(earlier), "--database-url", sqlite_source.url]) == 2

    assert "already exists" in capsys.readouterr().err
    assert earlier.read_bytes() == b"an earlier backup"
    assert main(["backup", str(earlier), "--database-url", sqlite_source.url, "--force"]) == 0
    assert inspect_sqlite(earlier).integrity == "ok"
