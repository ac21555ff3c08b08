"""The demo's compaction series: six certified specimens of the liner borrow (invented),
loaded by service.demo.load_demo after the projects it belongs to."""

from __future__ import annotations

import math
import random
from datetime import datetime, timedelta

from sqlmodel import Session, select

from service.accounts.models import User
from service.certificates.service import issue_sample_certificate
from service.common import (
    Preparation,
)
from service.demo import _PLANS, DEMO_PASSWORDS, _make_sample, _trial_entries
from service.lab_tests import service as lab_tests
from service.lab_tests.schemas import (
    SaturationStepCreate,
    SignOffRequest,
    SpecimenWrite,
    TestCreate,
    TrialCreate,
)
from service.projects.models import Location, Project
from service.series.service import (
    CurvePointCreate,
    MemberCreate,
    SeriesCreate,
    add_curve_point,
    add_member,
    create_series,
)

# --- a compaction series (service/series) -------------------------------------------------------
# Invented: six specimens of the cell 4 liner borrow compacted either side of the optimum of a
# standard-effort compaction test, with k chosen so the wet side meets 1e-9 m/s and the dry
# side does not, as compacted clays behave (Daniel & Benson 1990, docs/methods.md §14.7).
_SERIES_POINTS = (  # the compaction test: water content [%], dry density [Mg/m³]
    (10.0, 1.660),
    (12.0, 1.720),
    (14.0, 1.755),
    (16.0, 1.745),
    (18.0, 1.700),
    (20.0, 1.640),
)
_SERIES_SPECIMENS = (  # name, water content [%], dry density [Mg/m³], k at 20 °C [m/s]
    ("CS-1", 11.0, 1.690, 6.0e-9),
    ("CS-2", 13.0, 1.745, 1.6e-9),
    ("CS-3", 15.0, 1.760, 5.5e-10),
    ("CS-4", 17.0, 1.725, 2.5e-10),
    ("CS-5", 19.0, 1.675, 1.8e-10),
    ("CS-6", 16.0, 1.680, 6.5e-10),
)


def load_compaction_series(
    session: Session,
    now: datetime,
    *,
    manager: User,
    technician: User,
    reviewer: User,
    apparatus_ids: list[int],
) -> None:
    """A compaction series of six certified specimens on the liner project (OB-26-003),
    compacted from one bulk sample of the borrow source."""
    plan = next(p for p in _PLANS if p.number == "OB-26-003")
    project = session.exec(select(Project).where(Project.number == plan.number)).one()
    source = session.exec(
        select(Location).where(Location.project_id == project.id, Location.name == "BS-A")
    ).one()
    assert project.id is not None
    rng = random.Random(20261202)
    password = DEMO_PASSWORDS[technician.email][1]
    reviewer_password = DEMO_PASSWORDS[reviewer.email][1]
    series = create_series(
        session,
        project.id,
        SeriesCreate(
            name="Cell 4 liner borrow, standard effort",
            material=plan.description,
            specific_gravity=2.70,
            compaction_effort="standard",
        ),
        actor=manager,
    )
    assert series.id is not None
    for w, rho in _SERIES_POINTS:
        add_curve_point(
            session,
            series.id,
            CurvePointCreate(water_content=f"{w:.1f} %", dry_density=f"{rho:.3f} g/cm**3"),
            actor=technician,
        )
    # One bulk sample of the borrow material; each specimen is compacted from it (one test each).
    sample = _make_sample(session, plan, project, source, 20, now - timedelta(days=12), manager)
    assert sample.id is not None
    tests: list[tuple[str, float, float, int]] = []
    for name, w, rho, k in _SERIES_SPECIMENS:
        test = lab_tests.request_test(
            session,
            sample.id,
            TestCreate.model_validate(
                {
                    "method": plan.method,
                    "standard": plan.standard,
                    "technician_id": technician.id,
                    "apparatus_ids": apparatus_ids,
                    "cell_pressure": "550 kPa",
                    "back_pressure": "515 kPa",
                    "effective_confining": "35 kPa",
                }
            ),
            actor=manager,
        )
        assert test.id is not None
        diameter, length = 71.0, 73.0  # mm
        volume_cm3 = math.pi * (diameter / 10) ** 2 / 4 * (length / 10)
        specimen = lab_tests.write_specimen(
            session,
            test.id,
            SpecimenWrite(
                preparation=Preparation.COMPACTED,
                diameter=f"{diameter:.2f} mm",
                length=f"{length:.2f} mm",
                wet_mass=f"{rho * (1 + w / 100) * volume_cm3:.1f} g",
                water_content=f"{w:.1f} %",
                specific_gravity=2.70,
                max_dry_density="1.760 g/cm**3",
            ),
            actor=technician,
        )
        for back, b_value in ((345, 0.89), (445, 0.94), (515, 0.97)):
            lab_tests.add_saturation_step(
                session,
                test.id,
                SaturationStepCreate(back_pressure=f"{back} kPa", b_value=b_value),
                actor=technician,
            )
        for seq in range(1, 5):
            lab_tests.record_trial(
                session,
                test.id,
                TrialCreate(**_trial_entries(rng, plan, k, specimen)),
                idempotency_key=f"demo-series-{sample.lab_id}-{seq}",
                actor=technician,
            )
        lab_tests.submit_test(session, test.id, SignOffRequest(password=password), actor=technician)
        lab_tests.approve_test(
            session, test.id, SignOffRequest(password=reviewer_password), actor=reviewer
        )
        tests.append((name, w, rho, test.id))
    issue_sample_certificate(session, sample.id, actor=reviewer)
    for name, w, rho, test_id in tests:
        add_member(
            session,
            series.id,
            MemberCreate(
                test_id=test_id,
                label=name,
                water_content=f"{w:.1f} %",
                dry_density=f"{rho:.3f} g/cm**3",
            ),
            actor=technician,
        )
