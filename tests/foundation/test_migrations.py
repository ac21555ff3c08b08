"""Migrations go up, down and up again on the backend under test, and match the models."""

from __future__ import annotations

import hashlib
import json
import uuid
from collections.abc import Iterator
from datetime import UTC, datetime
from pathlib import Path

import pytest
import sqlalchemy as sa
from alembic import command
from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext
from sqlmodel import SQLModel

from service.db import alembic_config, head_revision
from tests.conftest import DATABASE_URL, IS_POSTGRES


@pytest.fixture
def scratch_url(tmp_path: Path) -> Iterator[str]:
    """A brand-new empty database of the backend under test."""
    if not IS_POSTGRES:
        yield f"sqlite:///{tmp_path / 'scratch.db'}"
        return
    name = f"seepline_scratch_{uuid.uuid4().hex[:10]}"
    admin = sa.create_engine(DATABASE_URL, isolation_level="AUTOCOMMIT")
    with admin.connect() as connection:
        connection.exec_driver_sql(f'CREATE DATABASE "{name}"')
    try:
        yield (
            sa.engine.make_url(DATABASE_URL)
            .set(database=name)
            .render_as_string(hide_password=False)
        )
    finally:
        with admin.connect() as connection:
            connection.exec_driver_sql(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')
        admin.dispose()


def _tables(url: str) -> set[str]:
    engine = sa.create_engine(url)
    try:
        return set(sa.inspect(engine).get_table_names()) - {"alembic_version"}
    finally:
        engine.dispose()


def test_upgrade_downgrade_upgrade(scratch_url: str) -> None:
    config = alembic_config(scratch_url)
    command.upgrade(config, "head")
    assert _tables(scratch_url) == set(SQLModel.metadata.tables)
    command.downgrade(config, "base")
    assert _tables(scratch_url) == set()
    command.upgrade(config, "head")
    assert _tables(scratch_url) == set(SQLModel.metadata.tables)


def test_models_and_migrations_agree(scratch_url: str) -> None:
    """The equivalent of `alembic check`: autogenerate finds nothing to add."""
    command.upgrade(alembic_config(scratch_url), "head")
    engine = sa.create_engine(scratch_url)
    try:
        with engine.connect() as connection:
            context = MigrationContext.configure(connection, opts={"compare_type": True})
            assert compare_metadata(context, SQLModel.metadata) == []
            assert context.get_current_revision() == head_revision()
    finally:
        engine.dispose()


def _sealed(rows: list[dict[str, object]]) -> list[dict[str, object]]:
    """Chain rows as the old single chain did: SHA-256 (FIPS 180-4, hashlib) of the canonical
    JSON of every column but id and row_hash, each row carrying the one before's hash."""
    previous = "0" * 64
    for seq, row in enumerate(rows, start=1):
        row["seq"], row["prev_hash"] = seq, previous
        payload = {k: v for k, v in row.items() if k not in {"id", "row_hash"}}
        encoded = json.dumps(
            payload, sort_keys=True, separators=(",", ":"), default=lambda t: t.isoformat()
        )
        row["row_hash"] = previous = hashlib.sha256(encoded.encode()).hexdigest()
    return rows


def _old_logs(url: str, *, tamper: bool = False) -> None:
    """Rows of the two global chains of revision 0001 (foreign keys not enforced: only the
    logs matter here)."""
    when = datetime(2026, 11, 2, 9, tzinfo=UTC)
    custody = _sealed(
        [
            {
                "sample_id": s,
                "kind": k,
                "from_holder": "",
                "to_holder": "",
                "place": p,
                "condition": "",
                "note": "",
                "occurred_at": when,
                "recorded_by_id": None,
            }
            for s, k, p in (
                (1, "received", "reception"),
                (2, "received", "reception"),
                (1, "stored", "Cold room A"),
            )
        ]
    )
    audit = _sealed(
        [
            {
                "entity": e,
                "entity_id": i,
                "field": f,
                "old_value": o,
                "new_value": n,
                "actor_id": None,
                "occurred_at": when,
            }
            for e, i, f, o, n in (
                ("sample", 1, "lab_id", None, "26-0001"),
                ("sample", 2, "lab_id", None, "26-0002"),
                ("sample", 1, "storage_place", None, "Cold room A"),
            )
        ]
    )
    if tamper:
        custody[1]["place"] = "Bench 9"
    engine = sa.create_engine(url)
    with engine.begin() as connection:
        if IS_POSTGRES:
            connection.exec_driver_sql("SET session_replication_role = replica")
        for table, rows in (("custody_event", custody), ("audit_event", audit)):
            names = list(rows[0])
            connection.execute(
                sa.text(
                    f"INSERT INTO {table} ({', '.join(names)}) "
                    f"VALUES ({', '.join(':' + n for n in names)})"
                ),
                rows,
            )
        connection.execute(
            sa.text("INSERT INTO chain_head (name, last_seq, last_hash) VALUES (:n, 3, :h)"),
            [
                {"n": "custody", "h": custody[-1]["row_hash"]},
                {"n": "audit", "h": audit[-1]["row_hash"]},
            ],
        )
    engine.dispose()


def test_upgrade_rechains_the_old_logs_per_entity(scratch_url: str) -> None:
    from sqlmodel import Session

    from service.audit.chain import verify

    config = alembic_config(scratch_url)
    command.upgrade(config, "0001")
    _old_logs(scratch_url)
    command.upgrade(config, "head")
    engine = sa.create_engine(scratch_url)
    with Session(engine) as session:
        custody, audit = verify(session, "custody"), verify(session, "audit")
        assert (custody.ok, custody.rows, custody.chains) == (True, 3, 2), custody.problem
        assert (audit.ok, audit.rows, audit.chains) == (True, 3, 2), audit.problem
        seqs = session.execute(
            sa.text("SELECT sample_id, seq, place FROM custody_event ORDER BY id")
        ).all()
        assert [tuple(row) for row in seqs] == [
            (1, 1, "reception"),
            (2, 1, "reception"),
            (1, 2, "Cold room A"),
        ]
        changes = session.execute(
            sa.text("SELECT chain, seq, changes FROM audit_event ORDER BY id")
        ).all()
        assert [(c, s) for c, s, _ in changes] == [
            ("sample:1", 1),
            ("sample:2", 1),
            ("sample:1", 2),
        ]
        assert json.loads(changes[2][2]) == {"storage_place": {"old": None, "new": "Cold room A"}}
    engine.dispose()


def test_upgrade_refuses_to_reseal_a_broken_log(scratch_url: str) -> None:
    config = alembic_config(scratch_url)
    command.upgrade(config, "0001")
    _old_logs(scratch_url, tamper=True)
    with pytest.raises(RuntimeError, match="custody log is broken at row 2"):
        command.upgrade(config, "head")
