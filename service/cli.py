"""The `seepline` command: serve, migrate, load demo data, manage users, verify logs, make and
export signed checkpoints, replace the signing key, back up and restore."""

from __future__ import annotations

import argparse
import getpass
import sys
from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING

from service.common import Role

if TYPE_CHECKING:
    from sqlmodel import Session

    from service.audit.checkpoints import OutsideCheckpoint
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

    verify_logs = commands.add_parser(
        "verify-logs",
        help="verify the custody and audit hash chains against the signed checkpoints",
    )
    verify_logs.add_argument(
        "--checkpoints",
        type=Path,
        help="an outside copy of the checkpoints (a file from export-checkpoints or a page of "
        "/.well-known/seepline-checkpoints); default: the database's own",
    )
    commands.add_parser(
        "checkpoint", help="sign a checkpoint of every chain head that moved since the last"
    )
    export = commands.add_parser(
        "export-checkpoints",
        help="write every signed checkpoint and the public keys to a JSON file to keep elsewhere",
    )
    export.add_argument("path", type=Path)
    export.add_argument("--force", action="store_true", help="replace an existing file")
    rotate = commands.add_parser(
        "rotate-signing-key",
        help="replace the signing key, keeping the old public key trusted for what it signed",
    )
    rotate.add_argument(
        "--new-key", type=Path, help="an Ed25519 private key (PKCS#8 PEM); default: a new one"
    )

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
    from service.stored_text import install as check_stored_text

    check_stored_text()  # the same refusal of control characters as the served app
    handler = {
        "serve": _serve,
        "migrate": _migrate,
        "load-demo": _load_demo,
        "create-user": _create_user,
        "verify-logs": _verify_logs,
        "checkpoint": _checkpoint,
        "export-checkpoints": _export_checkpoints,
        "rotate-signing-key": _rotate_signing_key,
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
        # The app applies FORWARDED_ALLOW_IPS itself (service/main.py); uvicorn's own
        # handling (which reads the same variable) stays off so it cannot widen it.
        proxy_headers=False,
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
    from service.certificates.service import sign_missing_states
    from service.db import current_revision, get_engine, migrate, session_scope

    before = current_revision(get_engine())
    migrate()
    print(migration_report(before, current_revision(get_engine())))
    with session_scope(write=True) as session:
        signed = sign_missing_states(session)
    if signed:
        print(f"signed the state record of {signed} certificate(s) issued before state signing")
    return 0


def _load_demo(_args: argparse.Namespace) -> int:
    from service.config import get_settings, served_address
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


def _verify_logs(args: argparse.Namespace) -> int:
    from service.audit.checkpoints import read_export
    from service.db import session_scope

    outside = []
    if args.checkpoints is not None:
        try:
            outside = read_export(args.checkpoints.read_text(encoding="utf-8"))
        except (OSError, ValueError, KeyError, TypeError) as exc:
            print(f"cannot read {args.checkpoints}: {exc}", file=sys.stderr)
            return 2
    with session_scope() as session:
        return _report_logs(session, outside)


def _report_logs(
    session: Session, outside: Sequence[OutsideCheckpoint] = (), indent: str = ""
) -> int:
    """Print the verdict on the checkpoints and on each log; 1 if anything is broken."""
    from service.audit.checkpoints import verify_logs

    report = verify_logs(session, outside)
    marks = report.checkpoints
    source = f", {marks.outside} from the outside copy" if outside else ""
    if marks.latest is None:
        print(f"{indent}checkpoints: none yet: no row is anchored (run `seepline checkpoint`)")
    else:
        print(
            f"{indent}checkpoints: {marks.checkpoints} in the database{source}; latest "
            f"{marks.latest}, signed {marks.latest_made_at:%Y-%m-%d %H:%M:%S} UTC"
        )
    for problem in marks.problems:
        print(f"{indent}checkpoints: BROKEN: {problem}")
    for log in report.logs:
        pending = f"; {log.unanchored_rows} not yet anchored" if log.unanchored_rows else ""
        if log.ok:
            print(
                f"{indent}{log.chain} log: {log.rows} rows in {log.chains} chains, every link "
                f"holds{pending}"
            )
        else:
            others = len(log.broken_chains) - 1
            more = f" (and {others} other chain{'s' if others != 1 else ''})" if others else ""
            print(
                f"{indent}{log.chain} log: BROKEN at {log.first_broken_chain} row "
                f"{log.first_broken_seq}: {log.problem}{more}"
            )
    return 0 if report.ok else 1


def _checkpoint(_args: argparse.Namespace) -> int:
    from service.audit.checkpoints import make_checkpoint
    from service.db import session_scope

    with session_scope(write=True) as session:
        made = make_checkpoint(session, reason="command")
    print(
        f"checkpoint {made.seq} signed at {made.made_at:%Y-%m-%d %H:%M:%S} UTC with key "
        f"{made.key_id}: {made.heads} chain head(s) moved since the last"
    )
    return 0


def _export_checkpoints(args: argparse.Namespace) -> int:
    import json

    from service.audit.checkpoints import export
    from service.certificates.signing import published_keys
    from service.db import session_scope
    from service.laboratory.service import lab_settings

    if args.path.exists() and not args.force:
        print(f"refused: {args.path} exists (add --force to replace it)", file=sys.stderr)
        return 2
    with session_scope() as session:
        document = export(
            session, lab_name=lab_settings(session).name, keys=published_keys(session)
        )
    args.path.write_text(json.dumps(document, indent=1) + "\n", encoding="utf-8")
    print(f"wrote {len(document['checkpoints'])} checkpoint(s) to {args.path}")
    return 0


def _rotate_signing_key(args: argparse.Namespace) -> int:
    import os

    from cryptography.hazmat.primitives import serialization
    from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey

    from service.audit.checkpoints import make_checkpoint
    from service.certificates.signing import (
        load_signing_key,
        private_pem,
        rotate_signing_key,
    )
    from service.db import session_scope, utcnow

    new_private = None
    if args.new_key is not None:
        loaded = serialization.load_pem_private_key(args.new_key.read_bytes(), password=None)
        if not isinstance(loaded, Ed25519PrivateKey):
            print("refused: the new key is not an Ed25519 private key", file=sys.stderr)
            return 2
        new_private = loaded
    path = load_signing_key().path
    try:
        with session_scope(write=True) as session:
            old, new = rotate_signing_key(session, now=utcnow(), new_private=new_private)
            # Written beside the old key before commit; put in place only after it.
            staged = path.with_name(f".{path.name}.new")
            descriptor = os.open(staged, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o600)
            with os.fdopen(descriptor, "wb") as handle:
                handle.write(private_pem(new.private_key))
    except ValueError as exc:
        print(f"refused: {exc}", file=sys.stderr)
        return 2
    retired = path.with_name(f"{path.name}.retired-{old.key_id}")
    os.replace(path, retired)
    os.replace(staged, path)
    load_signing_key.cache_clear()
    with session_scope(write=True) as session:
        made = make_checkpoint(session, reason="key change")
    print(f"signing key replaced: {old.key_id} (retired) -> {new.key_id} (in use)")
    print(f"  the old private key was moved to {retired}: archive it offline or destroy it")
    print(f"  checkpoint {made.seq} is signed with the new key; restart the service now")
    return 0


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

    from service.db import make_engine

    engine = make_engine(url)
    try:
        with Session(engine) as session:
            return _report_logs(session, indent="  ")
    finally:
        engine.dispose()


def _signing_key_path() -> str:
    from service.certificates.signing import DEFAULT_KEY_FILE
    from service.config import VAR_DIR, get_settings

    return get_settings().signing_key_path.strip() or str(VAR_DIR / DEFAULT_KEY_FILE)


if __name__ == "__main__":
    raise SystemExit(main())
