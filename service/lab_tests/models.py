"""Permeability tests on a sample: the specimen, its trials and readings, and conditions."""

from __future__ import annotations

from datetime import date, datetime
from typing import Any

import sqlalchemy as sa
from sqlmodel import Field, SQLModel

from service.common import (
    NO_DUE_DATE,
    OPEN_TEST_SQL,
    Preparation,
    TestMethod,
    TestState,
    created_at_field,
    json_field,
    one_of,
    positive,
    timestamp_field,
    version_field,
)
from service.db import JSONType


class PermeabilityTest(SQLModel, table=True):
    """One permeability determination requested on a sample; a correction is a new revision."""

    __tablename__ = "permeability_test"
    __table_args__ = (
        one_of("method", TestMethod),
        one_of("state", TestState),
        sa.UniqueConstraint("sample_id", "series", "revision"),
        sa.CheckConstraint("revision >= 1", name="revision_positive"),
        positive("spec_k_max_m_per_s"),
        positive("target_dry_density_kg_per_m3"),
        sa.CheckConstraint(
            "reference_temperature_c BETWEEN 0 AND 40", name="reference_temperature_range"
        ),
        # The queue: counts and load by state and technician, overdue by due date; the
        # page of open tests in due-date or urgency order, and its keyset paging.
        sa.Index("ix_permeability_test_queue", "state", "technician_id", "queue_due_date"),
        sa.Index(
            "ix_permeability_test_open_by_due",
            "queue_due_date",
            "queue_rank",
            "id",
            sqlite_where=sa.text(OPEN_TEST_SQL),
            postgresql_where=sa.text(OPEN_TEST_SQL),
        ),
        sa.Index(
            "ix_permeability_test_open_by_rank",
            "queue_rank",
            "queue_due_date",
            "id",
            sqlite_where=sa.text(OPEN_TEST_SQL),
            postgresql_where=sa.text(OPEN_TEST_SQL),
        ),
    )

    id: int | None = Field(default=None, primary_key=True)
    sample_id: int = Field(foreign_key="sample.id", index=True)
    series: int = 1  # the n-th test of this sample; revisions of one test share it
    revision: int = 1
    supersedes_id: int | None = Field(default=None, foreign_key="permeability_test.id")
    superseded_by_id: int | None = Field(default=None, foreign_key="permeability_test.id")
    correction_reason: str = Field(default="", max_length=1000)
    method: str = Field(max_length=30)
    standard: str = Field(default="", max_length=40)
    state: str = Field(default="planned", max_length=20)
    technician_id: int | None = Field(default=None, foreign_key="app_user.id", index=True)
    reviewer_id: int | None = Field(default=None, foreign_key="app_user.id")
    permeant: str = Field(default="de-aired tap water", max_length=100)
    reference_temperature_c: float = 20.0
    temperature_correction: str = Field(default="iapws", max_length=20)
    target_dry_density_kg_per_m3: float | None = None
    target_dry_density_text: str = Field(default="", max_length=40)
    spec_k_max_m_per_s: float | None = None
    spec_k_max_text: str = Field(default="", max_length=60)
    # Flexible-wall conditions, as typed and in kPa.
    cell_pressure_kpa: float | None = None
    cell_pressure_text: str = Field(default="", max_length=40)
    back_pressure_kpa: float | None = None
    back_pressure_text: str = Field(default="", max_length=40)
    effective_confining_kpa: float | None = None
    effective_confining_text: str = Field(default="", max_length=40)
    options: dict[str, Any] = json_field()
    # Standard uncertainties from the apparatus register applied where an entry carried none
    # (field name -> quantity text), fixed at submission so the result stays recomputable.
    default_uncertainties: dict[str, Any] = json_field()
    # The reduction stored at submission: engine output, its version and the input hash.
    result: dict[str, Any] | None = Field(default=None, sa_type=JSONType)
    result_k_ref_m_per_s: float | None = None
    engine_version: str = Field(default="", max_length=20)
    # The version of the laboratory's scope the stored result was judged by (None: the
    # engine's built-in rules); a later change of the scope does not touch this result.
    scope_version: int | None = None
    input_hash: str = Field(default="", max_length=64)
    sent_back_reason: str = Field(default="", max_length=1000)
    due_date: date | None = None
    # The queue's order, derived and kept by service/queue_keys.py (not audited): the
    # effective due date (the test's own, else its sample's; NO_DUE_DATE when neither) and
    # the urgency rank of its sample (0 urgent, 1 normal).
    queue_due_date: date = Field(default=NO_DUE_DATE)
    queue_rank: int = 1
    requested_at: datetime = created_at_field()
    started_at: datetime | None = timestamp_field()
    submitted_at: datetime | None = timestamp_field()
    approved_at: datetime | None = timestamp_field()
    issued_at: datetime | None = timestamp_field()
    requested_by_id: int | None = Field(default=None, foreign_key="app_user.id")
    version: int = version_field()


class TestApparatus(SQLModel, table=True):
    """Which register items a test used (permeameter, balance, thermometer, timer ...)."""

    __tablename__ = "test_apparatus"

    test_id: int = Field(foreign_key="permeability_test.id", primary_key=True)
    apparatus_id: int = Field(foreign_key="apparatus.id", primary_key=True)


