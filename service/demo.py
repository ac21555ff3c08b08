"""Demo data: an invented scenario (no real organisation, site or person) for trying Seepline.

Two client organisations, three projects (a reservoir embankment, a landfill cell liner and a
drainage blanket), boreholes, test pits, a borrow source and a stockpile, 30 samples whose tests
stand in every state, trials whose numbers were generated from a chosen k. Loading is
idempotent: it does nothing when the demo lab already exists."""

from __future__ import annotations

import math
import random
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from typing import Any

from sqlmodel import Session, select

from service.accounts.models import Organisation, User
from service.accounts.service import create_user, get_or_create_organisation
from service.apparatus.models import Apparatus
from service.audit.service import record_created
from service.common import (
    ApparatusKind,
    CustodyKind,
    LocationKind,
    OrganisationKind,
    Preparation,
    Role,
    SignOffMeaning,
    TestMethod,
    TestState,
)
from service.custody.service import record_custody
from service.lab_tests.models import PermeabilityTest, SaturationStep, Specimen, Trial
from service.lab_tests.payload import build_request, input_hash
from service.projects.models import Location, Project
from service.samples.ids import next_lab_ids
from service.samples.models import Sample
from service.signoffs.models import SignOff

LAB_NAME = "Larkspur Soils Laboratory"
DEMO_PASSWORDS: dict[str, tuple[str, str]] = {
    "admin@larkspur-lab.example": ("admin", "demo-admin-2026"),
    "manager@larkspur-lab.example": ("lab_manager", "demo-manager-2026"),
    "reviewer@larkspur-lab.example": ("reviewer", "demo-reviewer-2026"),
    "tech.brannagh@larkspur-lab.example": ("technician", "demo-tech-2026"),
    "tech.aldous@larkspur-lab.example": ("technician", "demo-tech-2026"),
    "engineer@fennickvale-water.example": ("client", "demo-client-2026"),
    "engineer@orrinbasin-waste.example": ("client", "demo-client-2026"),
}
_NAMES = {
    "admin@larkspur-lab.example": "Morwenna Tallis",
    "manager@larkspur-lab.example": "Dario Penhallow",
    "reviewer@larkspur-lab.example": "Signe Oakhart",
    "tech.brannagh@larkspur-lab.example": "Kofi Brannagh",
    "tech.aldous@larkspur-lab.example": "Lena Aldous",
    "engineer@fennickvale-water.example": "Hollis Wren",
    "engineer@orrinbasin-waste.example": "Priya Tolland",
}
_CLIENTS = {
    "engineer@fennickvale-water.example": "Fennick Vale Water Board",
    "engineer@orrinbasin-waste.example": "Orrin Basin Waste Partnership",
}
# Every state a test can be in, spread over the 30 samples (None: received, no test yet).
_STATES: list[TestState | None] = (
    [None] * 5
    + [TestState.PLANNED] * 5
    + [TestState.RUNNING] * 5
    + [TestState.SUBMITTED] * 5
    + [TestState.APPROVED] * 5
    + [TestState.ISSUED] * 4
    + [TestState.SUPERSEDED] * 1
)


@dataclass(frozen=True)
class _ProjectPlan:
    number: str
    name: str
    site: str
    client_email: str
    turnaround_days: int
    spec_text: str
    method: TestMethod
    standard: str
    locations: tuple[tuple[str, LocationKind], ...]
    sample_type: str
    description: str
    count: int
    log10_k: tuple[float, float]


_PLANS = (
    _ProjectPlan(
        "FV-2026-014",
        "Reservoir embankment raising: clay core",
        "Fennick Vale reservoir, north embankment",
        "engineer@fennickvale-water.example",
        15,
        "1e-9 m/s",
        TestMethod.FALLING_HEAD_RISING_TAIL,
        "ASTM D5084",
        (("BH-01", LocationKind.BOREHOLE), ("BH-02", LocationKind.BOREHOLE)),
        "tube",
        "Firm grey silty CLAY with rare fine gravel",
        11,
        (-9.8, -9.1),
    ),
    _ProjectPlan(
        "FV-2026-021",
        "Toe drainage blanket",
        "Fennick Vale reservoir, downstream toe",
        "engineer@fennickvale-water.example",
        10,
        "",
        TestMethod.CONSTANT_HEAD,
        "ASTM D2434",
        (("TP-01", LocationKind.TEST_PIT), ("TP-02", LocationKind.TEST_PIT)),
        "bulk",
        "Clean brown medium to coarse SAND with some fine gravel",
        8,
        (-4.0, -3.0),
    ),
    _ProjectPlan(
        "OB-26-003",
        "Cell 4 compacted mineral liner",
        "Orrin Basin landfill, cell 4",
        "engineer@orrinbasin-waste.example",
        20,
        "1e-9 m/s",
        TestMethod.FALLING_HEAD,
        "ASTM D5084",
        (("BS-A", LocationKind.BORROW_SOURCE), ("SP-1", LocationKind.STOCKPILE)),
        "bulk",
        "Stiff brown sandy CLAY (liner borrow), remoulded",
        11,
        (-9.6, -8.8),
    ),
)


