"""Fill the database of DATABASE_URL for the load benchmark: the demo scenario, then 100,000
samples with a test each (bulk inserts, not the API), running tests to record trials on,
approved tests to issue certificates from, and API tokens. Prints one JSON line with what
scripts/bench_load.py needs. Benchmark data only: the bulk rows are not audited.

    DATABASE_URL=... .venv/bin/python scripts/seed_bulk.py --samples 100000
"""

from __future__ import annotations

import argparse
import json
import random
import sys
import time
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

import sqlalchemy as sa
from sqlmodel import Session, SQLModel, col, select

import service.models  # noqa: F401
from service.accounts.models import Organisation, User
from service.accounts.tokens import issue_token
from service.certificates.models import Certificate
from service.common import (
    CertificateState,
    OrganisationKind,
    Priority,
    Role,
    TestMethod,
    TestState,
    TokenKind,
)
from service.config import get_settings
from service.db import get_engine, migrate
from service.demo import load_demo
from service.lab_tests.models import (
    PermeabilityTest,
    Reading,
    SaturationStep,
    Specimen,
    TestApparatus,
    Trial,
)
from service.projects.models import Project
from service.queue_keys import due_of, rank_of
from service.samples.models import Sample
from service.signoffs.models import SignOff

CHUNK = 5000
# Where 100,000 tests of a lab's history stand: most long issued, a few thousand open.
STATE_SHARES = (
    (TestState.ISSUED, 0.85),
    (TestState.APPROVED, 0.04),
    (TestState.SUBMITTED, 0.03),
    (TestState.RUNNING, 0.05),
    (TestState.PLANNED, 0.03),
)
NOW = datetime.now(UTC)


def insert(session: Session, model: type[SQLModel], rows: list[dict[str, Any]]) -> None:
    """Core executemany in chunks: every row is the model's defaults with its own values
    (building 100,000 SQLModel objects would take a minute; dicts take a second)."""
    defaults = {
        name: (info.default_factory() if info.default_factory else info.default)  # type: ignore[call-arg]
        for name, info in model.model_fields.items()
        if name != "id"
    }
    table: sa.Table = model.__table__  # type: ignore[attr-defined]
    for start in range(0, len(rows), CHUNK):
        session.execute(sa.insert(table), [defaults | row for row in rows[start : start + CHUNK]])


def ids_by_lab_id(session: Session, prefix: str) -> dict[str, int]:
    found = session.exec(
        select(Sample.lab_id, Sample.id).where(col(Sample.lab_id).startswith(prefix))
    ).all()
    return {lab_id: sample_id for lab_id, sample_id in found if sample_id is not None}


def user_of(session: Session, role: Role) -> User:
    user = session.exec(select(User).where(User.role == role).order_by(col(User.id))).first()
    assert user is not None, role
    return user


def demo_test(session: Session, state: TestState) -> PermeabilityTest:
    test = session.exec(
        select(PermeabilityTest)
        .join(Trial, col(Trial.test_id) == col(PermeabilityTest.id))
        .where(PermeabilityTest.state == state)
        .order_by(col(PermeabilityTest.id))
    ).first()
    assert test is not None, state
    return test