class Specimen(SQLModel, table=True):
    """The specimen as prepared; each measured value kept as typed beside its SI float."""

    __table_args__ = (
        one_of("preparation", Preparation),
        positive("diameter_m"),
        positive("length_m"),
        positive("wet_mass_kg"),
        positive("final_diameter_m"),
        positive("final_length_m"),
        positive("max_dry_density_kg_per_m3"),
        positive("d10_m"),
        positive("max_particle_size_m"),
        sa.CheckConstraint("water_content IS NULL OR water_content >= 0", name="water_content_ok"),
        sa.CheckConstraint(
            "specific_gravity IS NULL OR specific_gravity BETWEEN 1.0 AND 5.0",
            name="specific_gravity_range",
        ),
    )

    id: int | None = Field(default=None, primary_key=True)
    test_id: int = Field(foreign_key="permeability_test.id", unique=True)
    preparation: str = Field(default="intact", max_length=20)
    diameter_m: float | None = None
    diameter_text: str = Field(default="", max_length=40)
    length_m: float | None = None
    length_text: str = Field(default="", max_length=40)
    wet_mass_kg: float | None = None
    wet_mass_text: str = Field(default="", max_length=40)
    water_content: float | None = None  # fraction
    water_content_text: str = Field(default="", max_length=40)
    specific_gravity: float | None = None
    max_dry_density_kg_per_m3: float | None = None
    max_dry_density_text: str = Field(default="", max_length=40)
    d10_m: float | None = None
    d10_text: str = Field(default="", max_length=40)
    max_particle_size_m: float | None = None
    max_particle_size_text: str = Field(default="", max_length=40)
    retained_on_lower_sieve_pct: float | None = None
    stiff_material: bool = False
    # Dimensions at the time of permeation (after consolidation), flexible-wall tests.
    final_diameter_m: float | None = None
    final_diameter_text: str = Field(default="", max_length=40)
    final_length_m: float | None = None
    final_length_text: str = Field(default="", max_length=40)
    description: str = Field(default="", max_length=300)
    recorded_by_id: int | None = Field(default=None, foreign_key="app_user.id")
    updated_at: datetime = created_at_field()
    version: int = version_field()


class SaturationStep(SQLModel, table=True):
    """A back-pressure saturation step and the B-value measured after it."""

    __tablename__ = "saturation_step"
    __table_args__ = (
        sa.UniqueConstraint("test_id", "seq"),
        sa.CheckConstraint("b_value >= 0 AND b_value <= 1.2", name="b_value_range"),
    )

    id: int | None = Field(default=None, primary_key=True)
    test_id: int = Field(foreign_key="permeability_test.id", index=True)
    seq: int
    back_pressure_kpa: float
    back_pressure_text: str = Field(max_length=40)
    b_value: float
    recorded_at: datetime = created_at_field()


class Trial(SQLModel, table=True):
    """One timed determination. `entries` keeps every field exactly as typed (value and unit
    text, in the reduction contract's shape); the SI columns and outputs are derived from it."""

    __table_args__ = (
        sa.UniqueConstraint("test_id", "seq"),
        sa.UniqueConstraint("test_id", "idempotency_key"),
        positive("duration_s"),
        positive("volume_m3"),
        positive("head_difference_m"),
        positive("head_initial_m"),
        positive("head_final_m"),
        sa.CheckConstraint(
            "head_final_m IS NULL OR head_initial_m IS NULL OR head_final_m < head_initial_m",
            name="head_falls",
        ),
        sa.CheckConstraint("seq >= 1", name="seq_positive"),
    )

    id: int | None = Field(default=None, primary_key=True)
    test_id: int = Field(foreign_key="permeability_test.id", index=True)
    seq: int
    idempotency_key: str = Field(max_length=64)
    entries: dict[str, Any] = json_field()
    duration_s: float | None = None
    temperature_c: float | None = None
    volume_m3: float | None = None
    head_difference_m: float | None = None
    head_initial_m: float | None = None
    head_final_m: float | None = None
    excluded: bool = False
    exclusion_reason: str = Field(default="", max_length=300)
    k_m_per_s: float | None = None
    k_ref_m_per_s: float | None = None
    gradient: float | None = None
    flags: list[Any] = json_field(list)
    recorded_by_id: int | None = Field(default=None, foreign_key="app_user.id")
    recorded_at: datetime = created_at_field()
    version: int = version_field()


class Reading(SQLModel, table=True):
    """A time and head reading within a multi-reading falling-head run."""

    __table_args__ = (
        sa.UniqueConstraint("trial_id", "seq"),
        sa.CheckConstraint("time_s >= 0", name="time_non_negative"),
        sa.CheckConstraint("head_m > 0", name="head_positive"),
    )

    id: int | None = Field(default=None, primary_key=True)
    trial_id: int = Field(foreign_key="trial.id", index=True)
    seq: int
    time_s: float
    time_text: str = Field(max_length=40)
    head_m: float
    head_text: str = Field(max_length=40)
