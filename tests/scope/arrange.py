"""Tests under ASTM D5084 taken through the lifecycle service, and changes of the scope made
through its service (the lab itself is the manager pages' arrangement, see conftest.py)."""

from __future__ import annotations

import math
from typing import Any

from sqlmodel import Session

from service.common import Preparation, TestMethod
from service.lab_tests import service as lab_tests
from service.lab_tests.models import PermeabilityTest
from service.lab_tests.schemas import SignOffRequest, SpecimenWrite, TestCreate, TrialCreate
from service.scope.service import ScopeUpdate, update_scope, version_number
from tests.factories import make_sample
from tests.web.manager.conftest import PASSWORD, SPECIMEN_D_M, SPECIMEN_L_M, STANDPIPE_M2, Lab

D5084 = "ASTM D5084"
# Four determinations within ±4 % of their mean, no trend.
STEADY_K = (2.0e-10, 2.1e-10, 1.95e-10, 2.05e-10)


def falling_head(k: float) -> dict[str, str]:
    """h2 = h1·exp(−k·A·t/(a·L)): Darcy's law for a falling head (the textbook relation)."""
    area = math.pi * SPECIMEN_D_M**2 / 4
    h2 = math.exp(-k * area * 6 * 3600.0 / (STANDPIPE_M2 * SPECIMEN_L_M))
    return {
        "head_initial": "100.0 cm",
        "head_final": f"{h2 * 100:.2f} cm",
        "duration": "6 h",
        "temperature": "20.0 degC",
    }


def running_test(
    session: Session, lab: Lab, *, standard: str | None = D5084, ks: tuple[float, ...] = STEADY_K
) -> PermeabilityTest:
    """A falling-head test under `standard` with its specimen and trials, still running."""
    sample = make_sample(session, project=lab.project)
    assert sample.id is not None
    test = lab_tests.request_test(
        session,
        sample.id,
        TestCreate(
            method=TestMethod.FALLING_HEAD,
            standard=standard,
            technician_id=lab.technician.id,
            apparatus_ids=[lab.permeameter.id or 0, lab.balance.id or 0, lab.caliper.id or 0],
        ),
        actor=lab.manager,
    )
    assert test.id is not None
    lab_tests.write_specimen(
        session,
        test.id,
        SpecimenWrite(
            preparation=Preparation.INTACT,
            diameter=f"{SPECIMEN_D_M * 1000:.1f} mm",
            length=f"{SPECIMEN_L_M * 1000:.1f} mm",
            wet_mass="570.0 g",
            water_content="22.0 %",
            specific_gravity=2.70,
        ),
        actor=lab.technician,
    )
    for seq, k in enumerate(ks, start=1):
        lab_tests.record_trial(
            session,
            test.id,
            TrialCreate(**falling_head(k)),
            idempotency_key=f"s{test.id}-{seq}",
            actor=lab.technician,
        )
    session.commit()
    return test


def submitted(session: Session, lab: Lab, **kwargs: Any) -> PermeabilityTest:
    test = running_test(session, lab, **kwargs)
    assert test.id is not None
    lab_tests.submit_test(session, test.id, SignOffRequest(password=PASSWORD), actor=lab.technician)
    session.commit()
    return test


def approved(session: Session, lab: Lab, **kwargs: Any) -> PermeabilityTest:
    test = submitted(session, lab, **kwargs)
    assert test.id is not None
    lab_tests.approve_test(session, test.id, SignOffRequest(password=PASSWORD), actor=lab.reviewer)
    session.commit()
    return test


def change_scope(session: Session, lab: Lab, **change: Any) -> int:
    """Apply a change of the scope as the lab manager; returns the new version number."""
    data = ScopeUpdate.model_validate({"version": version_number(session), **change})
    update_scope(session, data, actor=lab.manager)
    session.commit()
    return version_number(session)


def steady_rule(band: float) -> dict[str, Any]:
    """The laboratory's reading of the D5084 repeatability rule with its band."""
    return {
        "standard": D5084,
        "rule_id": "steady_state",
        "edition": "D5084-16a",
        "clause": "9.5",
        "limits": {"band": band, "band_low_k": 0.50, "low_k": 1e-10},
    }


def check_of(test: PermeabilityTest, check_id: str) -> dict[str, Any]:
    assert test.result is not None
    return next(c for c in test.result["checks"] if c["id"] == check_id)
