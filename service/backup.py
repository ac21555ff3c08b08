"""Backup and restore: SQLite through its online backup API (safe while the service runs),
PostgreSQL through its own pg_dump / pg_restore (we print the exact commands).

A restore never overwrites a database that holds data unless forced, and checks what it
wrote: SQLite's integrity check, the migration revision, row counts and both hash chains."""

from __future__ import annotations

import os
import shlex
import sqlite3
import time
from collections.abc import Iterator
from contextlib import closing, contextmanager
from dataclasses import dataclass, field
from pathlib import Path

import sqlalchemy as sa

from service.errors import Conflict

# Copy in steps of this many pages, so a writer waiting on a large database is not held up
# for the whole copy (SQLite restarts a step if the source changed in between).
PAGES_PER_STEP = 4096


class BackupRefused(Conflict):
    """A backup or restore that would lose data or copy something unusable."""

    code = "backup_refused"


@dataclass(frozen=True)
class DatabaseFacts:
    """What a SQLite file holds: enough to say what was copied and to compare two copies."""

    path: Path
    size_bytes: int
    integrity: str
    revision: str | None
    row_counts: dict[str, int] = field(default_factory=dict)

    @property
    def rows(self) -> int:
        return sum(self.row_counts.values())

    @property
    def tables(self) -> int:
        return len(self.row_counts)


@dataclass(frozen=True)
class CopyReport:
    source: str
    target: str
    facts: DatabaseFacts
    seconds: float


def sqlite_path(database_url: str) -> Path:
    """The file of a sqlite:/// URL; other URLs and in-memory databases are refused."""
    url = sa.engine.make_url(database_url)
    if url.get_backend_name() != "sqlite":
        raise BackupRefused(f"not a SQLite database URL: {url.render_as_string()}")
    if not url.database or url.database == ":memory:":
        raise BackupRefused("an in-memory SQLite database cannot be backed up or restored")
    return Path(url.database)


@contextmanager
def _connect(path: Path, *, read_only: bool) -> Iterator[sqlite3.Connection]:
    if read_only:
        connection = sqlite3.connect(f"{path.resolve().as_uri()}?mode=ro", uri=True, timeout=30)
    else:
        connection = sqlite3.connect(path, timeout=30)
    with closing(connection):
        connection.execute("PRAGMA busy_timeout=30000")
        yield connection


def _is_sqlite_file(path: Path) -> bool:
    with path.open("rb") as handle:
        return handle.read(16) == b"SQLite format 3\x00"


def inspect_sqlite(path: Path) -> DatabaseFacts:
    """Integrity check, migration revision and rows per table of a SQLite file."""
    if not path.is_file():
        raise BackupRefused(f"no file at '{path}'")
    if path.stat().st_size and not _is_sqlite_file(path):
        raise BackupRefused(f"'{path}' is not a SQLite database file")
    with _connect(path, read_only=True) as connection:
        try:
            integrity = "; ".join(
                row[0] for row in connection.execute("PRAGMA integrity_check").fetchall()
            )
            tables = [
                row[0]
                for row in connection.execute(
                    "SELECT name FROM sqlite_master WHERE type = 'table' "
                    "AND name NOT LIKE 'sqlite_%' ORDER BY name"
                )
            ]
            counts = {
                name: int(connection.execute(f'SELECT count(*) FROM "{name}"').fetchone()[0])
                for name in tables
                if name != "alembic_version"
            }
            revision = None
            if "alembic_version" in tables:
                found = connection.execute("SELECT version_num FROM alembic_version").fetchone()
                revision = found[0] if found else None
        except sqlite3.DatabaseError as exc:
            raise BackupRefused(f"'{path}' cannot be read as a SQLite database: {exc}") from exc
    return DatabaseFacts(path, path.stat().st_size, integrity, revision, counts)


def _copy(source: Path, target: Path) -> None:
    """SQLite's online backup: a consistent snapshot even while the service reads and writes."""
    with (
        _connect(source, read_only=True) as src,
        _connect(target, read_only=False) as dst,
    ):
        src.backup(dst, pages=PAGES_PER_STEP)


def backup_sqlite(database_url: str, target: Path, *, force: bool = False) -> CopyReport:
    """Copy the live database to `target` (a new file unless `force`), then check the copy."""
    source = sqlite_path(database_url)
    if not source.is_file():
        raise BackupRefused(f"no database file at '{source}': nothing to back up")
    if target.exists() and not force:
        raise BackupRefused(
            f"'{target}' already exists; choose a new file name (a date in it helps) "
            "or pass --force to replace it"
        )
    if target.resolve() == source.resolve():
        raise BackupRefused("the backup file cannot be the database itself")
    target.parent.mkdir(parents=True, exist_ok=True)
    started = time.perf_counter()
    partial = target.with_name(f".{target.name}.partial-{os.getpid()}")
    partial.unlink(missing_ok=True)
    try:
        _copy(source, partial)
        with _connect(partial, read_only=False) as connection:
            # A single self-contained file: no -wal beside it to forget.
            connection.execute("PRAGMA journal_mode=DELETE")
        facts = inspect_sqlite(partial)
        if facts.integrity != "ok":
            raise BackupRefused(f"the copy failed SQLite's integrity check: {facts.integrity}")
        partial.replace(target)
    finally:
        partial.unlink(missing_ok=True)
    facts = DatabaseFacts(
        target, target.stat().st_size, facts.integrity, facts.revision, facts.row_counts
    )
    return CopyReport(str(source), str(target), facts, time.perf_counter() - started)


