"""A test's stored inputs read once: the live preview of a trial being typed (one read, no
write), and a trial's reduction run before the write lock (service/lab_tests/recording.py).

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
from service.lab_tests.reduction import KeptRequest, Reduction, reduce_request, stored_request
from service.scope.models import ScopeVersion

_KEPT_TESTS = 512
_kept: dict[int, tuple[tuple[Any, ...], KeptRequest]] = {}
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
        # The lab's scope: a new version changes the rules a preview judges by.
        select(func.max(col(ScopeVersion.number))).scalar_subquery(),
    ]


@dataclass(frozen=True)
class PreviewInputs:
    """A test, its stored inputs and their stamp, ready for a trial being typed."""

    test: PermeabilityTest
    stored: KeptRequest
    stamp: tuple[Any, ...]
    next_seq: int

    def reduce(self, entries: Mapping[str, Any] | None) -> Reduction:
        """The reduction with the typed trial added last (key "new"); nothing read or stored."""
        return reduce_request(self.stored, unsaved=entries, number=self.next_seq)


def _stamped(session: Session, test_id: int, *, lock: bool = False) -> Any:
    """(the test, its stamp, the next trial number) in one statement, or None."""
    query = sa.select(PermeabilityTest, *_stamp_columns()).where(
        col(PermeabilityTest.id) == test_id
    )
    if lock:
        query = query.with_for_update(of=PermeabilityTest).execution_options(populate_existing=True)
    row = session.execute(query).first()
    if row is None:
        return None
    test: PermeabilityTest = row[0]
    return test, (test.version, test.state, *row[1:]), int(row[3] or 0) + 1


def stamp_of(session: Session, test_id: int) -> tuple[tuple[Any, ...], int]:
    """The stamp of a test's stored inputs and its next trial number, as they stand."""
    found = _stamped(session, test_id)
    if found is None:
        raise NotFound(f"test {test_id} not found")
    return found[1], found[2]


def inputs_of(session: Session, test_id: int) -> PreviewInputs | None:
    """A test's inputs, whoever asks (None when there is no such test): one statement when
    they are kept from before and nothing changed since. Callers check who may see them."""
    found = _stamped(session, test_id)
    if found is None:
        return None
    test, stamp, next_seq = found
    kept = _kept.get(test_id)
    if kept is not None and kept[0] == stamp:
        stored = kept[1]
    else:
        stored = KeptRequest.of(stored_request(session, test))
        with _kept_lock:
            if len(_kept) >= _KEPT_TESTS:
                _kept.clear()
            _kept[test_id] = (stamp, stored)
    return PreviewInputs(test=test, stored=stored, stamp=stamp, next_seq=next_seq)


def preview_inputs(session: Session, test_id: int, *, actor: User) -> PreviewInputs:
    """The test's inputs (404 unless `actor` may see the test)."""
    inputs = inputs_of(session, test_id)
    if inputs is None or not can_see(session, actor, inputs.test):
        raise NotFound(f"test {test_id} not found")
    return inputs


def forget() -> None:
    """Drop every kept request (tests empty their tables between tests)."""
    with _kept_lock:
        _kept.clear()
