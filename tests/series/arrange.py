"""A project with a liner material's compaction series: the invented series of
tests/engine/test_series.py (G_s 2.70, limit 1e-9 m/s), S worked by hand there from
S = w·G_s·ρ_d/(G_s·ρ_w − ρ_d); the acceptable-zone approach of Daniel & Benson (1990),
J. Geotech. Eng. 116(12):1811–1830 (from memory)."""

from __future__ import annotations

from dataclasses import dataclass, field

from sqlmodel import Session

from service.accounts.models import Organisation, User
from service.common import Role, TestState
from service.lab_tests.models import PermeabilityTest
from service.projects.models import Project
from tests.factories import make_organisation, make_project, make_sample, make_test, make_user

# label, moulding w as typed, ρ_d as typed, k20 [m/s]
SPECIMENS = (
    ("A", "12.0 %", "1.700 g/cm**3", 5e-9),
    ("B", "14.0 %", "1750 kg/m**3", 2e-9),
    ("C", "16.0 %", "1.780 g/cm**3", 8e-10),
    ("D", "18.0 %", "1.760 g/cm**3", 3e-10),
    ("E", "20.0 %", "1.720 g/cm**3", 2e-10),
    ("F", "17.0 %", "1.650 g/cm**3", 4e-10),
    ("G", "15.0 %", "1.640 g/cm**3", 3e-9),
    ("H", "19.0 %", "1.600 g/cm**3", 6e-10),
)


@dataclass
class SeriesWorld:
    project: Project
    client_org: Organisation
    technician: User
    manager: User
    client_user: User
    tests: dict[str, PermeabilityTest] = field(default_factory=dict)


def build(session: Session, *, states: dict[str, TestState] | None = None) -> SeriesWorld:
    """Eight tests of one project with stored k20, approved unless `states` says otherwise."""
    client_org = make_organisation(session, name="Tamsin Ridge Landfill Trust")
    project = make_project(
        session,
        client=client_org,
        number="TR-26-01",
        spec_k_max_text="1e-9 m/s",
        spec_k_max_m_per_s=1e-9,
    )
    world = SeriesWorld(
        project=project,
        client_org=client_org,
        technician=make_user(session, role=Role.TECHNICIAN),
        manager=make_user(session, role=Role.LAB_MANAGER),
        client_user=make_user(session, role=Role.CLIENT, organisation=client_org),
    )
    for label, _w, _rho, k in SPECIMENS:
        sample = make_sample(session, project=project, lab_id=f"26-9{ord(label):03d}")
        state = (states or {}).get(label, TestState.APPROVED)
        world.tests[label] = make_test(session, sample=sample, state=state, result_k_ref_m_per_s=k)
    session.commit()
    return world
