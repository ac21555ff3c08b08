"""Demo data: an invented scenario (no real organisation, site or person) for trying Seepline.

Two client organisations, three projects (a reservoir embankment, a landfill cell liner and a
drainage blanket), boreholes, test pits, a borrow source and a stockpile, 30 samples whose tests
stand in every state, trials whose numbers were generated from a chosen k. Loading is
idempotent: it does nothing when the demo lab already exists."""

from __future__ import annotations

import math
import random
from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Any

from sqlmodel import Session, select

from service.accounts.models import Organisation, User
from service.accounts.service import create_user, get_or_create_organisation
from service.apparatus.models import Apparatus
from service.audit.service import record_created
from service.certificates.service import issue_sample_certificate
from service.common import (
    ApparatusKind,
    CustodyKind,
    LocationKind,
    OrganisationKind,
    Preparation,
    Role,
    TestMethod,
    TestState,
)
from service.custody.service import record_custody
from service.db import utcnow
from service.lab_tests import service as lab_tests
from service.lab_tests.models import Specimen
from service.lab_tests.schemas import (
    CorrectionRequest,
    SaturationStepCreate,
    SignOffRequest,
    SpecimenWrite,
    TestCreate,
    TrialCreate,
)
from service.laboratory.service import save_lab_settings
from service.projects.models import Location, Project
from service.samples.ids import next_lab_ids
from service.samples.models import Sample
from service.scope.service import ScopeUpdate, update_scope
from service.stages import service as stages
from service.stages.example import example_stages
from service.stages.models import StageName

LAB_NAME = "Larkspur Soils Laboratory"
# The demo laboratory's identity as its admin would keep it (all invented).
LAB_IDENTITY = {
    "name": LAB_NAME,
    "address": "Unit 4, Quarrymead Works\nLarkspur Vale LV3 9QT",
    "accreditation_body": "Vale Accreditation Council (invented)",
    "accreditation_number": "VAC-T-0417",
}
DEMO_PASSWORDS: dict[str, tuple[str, str]] = {
    "admin@larkspur-lab.example": ("admin", "demo-admin-2026"),
    "manager@larkspur-lab.example": ("lab_manager", "demo-manager-2026"),
    "reception@larkspur-lab.example": ("reception", "demo-reception-2026"),
    "reviewer@larkspur-lab.example": ("reviewer", "demo-reviewer-2026"),
    "tech.brannagh@larkspur-lab.example": ("technician", "demo-tech-2026"),
    "tech.aldous@larkspur-lab.example": ("technician", "demo-tech-2026"),
    "engineer@fennickvale-water.example": ("client", "demo-client-2026"),
    "engineer@orrinbasin-waste.example": ("client", "demo-client-2026"),
}
_NAMES = {
    "admin@larkspur-lab.example": "Morwenna Tallis",
    "manager@larkspur-lab.example": "Dario Penhallow",
    "reception@larkspur-lab.example": "Ines Carrow",
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
    # Dates are set relative to the day of loading, so the queue shows a realistic mix of
    # tests due soon and overdue whenever the demo is tried.
    now = now or utcnow().replace(hour=8, minute=30, second=0, microsecond=0)
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
    save_lab_settings(session, actor=admin, version=None, values=LAB_IDENTITY)
    apparatus = _load_apparatus(session, now, actor_id=admin.id)
    manager = users["manager@larkspur-lab.example"]
    _load_scope(session, manager)
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
                    apparatus_ids=apparatus[plan.method],
                )
            serial += 1
    # Imported here: the series module builds on this one's helpers.
    from service.demo_series import load_compaction_series

    load_compaction_series(
        session,
        now,
        manager=manager,
        technician=technicians[0],
        reviewer=reviewer,
        apparatus_ids=apparatus[TestMethod.FALLING_HEAD],
    )
    _load_stages_test(
        session,
        now,
        technician=technicians[0],
        reviewer=reviewer,
        manager=manager,
        apparatus_ids=apparatus[_PLANS[0].method],
    )
    return True


def _load_scope(session: Session, manager: User) -> None:
    """The demo lab's accredited scope: three ASTM standards, the D5084 repeatability rule
    confirmed; every other limit stays "not yet confirmed" until someone confirms it."""
    standards = [{"standard": s, "edition": ""} for s in ("ASTM D5084", "ASTM D5856", "ASTM D2434")]
    rule = {
        "standard": "ASTM D5084",
        "rule_id": "steady_state",
        "clause": "termination criteria",
        "limits": {"band": 0.25, "band_low_k": 0.50, "low_k": 1e-10},
    }
    update_scope(
        session,
        ScopeUpdate.model_validate(
            {"version": 0, "note": "Demo scope", "standards": standards, "rules": [rule]}
        ),
        actor=manager,
    )


