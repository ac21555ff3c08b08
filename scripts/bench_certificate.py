"""Time certificate generation on the demo data: median of N runs, which must stay < 500 ms.

    .venv/bin/python scripts/bench_certificate.py [--runs 20]

Measures (1) building the certificate document from the database and rendering the PDF,
and (2) a whole issue (document, PDF, SHA-256, Ed25519 signature, rows, audit), rolled back
after each run. Uses a throwaway SQLite database and signing key; exits 1 over the budget."""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import tempfile
import time
from pathlib import Path

BUDGET_MS = 500.0


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=20)
    args = parser.parse_args()
    workdir = Path(tempfile.mkdtemp(prefix="seepline-bench-"))
    os.environ["DATABASE_URL"] = f"sqlite:///{workdir / 'bench.db'}"
    os.environ["ENVIRONMENT"] = "test"
    os.environ["SECRET_KEY"] = "bench-secret-key-not-for-production"
    os.environ["SIGNING_KEY_PATH"] = str(workdir / "signing_key.pem")
    os.environ["ARGON2_TIME_COST"] = "1"
    os.environ["ARGON2_MEMORY_COST_KIB"] = "64"
    sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

    from sqlmodel import Session, select

    import service.models  # noqa: F401
    from service.accounts.models import User
    from service.certificates.document import build_document
    from service.certificates.render import render_pdf
    from service.certificates.service import issue_sample_certificate
    from service.common import CertificateKind, Role, TestState
    from service.db import get_engine, migrate
    from service.demo import load_demo
    from service.lab_tests.models import PermeabilityTest
    from service.projects.models import Project
    from service.samples.models import Sample

    migrate(os.environ["DATABASE_URL"])
    with Session(get_engine(), expire_on_commit=False) as session:
        load_demo(session)
        session.commit()
        manager = session.exec(select(User).where(User.role == Role.LAB_MANAGER)).first()
        test = session.exec(
            select(PermeabilityTest).where(PermeabilityTest.state == TestState.APPROVED)
        ).first()
        assert manager is not None
        assert test is not None
        sample = session.get(Sample, test.sample_id)
        assert sample is not None
        assert sample.id is not None
        project = session.get(Project, sample.project_id)
        assert project is not None

        def generate() -> bytes:
            document = build_document(
                session,
                kind=CertificateKind.SAMPLE,
                project=project,
                samples=[(sample, [test])],
                number="SC-BENCH",
                revision=1,
                verification_code="BNCH-BNCH-BNCH",
                issued_at=test.approved_at or test.requested_at,
                issued_by=manager,
                key_id="bench",
            )
            return render_pdf(document)

        def issue() -> bytes:
            savepoint = session.begin_nested()
            try:
                return issue_sample_certificate(session, sample.id, actor=manager).pdf
            finally:
                savepoint.rollback()

        generate()  # warm-up: imports, font metrics, signing key
        issue()
        results = {}
        for name, action in (
            ("generate (document + PDF)", generate),
            ("issue (+hash, sign, store)", issue),
        ):
            timings = []
            size = 0
            for _ in range(args.runs):
                start = time.perf_counter()
                size = len(action())
                timings.append((time.perf_counter() - start) * 1000)
            results[name] = timings
            print(
                f"{name:30s} median {statistics.median(timings):6.1f} ms  "
                f"min {min(timings):6.1f}  max {max(timings):6.1f}  "
                f"({args.runs} runs, PDF {size / 1024:.1f} KiB)"
            )
    worst = max(statistics.median(t) for t in results.values())
    verdict = "within" if worst < BUDGET_MS else "OVER"
    print(f"budget {BUDGET_MS:.0f} ms: {verdict} (worst median {worst:.1f} ms)")
    return 0 if worst < BUDGET_MS else 1


if __name__ == "__main__":
    raise SystemExit(main())
