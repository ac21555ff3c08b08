"""The `seepline` command: serve, migrate, load demo data, manage users, verify logs."""

from __future__ import annotations

import argparse
import getpass
import sys
from collections.abc import Sequence

from service.common import Role


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

    args = parser.parse_args(argv)
    handler = {
        "serve": _serve,
        "migrate": _migrate,
        "load-demo": _load_demo,
        "create-user": _create_user,
        "verify-logs": _verify_logs,
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


def _migrate(_args: argparse.Namespace) -> int:
    from service.db import migrate

    migrate()
    print("database schema is up to date")
    return 0


def _load_demo(_args: argparse.Namespace) -> int:
    from service.db import session_scope
    from service.demo import DEMO_PASSWORDS, load_demo

    with session_scope(write=True) as session:
        created = load_demo(session)
    print("demo data loaded" if created else "demo data already present: nothing changed")
    print("sign in at http://127.0.0.1:8000 with any of these demo accounts:")
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


if __name__ == "__main__":
    raise SystemExit(main())