def _load_stages_test(
    session: Session,
    now: datetime,
    *,
    technician: User,
    reviewer: User,
    manager: User,
    apparatus_ids: list[int],
) -> None:
    """One flexible-wall test through every stage (set-up to post-test), its permeation
    intervals recorded as its trials, approved and issued: the reservoir core project."""
    plan = _PLANS[0]
    project = session.exec(select(Project).where(Project.number == plan.number)).one()
    location = session.exec(select(Location).where(Location.project_id == project.id)).first()
    assert location is not None
    sample = _make_sample(
        session, plan, project, location, plan.count, now - timedelta(days=9), manager
    )
    assert sample.id is not None
    test = lab_tests.request_test(
        session,
        sample.id,
        TestCreate.model_validate(
            {
                "method": plan.method,
                "standard": plan.standard,
                "technician_id": technician.id,
                "apparatus_ids": apparatus_ids,
                "cell_pressure": "465 kPa",
                "back_pressure": "430 kPa",
                "effective_confining": "35 kPa",
            }
        ),
        actor=manager,
    )
    assert test.id is not None
    written = {}
    for day, (name, data) in enumerate(example_stages().items()):
        data.started_at = now - timedelta(days=8 - day)
        data.ended_at = now - timedelta(days=7 - day, hours=12)
        written[name] = stages.write_stage(session, test.id, name, data, actor=technician)
    setup = example_stages()[StageName.SETUP].entries
    dims = written[StageName.CONSOLIDATION].outcome["dimensions"]
    lab_tests.write_specimen(
        session,
        test.id,
        SpecimenWrite(
            preparation="remoulded",
            diameter=setup["diameter"],
            length=setup["length"],
            wet_mass=setup["wet_mass"],
            water_content=setup["water_content"],
            specific_gravity=float(str(setup["specific_gravity"])),
            final_diameter=f"{dims['diameter_m'] * 1000:.2f} mm",
            final_length=f"{dims['length_m'] * 1000:.2f} mm",
            description=plan.description,
        ),
        actor=technician,
    )
    for b_check in written[StageName.SATURATION].outcome["b_checks"]:
        lab_tests.add_saturation_step(
            session,
            test.id,
            SaturationStepCreate(
                back_pressure=f"{b_check['back_pressure_pa'] / 1000:g} kPa",
                b_value=round(b_check["b_value"], 3),
            ),
            actor=technician,
        )
    for seq, entries in enumerate(stages.permeation_trials(written[StageName.PERMEATION]), 1):
        lab_tests.record_trial(
            session,
            test.id,
            TrialCreate(**entries),
            idempotency_key=f"demo-stages-{sample.lab_id}-{seq}",
            actor=technician,
        )
    password = DEMO_PASSWORDS[technician.email][1]
    lab_tests.submit_test(session, test.id, SignOffRequest(password=password), actor=technician)
    lab_tests.approve_test(
        session,
        test.id,
        SignOffRequest(password=DEMO_PASSWORDS[reviewer.email][1]),
        actor=reviewer,
    )
    issue_sample_certificate(session, sample.id, actor=reviewer)


