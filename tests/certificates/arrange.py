"""Arrange an approved test the way the lifecycle leaves one: rows written directly, the stored
result made by the engine from the typed entries (like service/demo.py), sign-offs recorded.

The numbers are chosen so the expected k can be worked by hand: all trials at 20.0 degC (no
temperature correction), falling headwater with rising tailwater (ASTM D5084 Method C)."""

from __future__ import annotations

import math
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta

from sqlmodel import Session

from service.accounts.models import Organisation, User
from service.apparatus.models import Apparatus
from service.common import (
    ApparatusKind,
    OrganisationKind,
    Preparation,
    Role,
    SignOffMeaning,
    TestMethod,
    TestState,
)
from service.engine import parse_request, reduce, result_to_dict
from service.lab_tests.models import (
    PermeabilityTest,
    SaturationStep,
    Specimen,
    TestApparatus,
    Trial,
)
from service.lab_tests.reduction import build_request, input_hash
from service.projects.models import Location, Project
from service.samples.models import Sample
from service.signoffs.models import SignOff
from tests.factories import make_organisation, make_user

WHEN = datetime(2026, 11, 2, 9, tzinfo=UTC)
A_IN_CM2 = 0.710  # headwater burette area
A_OUT_CM2 = 0.950  # tailwater burette area
DIAMETER_MM = 71.10
LENGTH_MM = 73.20
DURATION_H = 24
HEADS_CM = ((125.0, 113.9), (125.0, 114.0), (124.0, 113.1), (125.0, 114.1))
# Standard uncertainties applied where an entry has none (resolution / sqrt(12) of the
# register's instruments, rounded up): the engine then reports an expanded uncertainty.
DEFAULT_U = {
    "length": "0.02 mm",
    "diameter": "0.02 mm",
    "head_initial": "0.1 cm",
    "head_final": "0.1 cm",
    "duration": "10 s",
    "temperature": "0.1 K",
}


@dataclass
class World:
    lab: Organisation
    client_org: Organisation
    technician: User
    reviewer: User
    manager: User
    client_user: User
    project: Project
    location: Location
    sample: Sample
    test: PermeabilityTest
    permeameter: Apparatus


def trial_entries(h1: float, h2: float) -> dict[str, str]:
    drop = (h1 - h2) / 100  # m of head difference
    volume_ml = drop / (1 / (A_IN_CM2 * 1e-4) + 1 / (A_OUT_CM2 * 1e-4)) * 1e6
    return {
        "head_initial": f"{h1:.1f} cm",
        "head_final": f"{h2:.1f} cm",
        "duration": f"{DURATION_H} h",
        "temperature": "20.0 degC",
        "inflow_volume": f"{volume_ml:.2f} mL",
        "outflow_volume": f"{volume_ml * 0.98:.2f} mL",
    }


def expected_k_method_c(h1_cm: float, h2_cm: float) -> float:
    """k = a_in·a_out·L / ((a_in + a_out)·A·t) · ln(h1/h2): falling headwater, rising tailwater,
    ASTM D5084 Method C (equation from memory; it is the textbook form for unequal burettes)."""
    a_in, a_out = A_IN_CM2 * 1e-4, A_OUT_CM2 * 1e-4
    area = math.pi * (DIAMETER_MM / 1000) ** 2 / 4
    length = LENGTH_MM / 1000
    seconds = DURATION_H * 3600
    return a_in * a_out * length / ((a_in + a_out) * area * seconds) * math.log(h1_cm / h2_cm)


def reduce_and_store(
    session: Session,
    test: PermeabilityTest,
    specimen: Specimen,
    trials: list[Trial],
    saturation: list[SaturationStep],
    permeameter: Apparatus,
) -> None:
    request = build_request(
        test, specimen=specimen, trials=trials, saturation=saturation, permeameter=permeameter
    )
    result = result_to_dict(reduce(parse_request(request, DEFAULT_U)))
    for trial, output in zip(trials, result["trials"], strict=True):
        trial.k_m_per_s = output["k_m_per_s"]
        trial.k_ref_m_per_s = output["k_ref_m_per_s"]
        trial.gradient = output["gradient"]
        session.add(trial)
    test.result = result
    test.result_k_ref_m_per_s = result["result"]["k_ref_m_per_s"]
    test.engine_version = result["engine_version"]
    test.input_hash = input_hash(request)
    session.add(test)
    session.flush()