def clone_test(
    session: Session, source: PermeabilityTest, sample_id: int, *, with_trials: bool
) -> PermeabilityTest:
    """A copy of `source` (specimen, saturation, apparatus, and optionally trials and
    sign-offs) on another sample."""
    assert source.id is not None
    test = PermeabilityTest.model_validate(
        source.model_dump(exclude={"id", "sample_id", "supersedes_id", "superseded_by_id"})
        | {"sample_id": sample_id}
    )
    session.add(test)
    session.flush()
    specimen = session.exec(select(Specimen).where(Specimen.test_id == source.id)).one()
    session.add(Specimen.model_validate(specimen.model_dump(exclude={"id"}) | {"test_id": test.id}))
    for step in session.exec(select(SaturationStep).where(SaturationStep.test_id == source.id)):
        session.add(
            SaturationStep.model_validate(step.model_dump(exclude={"id"}) | {"test_id": test.id})
        )
    for link in session.exec(select(TestApparatus).where(TestApparatus.test_id == source.id)):
        session.add(TestApparatus(test_id=test.id, apparatus_id=link.apparatus_id))
    if with_trials:
        for trial in session.exec(select(Trial).where(Trial.test_id == source.id)).all():
            copy = Trial.model_validate(trial.model_dump(exclude={"id"}) | {"test_id": test.id})
            session.add(copy)
            session.flush()
            for reading in session.exec(select(Reading).where(Reading.trial_id == trial.id)):
                session.add(
                    Reading.model_validate(
                        reading.model_dump(exclude={"id"}) | {"trial_id": copy.id}
                    )
                )
        for sign_off in session.exec(select(SignOff).where(SignOff.test_id == source.id)):
            session.add(
                SignOff.model_validate(sign_off.model_dump(exclude={"id"}) | {"test_id": test.id})
            )
    return test


def clone_sample(session: Session, source_sample_id: int, lab_id: str) -> int:
    sample = session.get(Sample, source_sample_id)
    assert sample is not None
    copy = Sample.model_validate(sample.model_dump(exclude={"id", "lab_id"}) | {"lab_id": lab_id})
    session.add(copy)
    session.flush()
    assert copy.id is not None
    return copy.id


