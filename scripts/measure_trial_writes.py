"""Count what one recorded trial costs the database: audit rows written and SQL statements.

    .venv/bin/python scripts/measure_trial_writes.py [--trials 20] [--database-url URL]

Builds the arranged lab of the proof tests (tests/proof/conftest.py) in a throwaway database
(SQLite by default; with --database-url, an empty PostgreSQL database), then posts N trials
to a running test through the API and prints, per trial, the mean number of audit rows added
and of SQL statements the request ran (by kind). Run by hand; not a test."""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
from collections import Counter
from pathlib import Path
from typing import Any


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--trials", type=int, default=20)
    parser.add_argument("--database-url", help="an empty database (default: a SQLite file)")
    args = parser.parse_args()
    workdir = Path(tempfile.mkdtemp(prefix="seepline-measure-"))
    os.environ["DATABASE_URL"] = args.database_url or f"sqlite:///{workdir / 'measure.db'}"
    os.environ["ENVIRONMENT"] = "test"
    os.environ["SECRET_KEY"] = "measure-secret-key-not-for-production"
    os.environ["SIGNING_KEY_PATH"] = str(workdir / "signing_key.pem")
    os.environ["ARGON2_TIME_COST"] = "1"
    os.environ["ARGON2_MEMORY_COST_KIB"] = "64"
    sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

    import sqlalchemy as sa
    from fastapi.testclient import TestClient
    from sqlmodel import Session, func, select

    import service.models  # noqa: F401
    from service.audit.models import AuditEvent
    from service.db import get_engine, migrate
    from service.main import create_app
    from tests.certificates.arrange import trial_entries
    from tests.proof.conftest import build_proof

    migrate(os.environ["DATABASE_URL"])
    engine = get_engine()
    statements: Counter[str] = Counter()
    counting = False

    @sa.event.listens_for(engine, "before_cursor_execute")
    def _count(*event_args: Any) -> None:
        if counting:
            statements[str(event_args[2]).lstrip().split(None, 1)[0].upper()] += 1

    with TestClient(create_app()) as client, Session(engine, expire_on_commit=False) as session:
        proof = build_proof(session, client)
        headers = proof.headers("technician")
        url = f"/api/v1/tests/{proof.running.id}/trials"
        # One trial first: the test's first write in a run may start it (a state change).
        client.post(
            url, json=trial_entries(125.0, 114.0), headers={**headers, "Idempotency-Key": "warm"}
        )
        session.rollback()  # a fresh snapshot for each count
        rows_before = session.exec(select(func.count()).select_from(AuditEvent)).one()
        session.rollback()
        counting = True
        for number in range(args.trials):
            body = trial_entries(125.0, round(114.5 - 0.05 * number, 2))
            response = client.post(
                url, json=body, headers={**headers, "Idempotency-Key": f"measure-{number}"}
            )
            assert response.status_code == 201, response.text
        counting = False
        session.rollback()
        rows_after = session.exec(select(func.count()).select_from(AuditEvent)).one()
    engine.dispose()
    trials = args.trials
    print(f"database: {engine.dialect.name}; {trials} trials recorded through the API")
    print(f"audit rows per trial: {(rows_after - rows_before) / trials:.2f}")
    total = sum(statements.values())
    kinds = ", ".join(f"{kind} {count / trials:.1f}" for kind, count in statements.most_common())
    print(f"SQL statements per trial: {total / trials:.1f} ({kinds})")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