def add_approved_test(
    session: Session,
    *,
    sample: Sample,
    technician: User,
    reviewer: User,
    permeameter: Apparatus,
    heads: tuple[tuple[float, float], ...] = HEADS_CM,
    length_text: str = f"{LENGTH_MM:.2f} mm",
    series: int = 1,
    revision: int = 1,
    supersedes: PermeabilityTest | None = None,
    correction_reason: str = "",
    spec_text: str = "1e-9 m/s",
) -> PermeabilityTest:
    assert sample.id is not None
    assert permeameter.id is not None
    test = PermeabilityTest(
        sample_id=sample.id,
        series=series,
        revision=revision,
        supersedes_id=supersedes.id if supersedes else None,
        correction_reason=correction_reason,
        method=TestMethod.FALLING_HEAD_RISING_TAIL,
        standard="ASTM D5084",
        state=TestState.RUNNING,
        technician_id=technician.id,
        spec_k_max_text=spec_text,
        spec_k_max_m_per_s=float(spec_text.split()[0]) if spec_text else None,
        cell_pressure_kpa=550.0,
        cell_pressure_text="550 kPa",
        back_pressure_kpa=515.0,
        back_pressure_text="515 kPa",
        effective_confining_kpa=35.0,
        effective_confining_text="35 kPa",
        requested_at=WHEN,
    )
    session.add(test)
    session.flush()
    assert test.id is not None
    if supersedes is not None:
        supersedes.superseded_by_id = test.id
        session.add(supersedes)
    session.add(TestApparatus(test_id=test.id, apparatus_id=permeameter.id))
    specimen = Specimen(
        test_id=test.id,
        preparation=Preparation.INTACT,
        diameter_m=DIAMETER_MM / 1000,
        diameter_text=f"{DIAMETER_MM:.2f} mm",
        length_m=float(length_text.split()[0]) / 1000,
        length_text=length_text,
        wet_mass_kg=0.5600,
        wet_mass_text="560.0 g",
        water_content=0.224,
        water_content_text="22.4 %",
        specific_gravity=2.72,
        max_dry_density_kg_per_m3=1680.0,
        max_dry_density_text="1.680 g/cm**3",
        recorded_by_id=technician.id,
    )
    session.add(specimen)
    saturation = []
    for seq, (back, b_value) in enumerate(((345, 0.90), (445, 0.94), (515, 0.97)), start=1):
        step = SaturationStep(
            test_id=test.id,
            seq=seq,
            back_pressure_kpa=float(back),
            back_pressure_text=f"{back} kPa",
            b_value=b_value,
        )
        session.add(step)
        saturation.append(step)
    trials = []
    for seq, (h1, h2) in enumerate(heads, start=1):
        trial = Trial(
            test_id=test.id,
            seq=seq,
            idempotency_key=f"cert-{test.id}-{seq}",
            entries=trial_entries(h1, h2),
            duration_s=DURATION_H * 3600.0,
            temperature_c=20.0,
            head_initial_m=h1 / 100,
            head_final_m=h2 / 100,
            recorded_by_id=technician.id,
            recorded_at=WHEN + timedelta(days=seq),
        )
        session.add(trial)
        trials.append(trial)
    session.flush()
    reduce_and_store(session, test, specimen, trials, saturation, permeameter)
    test.state = TestState.APPROVED
    test.reviewer_id = reviewer.id
    test.submitted_at = WHEN + timedelta(days=5)
    test.approved_at = WHEN + timedelta(days=6)
    session.add(test)
    session.flush()
    for user, meaning, when in (
        (technician, SignOffMeaning.PERFORMED, test.submitted_at),
        (reviewer, SignOffMeaning.APPROVED, test.approved_at),
    ):
        assert user.id is not None
        session.add(
            SignOff(
                test_id=test.id,
                user_id=user.id,
                role=user.role,
                meaning=meaning,
                content_hash=test.input_hash,
                test_version=test.version,
                signed_at=when,
            )
        )
    session.flush()
    return test


def build_world(session: Session) -> World:
    lab = make_organisation(
        session,
        kind=OrganisationKind.LAB,
        name="Quillmere Soils Laboratory",
        address="Unit 4, Example Trading Estate",
    )
    client_org = make_organisation(session, name="Harrowgate Dam Trust (example)")
    technician = make_user(session, role=Role.TECHNICIAN, organisation=lab, full_name="Tam Ridley")
    reviewer = make_user(session, role=Role.REVIEWER, organisation=lab, full_name="Ines Varga")
    manager = make_user(session, role=Role.LAB_MANAGER, organisation=lab, full_name="Olu Brand")
    client_user = make_user(
        session, role=Role.CLIENT, organisation=client_org, full_name="Casey Client"
    )
    assert client_org.id is not None
    project = Project(
        client_id=client_org.id,
        number="HD-2026-07",
        name="Embankment core borrow",
        site="Harrowgate reservoir (invented)",
        spec_k_max_m_per_s=1e-9,
        spec_k_max_text="1e-9 m/s",
        spec_source="client specification clause 4.2",
    )
    session.add(project)
    session.flush()
    assert project.id is not None
    location = Location(
        project_id=project.id,
        name="BH-07",
        kind="borehole",
        easting_m=412300.0,
        northing_m=286150.0,
        coordinate_system="site grid",
        ground_level_text="112.4 m",
    )
    session.add(location)
    session.flush()
    assert location.id is not None
    sample = Sample(
        lab_id="26-0107",
        project_id=project.id,
        location_id=location.id,
        client_sample_id="BH-07/U3",
        depth_top_m=4.5,
        depth_top_text="4.50 m",
        depth_bottom_m=4.95,
        depth_bottom_text="4.95 m",
        sample_type="tube",
        description="Firm grey silty CLAY",
        condition="sealed, no visible disturbance",
        received_at=WHEN,
    )
    session.add(sample)
    permeameter = Apparatus(
        identifier="PRM-F09",
        kind=ApparatusKind.FLEXIBLE_WALL_PERMEAMETER,
        description="Flexible-wall cell, twin burettes",
        headwater_area_m2=A_IN_CM2 * 1e-4,
        headwater_area_text=f"{A_IN_CM2:.3f} cm**2",
        tailwater_area_m2=A_OUT_CM2 * 1e-4,
        tailwater_area_text=f"{A_OUT_CM2:.3f} cm**2",
    )
    session.add(permeameter)
    session.flush()
    test = add_approved_test(
        session, sample=sample, technician=technician, reviewer=reviewer, permeameter=permeameter
    )
    session.commit()
    return World(
        lab=lab,
        client_org=client_org,
        technician=technician,
        reviewer=reviewer,
        manager=manager,
        client_user=client_user,
        project=project,
        location=location,
        sample=sample,
        test=test,
        permeameter=permeameter,
    )
