"""The `seepline` command: serve, migrate, load demo data, manage users, verify logs, back up
and restore."""

from __future__ import annotations

import argparse
import getpass
import sys
from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING

from service.common import Role

if TYPE_CHECKING:
    from service.backup import DatabaseFacts


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="seepline", description=__doc__)
    commands = parser.add_subparsers(dest="command", required=True)

    serve = commands.add_parser("serve", help="serve the web application")
    serve.add_argument("--host")
    serve.add_argument("--port", type=int)
    serve.add_argument("--workers", type=int, default=1)
    serve.add_argument("--reload", action="store_true")

    commands.add_parser("migrate", help="bring the database schema up to date")
    commands.add_parser("load-demo", help="load the demo scenario into an empty database")

    user = commands.add_parser("create-user", help="create a user (password asked if not given)")
    user.add_argument("email")
    user.add_argument("--name", required=True)
    user.add_argument("--role", required=True, choices=[r.value for r in Role])
    user.add_argument("--organisation", required=True, help="organisation name (created if new)")
    user.add_argument("--client", action="store_true", help="the organisation is a client")
    user.add_argument("--password")

    commands.add_parser("verify-logs", help="verify the custody and audit hash chains")

    backup = commands.add_parser(
        "backup",
        help="copy the database to a file (SQLite, safe while serving; PostgreSQL: prints the "
        "pg_dump command)",
    )
    backup.add_argument("path", type=Path, help="the backup file to write")
    backup.add_argument("--force", action="store_true", help="replace an existing file")
    backup.add_argument("--database-url", help="default: DATABASE_URL")

    restore = commands.add_parser(
        "restore",
        help="restore a backup file into the database (SQLite; PostgreSQL: prints the "
        "pg_restore commands); stop the service first",
    )
    restore.add_argument("path", type=Path, help="the backup file to read")
    restore.add_argument(
        "--force", action="store_true", help="replace a database that already holds data"
    )
    restore.add_argument("--database-url", help="default: DATABASE_URL")

    args = parser.parse_args(argv)
    handler = {
        "serve": _serve,
        "migrate": _migrate,
        "load-demo": _load_demo,
        "create-user": _create_user,
        "verify-logs": _verify_logs,
        "backup": _backup,
        "restore": _restore,
    }[args.command]
    return handler(args)


def _serve(args: argparse.Namespace) -> int:
    import uvicorn

    from service.config import get_settings
    from service.db import get_engine, require_migrated
    from service.errors import DatabaseNotMigrated

    settings = get_settings()
    try:
        require_migrated(get_engine())
    except DatabaseNotMigrated as exc:
        print(exc, file=sys.stderr)
        return 2
    uvicorn.run(
        "service.main:create_app",
        factory=True,
        host=args.host or settings.host,
        port=args.port or settings.port,
        workers=args.workers,
        reload=args.reload,
        proxy_headers=True,
    )
    return 0


def migration_report(before: str | None, after: str | None) -> str:
    """What `migrate` did, in words."""
    if before is None:
        return f"created the schema at revision {after}"
    if before == after:
        return f"the schema was already at revision {after}: nothing to do"
    return f"upgraded the schema from revision {before} to {after}"


def _migrate(_args: argparse.Namespace) -> int:
    from service.db import current_revision, get_engine, migrate

    before = current_revision(get_engine())
    migrate()
    print(migration_report(before, current_revision(get_engine())))
    return 0


def served_address(host: str, port: int) -> str:
    """The address `seepline serve` answers on, as a browser on this machine reaches it."""
    if host in ("0.0.0.0", "::", ""):
        host = "127.0.0.1"
    elif ":" in host:
        host = f"[{host}]"
    return f"http://{host}:{port}"


def _load_demo(_args: argparse.Namespace) -> int:
    from service.config import get_settings
    from service.db import session_scope
    from service.demo import DEMO_PASSWORDS, load_demo

    with session_scope(write=True) as session:
        created = load_demo(session)
    settings = get_settings()
    print("demo data loaded" if created else "demo data already present: nothing changed")
    address = served_address(settings.host, settings.port)
    print(f"sign in at {address} (after `seepline serve`) with any of these demo accounts:")
    for email, (role, password) in DEMO_PASSWORDS.items():
        print(f"  {role:<12} {email:<32} password: {password}")
    return 0