def seed(samples: int, trial_tests: int, issue_samples: int) -> dict[str, Any]:
    rng = random.Random(20261201)
    engine = get_engine()
    with Session(engine, expire_on_commit=False) as session:
        load_demo(session)
        session.commit()
        technician = user_of(session, Role.TECHNICIAN)
        manager = user_of(session, Role.LAB_MANAGER)
        reviewer = user_of(session, Role.REVIEWER)
        technicians = session.exec(select(User).where(User.role == Role.TECHNICIAN)).all()
        clients = session.exec(
            select(Organisation).where(Organisation.kind == OrganisationKind.CLIENT)
        ).all()

        projects = [
            {
                "client_id": rng.choice(clients).id,
                "number": f"BULK-{n:04d}",
                "name": f"Bulk benchmark project {n}",
                "turnaround_days": rng.choice((10, 15, 20)),
                "created_at": NOW - timedelta(days=1200),
            }
            for n in range(1, 201)
        ]
        insert(session, Project, projects)
        project_ids = list(
            session.exec(select(Project.id).where(col(Project.number).startswith("BULK-"))).all()
        )

        started = time.perf_counter()
        bulk_samples = []
        for n in range(1, samples + 1):
            received = NOW - timedelta(minutes=rng.randint(0, 3 * 365 * 24 * 60))
            bulk_samples.append(
                {
                    "lab_id": f"25-{n:06d}",
                    "project_id": rng.choice(project_ids),
                    "client_sample_id": f"BH-{n % 97:02d}/U{n % 13}",
                    "depth_top_m": round(rng.uniform(0.5, 20), 2),
                    "sample_type": rng.choice(("tube", "bulk", "block")),
                    "description": "Firm grey silty CLAY",
                    "priority": Priority.URGENT if rng.random() < 0.05 else Priority.NORMAL,
                    "received_at": received,
                    "due_date": (received + timedelta(days=rng.choice((10, 15, 20)))).date(),
                }
            )
        insert(session, Sample, bulk_samples)
        sample_ids = ids_by_lab_id(session, "25-")
        # The queue's keys of a bulk test (inserted without the flush hook that keeps them).
        keys_of = {
            row["lab_id"]: {
                "queue_due_date": due_of(None, row["due_date"]),
                "queue_rank": rank_of(row["priority"]),
            }
            for row in bulk_samples
        }
        running_source = demo_test(session, TestState.RUNNING)
        trial_lab_ids = [f"25-{n:06d}" for n in range(1, trial_tests + 1)]
        reserved = set(trial_lab_ids)
        states = [s for s, _ in STATE_SHARES]
        weights = [w for _, w in STATE_SHARES]
        bulk_tests = []
        for lab_id, sample_id in sample_ids.items():
            if lab_id in reserved:
                continue
            state = rng.choices(states, weights)[0]
            assigned = (
                None
                if state == TestState.PLANNED and rng.random() < 0.3
                else rng.choice(technicians).id
            )
            bulk_tests.append(
                {
                    "sample_id": sample_id,
                    "method": rng.choice(list(TestMethod)).value,
                    "standard": "ASTM D5084",
                    "state": state.value,
                    "technician_id": assigned,
                    "requested_at": NOW - timedelta(days=rng.randint(0, 1000)),
                    **keys_of[lab_id],
                }
            )
        insert(session, PermeabilityTest, bulk_tests)
        session.commit()
        bulk_seconds = time.perf_counter() - started

        # Running tests assigned to the technician, each a copy of a demo test with trials,
        # to record new trials on through the real route.
        trial_test_ids = []
        for lab_id in trial_lab_ids:
            test = clone_test(session, running_source, sample_ids[lab_id], with_trials=False)
            test.technician_id = technician.id
            trial_test_ids.append(test.id)
        source_trial = session.exec(
            select(Trial).where(Trial.test_id == running_source.id).order_by(col(Trial.seq))
        ).first()
        assert source_trial is not None

        # Approved tests on samples of their own, to issue certificates from.
        approved_source = demo_test(session, TestState.APPROVED)
        issue_sample_ids = []
        for n in range(1, issue_samples + 1):
            sample_id = clone_sample(session, approved_source.sample_id, f"24-{n:06d}")
            clone_test(session, approved_source, sample_id, with_trials=True)
            issue_sample_ids.append(sample_id)

        certificate = session.exec(
            select(Certificate)
            .where(Certificate.state == CertificateState.ISSUED)
            .order_by(col(Certificate.id))
        ).first()
        assert certificate is not None
        tokens = {
            role: issue_token(session, user, kind=TokenKind.API, label="load benchmark")[0]
            for role, user in (
                ("technician", technician),
                ("manager", manager),
                ("reviewer", reviewer),
            )
        }
        # The pages sign in with a session cookie: the raw session token, signed by the caller.
        tokens["manager_session"] = issue_token(
            session, manager, kind=TokenKind.SESSION, lifetime=timedelta(days=1)
        )[0]
        session.commit()
        counts = {
            "samples": session.exec(select(sa.func.count()).select_from(Sample)).one(),
            "tests": session.exec(select(sa.func.count()).select_from(PermeabilityTest)).one(),
        }
    if engine.dialect.name == "postgresql":
        with engine.connect().execution_options(isolation_level="AUTOCOMMIT") as connection:
            connection.exec_driver_sql("ANALYZE")  # what autovacuum does on a settled database
    return {
        "tokens": tokens,
        "user_id": manager.id,
        "sample_id_range": [min(sample_ids.values()), max(sample_ids.values())],
        "trial_test_ids": trial_test_ids,
        "trial_body": source_trial.entries,
        "issue_sample_ids": issue_sample_ids,
        "certificate_id": certificate.id,
        "counts": counts,
        "bulk_seconds": round(bulk_seconds, 2),
    }


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--samples", type=int, default=100_000)
    parser.add_argument("--trial-tests", type=int, default=1000)
    parser.add_argument("--issue-samples", type=int, default=30)
    args = parser.parse_args()
    started = time.perf_counter()
    migrate(get_settings().database_url)
    facts = seed(args.samples, args.trial_tests, args.issue_samples)
    facts["seconds"] = round(time.perf_counter() - started, 2)
    print(json.dumps(facts))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
