"""Corrections and recomputation: a correction of an approved or issued test is a new
revision of the same series (running, with the specimen, conditions, saturation and trials
copied); the old test points to it at once (`superseded_by_id`) and stays approved or
issued, fully readable, until the new revision is approved, when it becomes 'superseded'.
Recomputation reduces the stored entries again and compares with the stored result."""

from __future__ import annotations

import math
from typing import Any

from sqlmodel import Session, func, select

from service.accounts.models import User
from service.audit.service import apply_changes, record_created
from service.common import TestState
from service.db import utcnow
from service.errors import Conflict, invalid
from service.lab_tests import models as tables
from service.lab_tests import reduction
from service.lab_tests.models import PermeabilityTest, Reading, SaturationStep, Specimen, Trial
from service.lab_tests.permissions import Action, may_review, require, wrong_state
from service.lab_tests.reading import (
    apparatus_of,
    get_test,
    readings_of,
    saturation_of,
    specimen_of,
    trials_of,
)
from service.lab_tests.schemas import CorrectionRequest, RecomputeRead

_COPIED_TEST_FIELDS = (
    "sample_id",
    "series",
    "method",
    "standard",
    "technician_id",
    "permeant",
    "reference_temperature_c",
    "temperature_correction",
    "target_dry_density_kg_per_m3",
    "target_dry_density_text",
    "spec_k_max_m_per_s",
    "spec_k_max_text",
    "cell_pressure_kpa",
    "cell_pressure_text",
    "back_pressure_kpa",
    "back_pressure_text",
    "effective_confining_kpa",
    "effective_confining_text",
    "options",
    "due_date",
)


def request_correction(
    session: Session, test_id: int, data: CorrectionRequest, *, actor: User
) -> PermeabilityTest:
    """Correct an approved or issued test: a new revision (same series, revision + 1) with
    the reason, copying specimen, conditions, apparatus, saturation and trials. The old test
    points to it now and becomes superseded when the new revision is approved."""
    old = get_test(session, test_id, actor=actor, lock=True)
    assert old.id is not None
    if old.superseded_by_id is not None and may_review(actor):
        raise Conflict(
            f"test {old.id} already has a correction: test {old.superseded_by_id}",
            detail={"superseded_by_id": old.superseded_by_id},
        )
    require(old, actor, Action.CORRECT, doing="correct")
    reason = data.reason.strip()
    if not reason:
        raise invalid(
            ("reason",), "say what the correction is for", value=data.reason, kind="missing"
        )
    last = session.exec(
        select(func.max(PermeabilityTest.revision)).where(
            PermeabilityTest.sample_id == old.sample_id, PermeabilityTest.series == old.series
        )
    ).one()
    now = utcnow()
    new = PermeabilityTest(
        **{name: getattr(old, name) for name in _COPIED_TEST_FIELDS},
        revision=(last or old.revision) + 1,
        supersedes_id=old.id,
        correction_reason=reason,
        state=TestState.RUNNING,
        requested_by_id=actor.id,
        requested_at=now,
        started_at=now,
    )
    session.add(new)
    session.flush()
    assert new.id is not None
    record_created(session, new, actor_id=actor.id)
    for item in apparatus_of(session, old.id):
        session.add(tables.TestApparatus(test_id=new.id, apparatus_id=item.id or 0))
    specimen = specimen_of(session, old.id)
    rows: list[Any] = []
    if specimen is not None:
        rows.append(
            Specimen(
                **specimen.model_dump(exclude={"id", "test_id", "version", "updated_at"}),
                test_id=new.id,
            )
        )
    rows += [
        SaturationStep(**s.model_dump(exclude={"id", "test_id"}), test_id=new.id)
        for s in saturation_of(session, old.id)
    ]
    old_trials = trials_of(session, old.id)
    readings = readings_of(session, [t.id for t in old_trials if t.id is not None])
    copies = [
        Trial(
            **t.model_dump(
                exclude={"id", "test_id", "version", "k_m_per_s", "k_ref_m_per_s", "gradient"}
            ),
            test_id=new.id,
        )
        for t in old_trials
    ]
    session.add_all(rows + copies)
    session.flush()
    for row in rows + copies:
        record_created(session, row, actor_id=actor.id)
    for source, copy in zip(old_trials, copies, strict=True):
        assert copy.id is not None
        session.add_all(
            Reading(**r.model_dump(exclude={"id", "trial_id"}), trial_id=copy.id)
            for r in readings.get(source.id or 0, [])
        )
    apply_changes(session, old, {"superseded_by_id": new.id}, actor_id=actor.id)
    return new


# --- recomputation ------------------------------------------------------------------------------


def _differences(stored: Any, fresh: Any, path: str = "") -> list[str]:
    if isinstance(stored, dict) and isinstance(fresh, dict):
        out: list[str] = []
        for key in sorted(set(stored) | set(fresh)):
            if key == "engine_version" and not path:
                continue
            where = f"{path}.{key}" if path else str(key)
            if key not in stored or key not in fresh:
                out.append(where)
            else:
                out += _differences(stored[key], fresh[key], where)
        return out
    if isinstance(stored, list) and isinstance(fresh, list):
        if len(stored) != len(fresh):
            return [path]
        out = []
        for index, (a, b) in enumerate(zip(stored, fresh, strict=True)):
            out += _differences(a, b, f"{path}[{index}]")
        return out
    numbers = (int, float)
    if (
        isinstance(stored, numbers)
        and isinstance(fresh, numbers)
        and not isinstance(stored, bool)
        and not isinstance(fresh, bool)
    ):
        return [] if math.isclose(stored, fresh, rel_tol=1e-12, abs_tol=0.0) else [path]
    return [] if stored == fresh else [path]


def recompute(session: Session, test_id: int, *, actor: User) -> RecomputeRead:
    """Reduce the stored entries again with the current engine and compare with the stored
    result (figures to 1e-12 relative; the engine version itself is reported, not compared)."""
    test = get_test(session, test_id, actor=actor)
    if test.result is None:
        raise wrong_state(test, "recompute the stored result of")
    reduced = reduction.reduce_stored(
        session, test, defaults=test.default_uncertainties, scope_version=test.scope_version
    )
    fresh_hash = reduced.input_hash
    fresh = reduced.result
    if fresh is None:
        refused = "; ".join(p.msg for p in reduced.problems)
        differences = [f"the current engine refuses the entries: {refused}"]
        fresh_k = None
    else:
        differences = _differences(test.result, fresh)[:50]
        fresh_k = fresh["result"]["k_ref_m_per_s"]
    result_matches = fresh is not None and not differences
    input_matches = fresh_hash == test.input_hash
    return RecomputeRead(
        test_id=test.id or 0,
        matches=result_matches and input_matches,
        result_matches=result_matches,
        input_matches=input_matches,
        stored_engine_version=test.engine_version,
        current_engine_version=reduction.ENGINE_VERSION,
        stored_input_hash=test.input_hash,
        recomputed_input_hash=fresh_hash,
        stored_k_ref_m_per_s=test.result_k_ref_m_per_s,
        recomputed_k_ref_m_per_s=fresh_k,
        differences=differences,
    )
