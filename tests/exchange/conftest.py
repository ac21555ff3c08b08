"""Fixtures of the export and import tests (arrangement shared with tests/certificates)."""

from __future__ import annotations

from dataclasses import dataclass

import pytest
from sqlmodel import Session

from service.apparatus.models import Apparatus
from service.common import ApparatusKind, Preparation, TestMethod, TestState
from service.lab_tests.models import PermeabilityTest, Specimen, TestApparatus
from tests.certificates.arrange import World, build_world


@dataclass
class ReadingsWorld:
    world: World
    test: PermeabilityTest


@pytest.fixture
def world(session: Session) -> World:
    return build_world(session)


@pytest.fixture
def readings_world(session: Session, world: World) -> ReadingsWorld:
    """A running falling-head test: specimen 10.0 cm long, 5.08 cm across, standpipe 0.300 cm²
    (the geometry of the contract's multi-reading example, reductions-api.md)."""
    assert world.sample.id is not None
    test = PermeabilityTest(
        sample_id=world.sample.id,
        series=2,
        method=TestMethod.FALLING_HEAD,
        standard="ASTM D5084",
        state=TestState.RUNNING,
        technician_id=world.technician.id,
    )
    session.add(test)
    session.flush()
    assert test.id is not None
    standpipe = Apparatus(
        identifier="PRM-S01",
        kind=ApparatusKind.RIGID_WALL_PERMEAMETER,
        standpipe_area_m2=0.300e-4,
        standpipe_area_text="0.300 cm**2",
    )
    session.add(standpipe)
    session.flush()
    assert standpipe.id is not None
    session.add(TestApparatus(test_id=test.id, apparatus_id=standpipe.id))
    session.add(
        Specimen(
            test_id=test.id,
            preparation=Preparation.INTACT,
            diameter_m=0.0508,
            diameter_text="5.08 cm",
            length_m=0.100,
            length_text="10.0 cm",
        )
    )
    session.commit()
    return ReadingsWorld(world=world, test=test)
