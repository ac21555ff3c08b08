"""Bare speed anchors for scripts/bench_load.py: a constant answer, a read of one row by key and
a single-row insert, with none of our rules around them (no sign-in, no audit).

Served only when BENCH_ANCHORS=1 and not in production; otherwise this module defines no
router and the app has no such routes."""

from __future__ import annotations

import secrets
from typing import Any

from fastapi import APIRouter, status

from service.config import get_settings
from service.deps import SessionDep
from service.errors import NotFound
from service.idempotency.models import IdempotencyRecord
from service.samples.models import Sample

PREFIX = "/api/v1/bench-anchors"


def anchor_router() -> APIRouter:
    anchors = APIRouter(prefix=PREFIX, tags=["benchmark anchors"], include_in_schema=False)

    @anchors.get("/constant")
    async def constant() -> dict[str, str]:
        """(a1) A constant JSON answer: the framework's own cost."""
        return {"status": "ok"}

    @anchors.get("/samples/{sample_id}")
    def read_sample(sample_id: int, session: SessionDep) -> dict[str, Any]:
        """(a2) One row read by its key, through the same session the real routes use."""
        sample = session.get(Sample, sample_id)
        if sample is None:
            raise NotFound(f"sample {sample_id} not found")
        return {"sample_id": sample.id, "lab_id": sample.lab_id, "priority": sample.priority}

    @anchors.post("/rows", status_code=status.HTTP_201_CREATED)
    def insert_row(user_id: int, session: SessionDep) -> dict[str, str]:
        """(a3) One row inserted and committed (into the idempotency table, which nothing
        chains or reports), through the same write session the real routes use."""
        key = secrets.token_hex(32)
        session.add(
            IdempotencyRecord(
                key=key, user_id=user_id, request_hash=key, status_code=201, response={}
            )
        )
        return {"key": key}

    return anchors


def _enabled() -> bool:
    settings = get_settings()
    return settings.bench_anchors and settings.environment != "production"


router: APIRouter | None = anchor_router() if _enabled() else None
