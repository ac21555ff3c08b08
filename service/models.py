"""Every table, imported in one place so the metadata (and Alembic) sees them all."""

from service.accounts.models import AccessToken, Organisation, User
from service.apparatus.models import Apparatus
from service.audit.models import AuditEvent, ChainHead, Checkpoint
from service.certificates.models import Certificate, CertificateTest, PublishedKey
from service.custody.models import CustodyEvent
from service.idempotency.models import IdempotencyRecord
from service.lab_tests.models import (
    PermeabilityTest,
    Reading,
    SaturationStep,
    Specimen,
    TestApparatus,
    Trial,
)
from service.projects.models import Location, Project
from service.queue_keys import install as install_queue_keys
from service.samples.models import Sample
from service.scope.models import ScopeRule, ScopeStandard, ScopeVersion
from service.series.models import CompactionCurvePoint, CompactionSeries, SeriesMember
from service.signoffs.models import SignOff
from service.stored_text import install as install_stored_text_check

__all__ = [
    "AccessToken",
    "Apparatus",
    "AuditEvent",
    "Certificate",
    "CertificateTest",
    "ChainHead",
    "Checkpoint",
    "CompactionCurvePoint",
    "CompactionSeries",
    "CustodyEvent",
    "IdempotencyRecord",
    "Location",
    "Organisation",
    "PermeabilityTest",
    "Project",
    "PublishedKey",
    "Reading",
    "Sample",
    "SaturationStep",
    "ScopeRule",
    "ScopeStandard",
    "ScopeVersion",
    "SeriesMember",
    "SignOff",
    "Specimen",
    "TestApparatus",
    "Trial",
    "User",
]

install_stored_text_check()
install_queue_keys()