def _create_user(args: argparse.Namespace) -> int:
    from service.accounts.service import create_user_with_organisation
    from service.db import session_scope
    from service.errors import ServiceError

    password = args.password or getpass.getpass("password: ")
    try:
        with session_scope(write=True) as session:
            user = create_user_with_organisation(
                session,
                email=args.email,
                full_name=args.name,
                role=Role(args.role),
                organisation_name=args.organisation,
                is_client=args.client,
                password=password,
            )
            print(f"created user {user.email} ({user.role})")
    except ServiceError as exc:
        print(f"refused: {exc.message}", file=sys.stderr)
        return 2
    return 0


def _verify_logs(_args: argparse.Namespace) -> int:
    from service.audit.chain import verify
    from service.db import session_scope

    failures = 0
    with session_scope() as session:
        for chain in ("custody", "audit"):
            report = verify(session, chain)
            if report.ok:
                print(f"{chain}: {report.rows} rows, every link holds")
            else:
                failures += 1
                print(f"{chain}: BROKEN at row {report.first_broken_seq}: {report.problem}")
    return 1 if failures else 0


def _database_url(args: argparse.Namespace) -> str:
    from service.config import get_settings

    return str(args.database_url or get_settings().database_url)


def _describe(facts: DatabaseFacts) -> str:
    return (
        f"{facts.rows} rows in {facts.tables} tables, migration {facts.revision}, "
        f"{facts.size_bytes / 1e6:.1f} MB, integrity {facts.integrity}"
    )


def _backup(args: argparse.Namespace) -> int:
    from service import backup as backups

    url = _database_url(args)
    if url.startswith("postgresql"):
        print(backups.postgres_backup_script(url, args.path))
        return 3
    try:
        report = backups.backup_sqlite(url, args.path, force=args.force)
    except backups.BackupRefused as exc:
        print(f"refused: {exc.message}", file=sys.stderr)
        return 2
    print(f"backed up {report.source} to {report.target} in {report.seconds:.2f} s")
    print(f"  the copy: {_describe(report.facts)}")
    print(f"  keep the certificate signing key too (not in the database): {_signing_key_path()}")
    return 0


def _restore(args: argparse.Namespace) -> int:
    from service import backup as backups
    from service.db import head_revision

    url = _database_url(args)
    if url.startswith("postgresql"):
        print(backups.postgres_restore_script(url, args.path))
        return 3
    try:
        replaced = _rows_in(url)
        report = backups.restore_sqlite(args.path, url, force=args.force)
    except backups.BackupRefused as exc:
        print(f"refused: {exc.message}", file=sys.stderr)
        return 2
    print(f"restored {report.source} into {report.target} in {report.seconds:.2f} s")
    if replaced:
        print(f"  replaced what was there (--force): {replaced} rows")
    print(f"  the database now: {_describe(report.facts)}")
    if report.facts.revision != head_revision():
        print(
            f"  this version of Seepline needs migration {head_revision()}: "
            "run `seepline migrate` before serving"
        )
        return 0
    return _verify_chains(url)


def _rows_in(url: str) -> int:
    """Rows in the SQLite database about to be replaced (0 if none or no file)."""
    from service.backup import inspect_sqlite, sqlite_path

    path = sqlite_path(url)
    if not path.is_file() or not path.stat().st_size:
        return 0
    return inspect_sqlite(path).rows


def _verify_chains(url: str) -> int:
    from sqlmodel import Session

    from service.audit.chain import verify
    from service.db import make_engine

    engine = make_engine(url)
    failures = 0
    try:
        with Session(engine) as session:
            for chain in ("custody", "audit"):
                report = verify(session, chain)
                if report.ok:
                    print(f"  {chain} log: {report.rows} rows, every link holds")
                else:
                    failures += 1
                    print(
                        f"  {chain} log: BROKEN at row {report.first_broken_seq}: {report.problem}"
                    )
    finally:
        engine.dispose()
    return 1 if failures else 0


def _signing_key_path() -> str:
    from service.certificates.signing import DEFAULT_KEY_FILE
    from service.config import VAR_DIR, get_settings

    return get_settings().signing_key_path.strip() or str(VAR_DIR / DEFAULT_KEY_FILE)


if __name__ == "__main__":
    raise SystemExit(main())