def load_demo(session: Session, *, now: datetime | None = None) -> bool:
    """Load the demo scenario; returns False (and changes nothing) if it is already there."""
    if session.exec(select(Organisation).where(Organisation.name == LAB_NAME)).first():
        return False
    now = now or datetime(2026, 11, 16, 8, 30, tzinfo=UTC)
    rng = random.Random(20261116)
    lab = get_or_create_organisation(session, LAB_NAME, OrganisationKind.LAB)
    users: dict[str, User] = {}
    for email, (role, password) in DEMO_PASSWORDS.items():
        organisation = (
            get_or_create_organisation(session, _CLIENTS[email], OrganisationKind.CLIENT)
            if email in _CLIENTS
            else lab
        )
        users[email] = create_user(
            session,
            organisation=organisation,
            email=email,
            full_name=_NAMES[email],
            role=Role(role),
            password=password,
        )
    admin = users["admin@larkspur-lab.example"]
    apparatus = _load_apparatus(session, now, actor_id=admin.id)
    manager = users["manager@larkspur-lab.example"]
    technicians = [
        users["tech.brannagh@larkspur-lab.example"],
        users["tech.aldous@larkspur-lab.example"],
    ]
    reviewer = users["reviewer@larkspur-lab.example"]
    states = list(_STATES)
    rng.shuffle(states)
    serial = 0
    for plan in _PLANS:
        client_org = session.exec(
            select(Organisation).where(Organisation.name == _CLIENTS[plan.client_email])
        ).one()
        assert client_org.id is not None
        project = Project(
            client_id=client_org.id,
            number=plan.number,
            name=plan.name,
            site=plan.site,
            turnaround_days=plan.turnaround_days,
            spec_k_max_text=plan.spec_text,
            spec_k_max_m_per_s=float(plan.spec_text.split()[0]) if plan.spec_text else None,
            spec_source="client specification" if plan.spec_text else "",
            created_by_id=manager.id,
            created_at=now - timedelta(days=20),
        )
        session.add(project)
        session.flush()
        record_created(session, project, actor_id=manager.id)
        locations = []
        for index, (name, kind) in enumerate(plan.locations):
            assert project.id is not None
            location = Location(
                project_id=project.id,
                name=name,
                kind=kind,
                easting_m=412_300.0 + 85.0 * index,
                northing_m=286_150.0 + 40.0 * index,
                coordinate_system="site grid",
                ground_level_m=112.4 - 1.3 * index,
                ground_level_text=f"{112.4 - 1.3 * index:.1f} m",
            )
            session.add(location)
            session.flush()
            record_created(session, location, actor_id=manager.id)
            locations.append(location)
        for index in range(plan.count):
            state = states[serial]
            received = now - timedelta(days=18 - serial // 3, hours=serial % 5)
            sample = _make_sample(
                session, plan, project, locations[index % 2], index, received, manager
            )
            technician = technicians[serial % 2]
            if state is not None:
                _make_test(
                    session,
                    rng,
                    plan,
                    sample,
                    state,
                    technician=technician,
                    reviewer=reviewer,
                    manager=manager,
                    permeameter=apparatus[plan.method],
                    when=received + timedelta(days=1),
                )
            serial += 1
    return True


def _load_apparatus(
    session: Session, now: datetime, *, actor_id: int | None
) -> dict[TestMethod, Apparatus]:
    today = now.date()
    items = [
        Apparatus(
            identifier="PRM-R01",
            kind=ApparatusKind.RIGID_WALL_PERMEAMETER,
            description="Rigid-wall constant-head permeameter, 102 mm, manometer ports at 150 mm",
            specimen_area_m2=math.pi * 0.1016**2 / 4,
            specimen_area_text="81.07 cm^2",
            port_spacing_m=0.150,
            port_spacing_text="150 mm",
        ),
        Apparatus(
            identifier="PRM-F02",
            kind=ApparatusKind.FLEXIBLE_WALL_PERMEAMETER,
            description="Flexible-wall cell, 71 mm specimens, twin burettes",
            headwater_area_m2=0.710e-4,
            headwater_area_text="0.710 cm^2",
            tailwater_area_m2=0.950e-4,
            tailwater_area_text="0.950 cm^2",
        ),
        Apparatus(
            identifier="PRM-F03",
            kind=ApparatusKind.FLEXIBLE_WALL_PERMEAMETER,
            description="Flexible-wall cell with a single standpipe, constant tailwater",
            standpipe_area_m2=0.300e-4,
            standpipe_area_text="0.300 cm^2",
        ),
        Apparatus(
            identifier="BAL-01",
            kind=ApparatusKind.BALANCE,
            description="Top-pan balance 6 kg",
            resolution_si=0.1e-3,
            resolution_text="0.1 g",
        ),
        Apparatus(
            identifier="THM-04",
            kind=ApparatusKind.THERMOMETER,
            description="Digital thermometer",
            resolution_si=0.1,
            resolution_text="0.1 K",
        ),
        Apparatus(
            identifier="CAL-02",
            kind=ApparatusKind.CALIPER,
            description="Vernier caliper 200 mm",
            resolution_si=0.02e-3,
            resolution_text="0.02 mm",
        ),
        Apparatus(
            identifier="TMR-01",
            kind=ApparatusKind.TIMER,
            description="Bench stopwatch",
            resolution_si=0.1,
            resolution_text="0.1 s",
            # One item overdue on purpose: the register shows it and submissions refuse it.
            calibrated_on=today - timedelta(days=400),
            calibration_due=today - timedelta(days=35),
        ),
    ]
    for item in items:
        if item.calibration_due is None:
            item.calibrated_on = today - timedelta(days=60)
            item.calibration_due = today + timedelta(days=305)
        session.add(item)
        session.flush()
        record_created(session, item, actor_id=actor_id)
    return {
        TestMethod.CONSTANT_HEAD: items[0],
        TestMethod.FALLING_HEAD_RISING_TAIL: items[1],
        TestMethod.FALLING_HEAD: items[2],
        TestMethod.CONSTANT_RATE: items[1],
    }


def _make_sample(
    session: Session,
    plan: _ProjectPlan,
    project: Project,
    location: Location,
    index: int,
    received: datetime,
    manager: User,
) -> Sample:
    assert project.id is not None
    assert location.id is not None
    top = 1.5 + 1.5 * (index // 2) if plan.sample_type == "tube" else 0.3 + 0.4 * (index // 2)
    bottom = top + (0.45 if plan.sample_type == "tube" else 0.5)
    lab_id = next_lab_ids(session, 1, when=received)[0]
    sample = Sample(
        lab_id=lab_id,
        project_id=project.id,
        location_id=location.id,
        client_sample_id=f"{location.name}/{'U' if plan.sample_type == 'tube' else 'B'}{index + 1}",
        depth_top_m=top,
        depth_top_text=f"{top:.2f} m",
        depth_bottom_m=bottom,
        depth_bottom_text=f"{bottom:.2f} m",
        sample_type=plan.sample_type,
        description=plan.description,
        condition="sealed, no visible disturbance" if index % 7 else "wax seal cracked at top",
        seal_intact=bool(index % 7),
        storage_place=f"Cold store rack {chr(65 + index % 4)}{1 + index % 6}",
        priority="urgent" if index % 9 == 4 else "normal",
        received_at=received,
        due_date=(received + timedelta(days=project.turnaround_days)).date(),
        received_by_id=manager.id,
    )
    session.add(sample)
    session.flush()
    record_created(session, sample, actor_id=manager.id)
    assert sample.id is not None
    record_custody(
        session,
        sample_id=sample.id,
        kind=CustodyKind.RECEIVED,
        from_holder=f"{plan.site} site team",
        to_holder="Reception",
        place="Reception bench",
        condition=sample.condition,
        actor_id=manager.id,
        when=received,
    )
    record_custody(
        session,
        sample_id=sample.id,
        kind=CustodyKind.STORED,
        from_holder="Reception",
        to_holder="Sample store",
        place=sample.storage_place,
        actor_id=manager.id,
        when=received + timedelta(minutes=40),
    )
    return sample


def _round(value: float, places: int) -> str:
    return f"{value:.{places}f}"


def _trial_entries(
    rng: random.Random, plan: _ProjectPlan, k: float, specimen: Specimen
) -> dict[str, Any]:
    """Readings a permeameter would give for a specimen of conductivity k (at test temperature)."""
    assert specimen.length_m is not None
    assert specimen.diameter_m is not None
    area = math.pi * specimen.diameter_m**2 / 4
    length = specimen.length_m
    temperature = f"{rng.uniform(19.0, 22.5):.1f} degC"
    k_trial = k * rng.uniform(0.93, 1.07)
    if plan.method == TestMethod.CONSTANT_HEAD:
        head = rng.choice([3.0, 4.5, 6.0]) / 100  # m across the 150 mm port spacing
        duration = 120.0
        volume = k_trial * area * head / 0.150 * duration
        return {
            "volume": f"{volume * 1e6:.0f} mL",
            "duration": f"{duration:.0f} s",
            "head_difference": f"{head * 100:.1f} cm",
            "temperature": temperature,
        }
    if plan.method == TestMethod.FALLING_HEAD:
        a = 0.300e-4
        h1 = rng.choice([120.0, 110.0, 100.0]) / 100
        duration = 6 * 3600.0
        h2 = h1 * math.exp(-k_trial * area * duration / (a * length))
        return {
            "head_initial": f"{h1 * 100:.1f} cm",
            "head_final": f"{h2 * 100:.1f} cm",
            "duration": "6 h",
            "temperature": temperature,
        }
    a_in, a_out = 0.710e-4, 0.950e-4
    h1 = rng.choice([125.0, 120.0, 115.0]) / 100
    duration = 86_400.0
    h2 = h1 * math.exp(-k_trial * area * duration * (a_in + a_out) / (a_in * a_out * length))
    volume = (h1 - h2) / (1 / a_in + 1 / a_out)
    return {
        "head_initial": f"{h1 * 100:.1f} cm",
        "head_final": f"{h2 * 100:.1f} cm",
        "duration": "24 h",
        "temperature": temperature,
        "inflow_volume": f"{volume * 1e6 * rng.uniform(0.99, 1.02):.2f} mL",
        "outflow_volume": f"{volume * 1e6 * rng.uniform(0.96, 1.0):.2f} mL",
    }


def _make_specimen(rng: random.Random, plan: _ProjectPlan, test: PermeabilityTest) -> Specimen:
    assert test.id is not None
    if plan.method == TestMethod.CONSTANT_HEAD:
        diameter, length, mass = 0.1016, 0.200, rng.uniform(3.05, 3.25)
        water = rng.uniform(4.0, 7.0)
        return Specimen(
            test_id=test.id,
            preparation=Preparation.REMOULDED,
            diameter_m=diameter,
            diameter_text="101.6 mm",
            length_m=length,
            length_text="200.0 mm",
            wet_mass_kg=mass,
            wet_mass_text=f"{mass * 1000:.1f} g",
            water_content=water / 100,
            water_content_text=f"{water:.1f} %",
            specific_gravity=2.65,
            d10_m=0.30e-3,
            d10_text="0.30 mm",
            max_particle_size_m=9.5e-3,
            max_particle_size_text="9.5 mm",
            retained_on_lower_sieve_pct=12.0,
        )
    diameter = rng.uniform(0.0705, 0.0715)
    length = rng.uniform(0.0720, 0.0745)
    water = rng.uniform(19.0, 24.0)
    bulk = rng.uniform(1.93, 2.02)  # g/cm3
    mass = bulk * 1000 * math.pi * diameter**2 / 4 * length
    return Specimen(
        test_id=test.id,
        preparation=Preparation.INTACT if plan.sample_type == "tube" else Preparation.COMPACTED,
        diameter_m=diameter,
        diameter_text=f"{diameter * 1000:.2f} mm",
        length_m=length,
        length_text=f"{length * 1000:.2f} mm",
        wet_mass_kg=mass,
        wet_mass_text=f"{mass * 1000:.1f} g",
        water_content=water / 100,
        water_content_text=f"{water:.1f} %",
        specific_gravity=2.70,
        max_dry_density_kg_per_m3=1700.0 if plan.sample_type != "tube" else None,
        max_dry_density_text="1.700 g/cm^3" if plan.sample_type != "tube" else "",
    )


def _make_test(
    session: Session,
    rng: random.Random,
    plan: _ProjectPlan,
    sample: Sample,
    state: TestState,
    *,
    technician: User,
    reviewer: User,
    manager: User,
    permeameter: Apparatus,
    when: datetime,
) -> None:
    from service.engine import parse_request, reduce, result_to_dict

    assert sample.id is not None
    test = PermeabilityTest(
        sample_id=sample.id,
        method=plan.method,
        standard=plan.standard,
        state=TestState.PLANNED,
        technician_id=technician.id,
        spec_k_max_text=plan.spec_text,
        spec_k_max_m_per_s=float(plan.spec_text.split()[0]) if plan.spec_text else None,
        due_date=sample.due_date,
        requested_at=when,
        requested_by_id=manager.id,
    )
    if plan.method != TestMethod.CONSTANT_HEAD:
        test.cell_pressure_kpa, test.cell_pressure_text = 550.0, "550 kPa"
        test.back_pressure_kpa, test.back_pressure_text = 515.0, "515 kPa"
        test.effective_confining_kpa, test.effective_confining_text = 35.0, "35 kPa"
    session.add(test)
    session.flush()
    record_created(session, test, actor_id=manager.id)
    if state == TestState.PLANNED:
        return
    assert test.id is not None
    test.state = TestState.RUNNING
    test.started_at = when + timedelta(hours=2)
    specimen = _make_specimen(rng, plan, test)
    specimen.recorded_by_id = technician.id
    session.add(specimen)
    saturation: list[SaturationStep] = []
    if plan.method != TestMethod.CONSTANT_HEAD:
        for seq, (back, b_value) in enumerate(((345, 0.88), (445, 0.94), (515, 0.97)), start=1):
            step = SaturationStep(
                test_id=test.id,
                seq=seq,
                back_pressure_kpa=float(back),
                back_pressure_text=f"{back} kPa",
                b_value=b_value,
            )
            session.add(step)
            saturation.append(step)
    session.flush()
    k = 10 ** rng.uniform(*plan.log10_k)
    count = rng.randint(1, 3) if state == TestState.RUNNING else 4
    trials = []
    for seq in range(1, count + 1):
        trial = Trial(
            test_id=test.id,
            seq=seq,
            idempotency_key=f"demo-{sample.lab_id}-{seq}",
            entries=_trial_entries(rng, plan, k, specimen),
            recorded_by_id=technician.id,
            recorded_at=when + timedelta(days=seq),
        )
        session.add(trial)
        trials.append(trial)
    session.flush()
    if state == TestState.RUNNING:
        return
    request = build_request(
        test, specimen=specimen, trials=trials, saturation=saturation, permeameter=permeameter
    )
    result = result_to_dict(reduce(parse_request(request)))
    for trial, output in zip(trials, result["trials"], strict=True):
        trial.k_m_per_s = output["k_m_per_s"]
        trial.k_ref_m_per_s = output["k_ref_m_per_s"]
        trial.gradient = output["gradient"]
    test.result = result
    test.result_k_ref_m_per_s = result["result"]["k_ref_m_per_s"]
    test.engine_version = result["engine_version"]
    test.input_hash = input_hash(request)
    test.state = TestState.SUBMITTED
    test.submitted_at = when + timedelta(days=count + 1)
    _sign(session, test, technician, SignOffMeaning.PERFORMED, test.submitted_at)
    if state == TestState.SUBMITTED:
        return
    test.state = TestState.APPROVED
    test.reviewer_id = reviewer.id
    test.approved_at = test.submitted_at + timedelta(hours=20)
    _sign(session, test, reviewer, SignOffMeaning.APPROVED, test.approved_at)
    if state == TestState.APPROVED:
        return
    test.state = TestState.ISSUED
    test.issued_at = test.approved_at + timedelta(hours=3)
    if state == TestState.ISSUED:
        return
    # A superseded test: a transcription slip corrected in revision 2, which is approved.
    test.state = TestState.SUPERSEDED
    correction = PermeabilityTest(
        sample_id=sample.id,
        series=test.series,
        revision=2,
        supersedes_id=test.id,
        correction_reason="Specimen length transcribed as 73.2 mm; the datasheet reads 72.3 mm.",
        method=test.method,
        standard=test.standard,
        state=TestState.APPROVED,
        technician_id=test.technician_id,
        reviewer_id=reviewer.id,
        spec_k_max_text=test.spec_k_max_text,
        spec_k_max_m_per_s=test.spec_k_max_m_per_s,
        result=test.result,
        result_k_ref_m_per_s=test.result_k_ref_m_per_s,
        engine_version=test.engine_version,
        input_hash=test.input_hash,
        requested_at=test.issued_at + timedelta(days=2),
        approved_at=test.issued_at + timedelta(days=3),
        requested_by_id=manager.id,
    )
    session.add(correction)
    session.flush()
    test.superseded_by_id = correction.id
    session.add(test)
    session.flush()


def _sign(
    session: Session, test: PermeabilityTest, user: User, meaning: SignOffMeaning, when: datetime
) -> None:
    assert test.id is not None
    assert user.id is not None
    session.add(test)
    session.flush()
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
