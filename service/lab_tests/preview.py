"""The live preview of a trial being typed: one read, no write.

A test's stored inputs (its reduction request without the new trial, and the default
uncertainties from its apparatus) are kept per process under a stamp that one statement
reads with the test row itself: the test's version and state, and the count, versions and
highest numbers of its trials, specimen, saturation steps and apparatus. Any save changes
the stamp, so a kept request is never used after its test changed, whichever process
saved it; a preview whose stamp matches reduces at once, otherwise the inputs are read
again (a few statements) and kept for the previews that follow.
"""

from __future__ import annotations

import threading
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import sqlalchemy as sa
from sqlmodel import Session, col, func, select

from service.access import can_see
from service.accounts.models import User
from service.apparatus.models import Apparatus
from service.errors import NotFound
from service.lab_tests.models import (
    PermeabilityTest,
    SaturationStep,
    Specimen,
    TestApparatus,
    Trial,
)
from service.lab_tests.reduction import Reduction, StoredRequest, reduce_request, stored_request

_KEPT_TESTS = 512
_kept: dict[int, tuple[tuple[Any, ...], StoredRequest]] = {}
_kept_lock = threading.Lock()


def _of(model: Any, *columns: Any) -> list[Any]:
    """Scalar subqueries over the rows of `model` belonging to the test."""
    return [
        select(column).where(col(model.test_id) == col(PermeabilityTest.id)).scalar_subquery()
        for column in columns
    ]


def _stamp_columns() -> list[Any]:
    apparatus = (
        select(func.coalesce(func.sum(col(Apparatus.id) * 1_000_003 + col(Apparatus.version)), 0))
        .join(TestApparatus, col(TestApparatus.apparatus_id) == col(Apparatus.id))
        .where(col(TestApparatus.test_id) == col(PermeabilityTest.id))
        .scalar_subquery()
    )
    return [
        *_of(Trial, func.count(), func.sum(col(Trial.version)), func.max(col(Trial.seq))),
        *_of(Trial, func.max(col(Trial.id))),
        *_of(Specimen, func.max(col(Specimen.id)), func.max(col(Specimen.version))),
        *_of(SaturationStep, func.count(), func.max(col(SaturationStep.id))),
        *_of(TestApparatus, func.count()),
        apparatus,
    ]


@dataclass(frozen=True)
class PreviewInputs:
    """A test and its stored inputs, ready for a trial being typed."""

    test: PermeabilityTest
    stored: StoredRequest
    next_seq: int

    def reduce(self, entries: Mapping[str, Any] | None) -> Reduction:
        """The reduction with the typed trial added last (key "new"); nothing read or stored."""
        return reduce_request(self.stored, unsaved=entries, number=self.next_seq)


def preview_inputs(session: Session, test_id: int, *, actor: User) -> PreviewInputs:
    """The test (404 unless `actor` may see it) and its stored inputs: one statement when
    they are kept from an earlier preview and nothing changed since."""
    row = session.execute(
        sa.select(PermeabilityTest, *_stamp_columns()).where(col(PermeabilityTest.id) == test_id)
    ).first()
    if row is None or not can_see(session, actor, row[0]):
        raise NotFound(f"test {test_id} not found")
    test: PermeabilityTest = row[0]
    stamp = (test.version, test.state, *row[1:])
    kept = _kept.get(test_id)
    if kept is not None and kept[0] == stamp:
        stored = kept[1]
    else:
        stored = stored_request(session, test)
        with _kept_lock:
            if len(_kept) >= _KEPT_TESTS:
                _kept.clear()
            _kept[test_id] = (stamp, stored)
    highest_seq = row[3]
    return PreviewInputs(test=test, stored=stored, next_seq=int(highest_seq or 0) + 1)


def forget() -> None:
    """Drop every kept request (tests empty their tables between tests)."""
    with _kept_lock:
        _kept.clear()