def known_revisions() -> set[str]:
    from alembic.script import ScriptDirectory

    from service.db import alembic_config

    script = ScriptDirectory.from_config(alembic_config("sqlite://"))
    return {rev.revision for rev in script.walk_revisions()}


def restore_sqlite(source: Path, database_url: str, *, force: bool = False) -> CopyReport:
    """Restore the backup `source` into the database of `database_url`.

    Refuses a source that fails the integrity check or was made by a newer version of
    Seepline, and a target that holds rows unless `force`. Stop the service first: a
    restore replaces every page under it."""
    target = sqlite_path(database_url)
    found = inspect_sqlite(source)
    if found.integrity != "ok":
        raise BackupRefused(f"'{source}' fails SQLite's integrity check: {found.integrity}")
    if found.revision is None:
        raise BackupRefused(f"'{source}' is not a Seepline database (no migration revision)")
    if found.revision not in known_revisions():
        raise BackupRefused(
            f"'{source}' is at migration {found.revision}, which this version of Seepline "
            "does not know (a backup from a newer version?); restore it with that version"
        )
    if target.exists() and target.stat().st_size:
        current = inspect_sqlite(target)
        if current.rows and not force:
            raise BackupRefused(
                f"the database '{target}' is not empty ({current.rows} rows in "
                f"{sum(1 for n in current.row_counts.values() if n)} tables); restore into a "
                "new database, or pass --force to replace everything in it"
            )
    target.parent.mkdir(parents=True, exist_ok=True)
    started = time.perf_counter()
    _copy(source, target)
    restored = inspect_sqlite(target)
    if restored.integrity != "ok":
        raise BackupRefused(
            f"the restored database fails the integrity check: {restored.integrity}"
        )
    if restored.revision != found.revision or restored.row_counts != found.row_counts:
        raise BackupRefused("the restored database does not match the backup (revision or rows)")
    return CopyReport(str(source), str(target), restored, time.perf_counter() - started)


# --- PostgreSQL: its own tools ----------------------------------------------------------------


@dataclass(frozen=True)
class PostgresTarget:
    host: str
    port: int
    user: str
    database: str

    def options(self) -> list[str]:
        return [
            f"--host={self.host}",
            f"--port={self.port}",
            f"--username={self.user}",
        ]


def postgres_target(database_url: str) -> PostgresTarget:
    url = sa.engine.make_url(database_url)
    if url.get_backend_name() != "postgresql":
        raise BackupRefused(f"not a PostgreSQL database URL: {url.render_as_string()}")
    return PostgresTarget(
        host=url.host or "localhost",
        port=url.port or 5432,
        user=url.username or "postgres",
        database=url.database or "postgres",
    )


def pg_dump_command(database_url: str, path: Path, *, binary: str = "pg_dump") -> list[str]:
    """pg_dump in its custom format: compressed, consistent while the service runs, and
    restorable table by table."""
    target = postgres_target(database_url)
    return [
        binary,
        *target.options(),
        "--format=custom",
        "--no-owner",
        "--no-privileges",
        f"--file={path}",
        f"--dbname={target.database}",
    ]


def createdb_command(database_url: str, database: str, *, binary: str = "createdb") -> list[str]:
    return [binary, *postgres_target(database_url).options(), database]


def pg_restore_command(
    database_url: str, path: Path, database: str, *, binary: str = "pg_restore"
) -> list[str]:
    """pg_restore into an empty database in one transaction: all of it or nothing."""
    return [
        binary,
        *postgres_target(database_url).options(),
        "--exit-on-error",
        "--single-transaction",
        "--no-owner",
        "--no-privileges",
        f"--dbname={database}",
        str(path),
    ]


def restored_url(database_url: str, database: str) -> str:
    """The same server and user with another database; never the password (printed)."""
    url = sa.engine.make_url(database_url)
    bare = sa.engine.URL.create(
        url.drivername, username=url.username, host=url.host, port=url.port, database=database
    )
    return bare.render_as_string()


def shell(command: list[str]) -> str:
    return shlex.join(command)


def postgres_backup_script(database_url: str, path: Path) -> str:
    target = postgres_target(database_url)
    return "\n".join(
        [
            "# PostgreSQL is backed up with its own pg_dump (consistent while Seepline runs).",
            "# Nothing was copied yet: run this (the password comes from ~/.pgpass or",
            "# PGPASSWORD), then keep the file and the certificate signing key off this host.",
            shell(pg_dump_command(database_url, path)),
            f"# Check the dump lists the tables: pg_restore --list {shlex.quote(str(path))}",
            f"# (database {target.database} on {target.host}:{target.port})",
        ]
    )


def postgres_restore_script(database_url: str, path: Path) -> str:
    target = postgres_target(database_url)
    fresh = f"{target.database}_restored"
    return "\n".join(
        [
            "# PostgreSQL is restored with its own pg_restore, into a new, empty database:",
            "# nothing was changed yet. Run these (password from ~/.pgpass or PGPASSWORD):",
            shell(createdb_command(database_url, fresh)),
            shell(pg_restore_command(database_url, path, fresh)),
            "# Check the restored logs, then point DATABASE_URL at the new database:",
            f"DATABASE_URL={shlex.quote(restored_url(database_url, fresh))} seepline verify-logs",
            f"# (or stop the service and rename: ALTER DATABASE {fresh} RENAME TO ...)",
        ]
    )