def _load_apparatus(
    session: Session, now: datetime, *, actor_id: int | None
) -> dict[TestMethod, list[int]]:
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
    # Every test uses a permeameter, the balance, the thermometer and the caliper (their
    # resolutions become default uncertainties); the overdue timer is left unassigned.
    shared = [item.id for item in items[3:6] if item.id is not None]
    ids = {item.identifier: item.id for item in items if item.id is not None}
    return {
        TestMethod.CONSTANT_HEAD: [ids["PRM-R01"], *shared],
        TestMethod.FALLING_HEAD_RISING_TAIL: [ids["PRM-F02"], *shared],
        TestMethod.FALLING_HEAD: [ids["PRM-F03"], *shared],
        TestMethod.CONSTANT_RATE: [ids["PRM-F02"], *shared],
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


def _specimen_write(rng: random.Random, plan: _ProjectPlan) -> SpecimenWrite:
    if plan.method == TestMethod.CONSTANT_HEAD:
        return SpecimenWrite(
            preparation=Preparation.REMOULDED,
            diameter="101.6 mm",
            length="200.0 mm",
            wet_mass=f"{rng.uniform(3050, 3250):.1f} g",
            water_content=f"{rng.uniform(4.0, 7.0):.1f} %",
            specific_gravity=2.65,
            d10="0.30 mm",
            max_particle_size="9.5 mm",
            retained_on_lower_sieve="12 %",
        )
    diameter = rng.uniform(70.5, 71.5)
    length = rng.uniform(72.0, 74.5)
    bulk = rng.uniform(1.93, 2.02)  # g/cm3
    mass = bulk * math.pi * (diameter / 10) ** 2 / 4 * (length / 10)
    compacted = plan.sample_type != "tube"
    return SpecimenWrite(
        preparation=Preparation.COMPACTED if compacted else Preparation.INTACT,
        diameter=f"{diameter:.2f} mm",
        length=f"{length:.2f} mm",
        wet_mass=f"{mass:.1f} g",
        water_content=f"{rng.uniform(19.0, 24.0):.1f} %",
        specific_gravity=2.70,
        max_dry_density="1.700 g/cm**3" if compacted else None,
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
    apparatus_ids: list[int],
) -> None:
    """Take one test as far as `state` through the same service functions the API uses."""
    assert sample.id is not None
    flexible = plan.method != TestMethod.CONSTANT_HEAD
    test = lab_tests.request_test(
        session,
        sample.id,
        TestCreate.model_validate(
            {
                "method": plan.method,
                "standard": plan.standard,
                "technician_id": technician.id,
                "apparatus_ids": apparatus_ids,
                "cell_pressure": "550 kPa" if flexible else None,
                "back_pressure": "515 kPa" if flexible else None,
                "effective_confining": "35 kPa" if flexible else None,
            }
        ),
        actor=manager,
    )
    assert test.id is not None
    if state == TestState.PLANNED:
        return
    specimen_form = _specimen_write(rng, plan)
    specimen = lab_tests.write_specimen(session, test.id, specimen_form, actor=technician)
    if flexible:
        for back, b_value in ((345, 0.88), (445, 0.94), (515, 0.97)):
            lab_tests.add_saturation_step(
                session,
                test.id,
                SaturationStepCreate(back_pressure=f"{back} kPa", b_value=b_value),
                actor=technician,
            )
    k = 10 ** rng.uniform(*plan.log10_k)
    count = rng.randint(1, 3) if state == TestState.RUNNING else 4
    for seq in range(1, count + 1):
        entries = _trial_entries(rng, plan, k, specimen)
        lab_tests.record_trial(
            session,
            test.id,
            TrialCreate(**entries),
            idempotency_key=f"demo-{sample.lab_id}-{seq}",
            actor=technician,
        )
    if state == TestState.RUNNING:
        return
    password = DEMO_PASSWORDS[technician.email][1]
    lab_tests.submit_test(session, test.id, SignOffRequest(password=password), actor=technician)
    if state == TestState.SUBMITTED:
        return
    reviewer_password = DEMO_PASSWORDS[reviewer.email][1]
    lab_tests.approve_test(
        session, test.id, SignOffRequest(password=reviewer_password), actor=reviewer
    )
    if state == TestState.APPROVED:
        return
    issue_sample_certificate(session, sample.id, actor=reviewer)
    if state == TestState.ISSUED:
        return
    # Superseded: a transcription slip found after issue, corrected in revision 2, which is
    # approved and issued on a new certificate revision that supersedes the first.
    correction = lab_tests.request_correction(
        session,
        test.id,
        CorrectionRequest(
            reason="Specimen length transcribed from the wrong line of the datasheet."
        ),
        actor=manager,
    )
    assert correction.id is not None
    corrected = lab_tests.specimen_of(session, correction.id)
    assert corrected is not None
    assert corrected.length_m is not None
    length_mm = corrected.length_m * 1000 - 0.9
    lab_tests.write_specimen(
        session,
        correction.id,
        SpecimenWrite(version=corrected.version, length=f"{length_mm:.2f} mm"),
        actor=technician,
    )
    lab_tests.submit_test(
        session, correction.id, SignOffRequest(password=password), actor=technician
    )
    lab_tests.approve_test(
        session, correction.id, SignOffRequest(password=reviewer_password), actor=reviewer
    )
    issue_sample_certificate(
        session, sample.id, actor=reviewer, reason="Specimen length corrected (revision 2)."
    )
