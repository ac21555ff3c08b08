"""Per-entity hash chains, signed checkpoints, key history, signed certificate states.

The custody log gets one chain per sample and the audit log one per owning record (a test
with its trials, specimen, saturation steps and sign-offs; a project with its locations; a
user with their access tokens; any other record alone), each audit row holding its changed
fields as JSON. Existing rows are re-chained: the old global chains are verified first (the
migration stops if either is broken, so a tampered log is never re-sealed), then every row
keeps its place in time and gets its per-entity sequence number and new hashes. The first
signed checkpoint after the upgrade (`seepline checkpoint`, a certificate issue, or the
server's interval) anchors the re-chained logs.

Revision ID: 0002a
Revises: 0001
Create Date: 2026-12-02 08:54:51.707426

"""

import hashlib
import json
from collections.abc import Iterable, Sequence
from datetime import UTC, datetime
from typing import Any

import sqlalchemy as sa
import sqlmodel
from alembic import op

revision: str = "0002a"
down_revision: str | None = "0001"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

GENESIS = "0" * 64
# Frozen copy of service/audit/service.py OWNERS as of this revision.
OWNERS = {
    "trial": ("test_id", "permeability_test"),
    "specimen": ("test_id", "permeability_test"),
    "saturation_step": ("test_id", "permeability_test"),
    "sign_off": ("test_id", "permeability_test"),
    "test_apparatus": ("test_id", "permeability_test"),
    "reading": ("trial_id", "trial"),
    "location": ("project_id", "project"),
    "access_token": ("user_id", "app_user"),
}
CUSTODY_COLUMNS = (
    "id",
    "seq",
    "sample_id",
    "kind",
    "from_holder",
    "to_holder",
    "place",
    "condition",
    "note",
    "occurred_at",
    "recorded_by_id",
    "prev_hash",
    "row_hash",
)
OLD_AUDIT_COLUMNS = (
    "id",
    "seq",
    "entity",
    "entity_id",
    "field",
    "old_value",
    "new_value",
    "actor_id",
    "occurred_at",
    "prev_hash",
    "row_hash",
)
NEW_AUDIT_COLUMNS = (
    "id",
    "chain",
    "seq",
    "entity",
    "entity_id",
    "changes",
    "actor_id",
    "occurred_at",
    "prev_hash",
    "row_hash",
)


def _utc(value: Any) -> Any:
    if isinstance(value, datetime):
        return value.replace(tzinfo=UTC) if value.tzinfo is None else value.astimezone(UTC)
    return value


def _digest(row: dict[str, Any]) -> str:
    """Frozen copy of service/audit/chain.py row_digest as of this revision."""
    payload = {
        name: (value.isoformat() if isinstance(value, datetime) else value)
        for name, value in sorted(row.items())
        if name not in {"id", "row_hash"}
    }
    encoded = json.dumps(payload, sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha256(encoded.encode()).hexdigest()


def _rows(table: str, columns: Sequence[str], order: str) -> list[dict[str, Any]]:
    listed = ", ".join(columns)
    statement = sa.text(f"SELECT {listed} FROM {table} ORDER BY {order}").columns(
        occurred_at=sa.DateTime(timezone=True)
    )
    result = op.get_bind().execute(statement)
    return [{k: _utc(v) for k, v in row._mapping.items()} for row in result]


def _check_global(name: str, rows: list[dict[str, Any]]) -> None:
    """The old single chain must hold before it is re-sealed."""
    heads = op.get_bind().execute(
        sa.text("SELECT last_seq, last_hash FROM chain_head WHERE name = :n"), {"n": name}
    )
    head = heads.first()
    previous = GENESIS
    for expected, row in enumerate(rows, start=1):
        if (
            row["seq"] != expected
            or row["prev_hash"] != previous
            or _digest(row) != row["row_hash"]
        ):
            raise RuntimeError(
                f"The {name} log is broken at row {expected}: it cannot be re-chained. Restore "
                "a backup that passes `seepline verify-logs`, then upgrade."
            )
        previous = row["row_hash"]
    last_seq, last_hash = (head[0], head[1]) if head else (0, GENESIS)
    if (last_seq, last_hash) != (len(rows), previous):
        raise RuntimeError(
            f"The {name} log lost rows after row {len(rows)}: it cannot be re-chained. Restore "
            "a backup that passes `seepline verify-logs`, then upgrade."
        )


def _rechain(rows: Iterable[dict[str, Any]], key_of: Any) -> dict[str, tuple[int, str]]:
    """Give each row its chain's next seq and new hashes (in place); answer the heads."""
    heads: dict[str, tuple[int, str]] = {}
    for row in rows:
        key = key_of(row)
        seq, previous = heads.get(key, (0, GENESIS))
        row["seq"], row["prev_hash"] = seq + 1, previous
        row["row_hash"] = _digest(row)
        heads[key] = (row["seq"], row["row_hash"])
    return heads


def _owners(entities: set[tuple[str, int]]) -> dict[tuple[str, int], str]:
    """The chain key of each (entity, id), following OWNERS as the application does."""
    bind = op.get_bind()
    found: dict[tuple[str, int], str] = {}
    for entity, entity_id in entities:
        current, current_id = entity, entity_id
        while current in OWNERS:
            column, owner = OWNERS[current]
            owner_id = bind.execute(
                sa.text(f"SELECT {column} FROM {current} WHERE id = :i"), {"i": current_id}
            ).scalar()
            if owner_id is None:
                break
            current, current_id = owner, int(owner_id)
        found[(entity, entity_id)] = f"{current}:{current_id}"
    return found


def _update(table: str, rows: list[dict[str, Any]], columns: Sequence[str]) -> None:
    if not rows:
        return
    assignments = ", ".join(f"{c} = :{c}" for c in columns if c != "id")
    op.get_bind().execute(
        sa.text(f"UPDATE {table} SET {assignments} WHERE id = :id"),
        [{c: row[c] for c in columns} for row in rows],
    )


def _write_heads(heads: dict[str, tuple[int, str]]) -> None:
    if heads:
        op.get_bind().execute(
            sa.text(
                "INSERT INTO chain_head (name, last_seq, last_hash, anchored_seq) "
                "VALUES (:name, :seq, :hash, 0)"
            ),
            [{"name": n, "seq": s, "hash": h} for n, (s, h) in heads.items()],
        )


def upgrade() -> None:
    custody = _rows("custody_event", CUSTODY_COLUMNS, "seq")
    audit = _rows("audit_event", OLD_AUDIT_COLUMNS, "seq")
    _check_global("custody", custody)
    _check_global("audit", audit)

    op.create_table(
        "log_checkpoint",
        sa.Column("seq", sa.Integer(), autoincrement=False, nullable=False),
        sa.Column("made_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("reason", sqlmodel.sql.sqltypes.AutoString(length=20), nullable=False),
        sa.Column("heads", sa.Integer(), nullable=False),
        sa.Column("body", sa.Text(), nullable=False),
        sa.Column("digest", sqlmodel.sql.sqltypes.AutoString(length=64), nullable=False),
        sa.Column("key_id", sqlmodel.sql.sqltypes.AutoString(length=64), nullable=False),
        sa.Column("signature", sqlmodel.sql.sqltypes.AutoString(length=200), nullable=False),
        sa.CheckConstraint("seq > 0", name=op.f("ck_log_checkpoint_seq_positive")),
        sa.PrimaryKeyConstraint("seq", name=op.f("pk_log_checkpoint")),
    )
    op.create_table(
        "signing_key",
        sa.Column("key_id", sqlmodel.sql.sqltypes.AutoString(length=64), nullable=False),
        sa.Column("algorithm", sqlmodel.sql.sqltypes.AutoString(length=20), nullable=False),
        sa.Column("public_key", sqlmodel.sql.sqltypes.AutoString(length=100), nullable=False),
        sa.Column("valid_from", sa.DateTime(timezone=True), nullable=False),
        sa.Column("valid_until", sa.DateTime(timezone=True), nullable=True),
        sa.Column("endorsed_by", sqlmodel.sql.sqltypes.AutoString(length=64), nullable=False),
        sa.Column("endorsement", sqlmodel.sql.sqltypes.AutoString(length=200), nullable=False),
        sa.Column("introduced_by", sqlmodel.sql.sqltypes.AutoString(length=64), nullable=False),
        sa.Column("introduction", sqlmodel.sql.sqltypes.AutoString(length=200), nullable=False),
        sa.PrimaryKeyConstraint("key_id", name=op.f("pk_signing_key")),
    )
    with op.batch_alter_table("certificate", schema=None) as batch_op:
        batch_op.add_column(
            sa.Column("state_seq", sa.Integer(), nullable=False, server_default="1")
        )
        batch_op.add_column(
            sa.Column("state_changed_at", sa.DateTime(timezone=True), nullable=True)
        )
        batch_op.add_column(
            sa.Column(
                "state_signature",
                sqlmodel.sql.sqltypes.AutoString(length=200),
                nullable=False,
                server_default="",
            )
        )
        batch_op.add_column(
            sa.Column(
                "state_key_id",
                sqlmodel.sql.sqltypes.AutoString(length=64),
                nullable=False,
                server_default="",
            )
        )
        batch_op.add_column(sa.Column("checkpoint_seq", sa.Integer(), nullable=True))

    op.execute("DELETE FROM chain_head")  # the two global heads
    with op.batch_alter_table("chain_head", schema=None) as batch_op:
        batch_op.add_column(
            sa.Column("anchored_seq", sa.Integer(), nullable=False, server_default="0")
        )
        batch_op.alter_column(
            "name",
            existing_type=sa.VARCHAR(length=20),
            type_=sqlmodel.sql.sqltypes.AutoString(length=90),
            existing_nullable=False,
        )
        batch_op.create_index(
            "ix_chain_head_unanchored",
            ["name"],
            unique=False,
            sqlite_where=sa.text("last_seq > anchored_seq"),
            postgresql_where=sa.text("last_seq > anchored_seq"),
        )

    # Custody: one chain per sample, in the order the events were recorded.
    with op.batch_alter_table("custody_event", schema=None) as batch_op:
        batch_op.drop_constraint(batch_op.f("uq_custody_event_seq"), type_="unique")
    heads = _rechain(custody, lambda row: f"custody/sample:{row['sample_id']}")
    _update("custody_event", custody, CUSTODY_COLUMNS)
    _write_heads(heads)
    with op.batch_alter_table("custody_event", schema=None) as batch_op:
        batch_op.create_unique_constraint(
            batch_op.f("uq_custody_event_sample_id_seq"), ["sample_id", "seq"]
        )

    # Audit: each old per-field row becomes a one-field row in its owner's chain.
    with op.batch_alter_table("audit_event", schema=None) as batch_op:
        batch_op.add_column(
            sa.Column("chain", sqlmodel.sql.sqltypes.AutoString(length=80), nullable=True)
        )
        batch_op.add_column(sa.Column("changes", sa.Text(), nullable=True))
        batch_op.drop_constraint(batch_op.f("uq_audit_event_seq"), type_="unique")
    owners = _owners({(row["entity"], row["entity_id"]) for row in audit})
    converted = [
        {
            "id": row["id"],
            "chain": owners[(row["entity"], row["entity_id"])],
            "seq": 0,
            "entity": row["entity"],
            "entity_id": row["entity_id"],
            "changes": json.dumps(
                {row["field"]: {"old": row["old_value"], "new": row["new_value"]}},
                sort_keys=True,
                separators=(",", ":"),
            ),
            "actor_id": row["actor_id"],
            "occurred_at": row["occurred_at"],
            "prev_hash": "",
            "row_hash": "",
        }
        for row in audit
    ]
    heads = _rechain(converted, lambda row: f"audit/{row['chain']}")
    _update("audit_event", converted, NEW_AUDIT_COLUMNS)
    _write_heads(heads)
    with op.batch_alter_table("audit_event", schema=None) as batch_op:
        batch_op.alter_column(
            "chain",
            existing_type=sqlmodel.sql.sqltypes.AutoString(length=80),
            nullable=False,
        )
        batch_op.alter_column("changes", existing_type=sa.Text(), nullable=False)
        batch_op.create_unique_constraint(batch_op.f("uq_audit_event_chain_seq"), ["chain", "seq"])
        batch_op.drop_column("old_value")
        batch_op.drop_column("new_value")
        batch_op.drop_column("field")


def _text(value: Any) -> str | None:
    if value is None:
        return None
    if isinstance(value, dict | list):
        return json.dumps(value, sort_keys=True)
    return str(value)


def downgrade() -> None:
    """Back to two global chains: each audit row becomes one row per changed field (values
    as text), re-chained in the order recorded; checkpoints and key history are dropped."""
    custody = _rows("custody_event", CUSTODY_COLUMNS, "id")
    audit = _rows("audit_event", NEW_AUDIT_COLUMNS, "occurred_at, id")

    with op.batch_alter_table("custody_event", schema=None) as batch_op:
        batch_op.drop_constraint(batch_op.f("uq_custody_event_sample_id_seq"), type_="unique")
    op.execute("DELETE FROM chain_head")
    with op.batch_alter_table("chain_head", schema=None) as batch_op:
        batch_op.drop_index(
            "ix_chain_head_unanchored",
            sqlite_where=sa.text("last_seq > anchored_seq"),
            postgresql_where=sa.text("last_seq > anchored_seq"),
        )
        batch_op.alter_column(
            "name",
            existing_type=sqlmodel.sql.sqltypes.AutoString(length=90),
            type_=sa.VARCHAR(length=20),
            existing_nullable=False,
        )
        batch_op.drop_column("anchored_seq")
    heads = _rechain(custody, lambda _row: "custody")
    _update("custody_event", custody, CUSTODY_COLUMNS)
    with op.batch_alter_table("custody_event", schema=None) as batch_op:
        batch_op.create_unique_constraint(batch_op.f("uq_custody_event_seq"), ["seq"])

    op.execute("DELETE FROM audit_event")
    with op.batch_alter_table("audit_event", schema=None) as batch_op:
        batch_op.add_column(sa.Column("field", sa.VARCHAR(length=60), nullable=False))
        batch_op.add_column(sa.Column("new_value", sa.TEXT(), nullable=True))
        batch_op.add_column(sa.Column("old_value", sa.TEXT(), nullable=True))
        batch_op.drop_constraint(batch_op.f("uq_audit_event_chain_seq"), type_="unique")
        batch_op.create_unique_constraint(batch_op.f("uq_audit_event_seq"), ["seq"])
        batch_op.drop_column("changes")
        batch_op.drop_column("chain")
    flattened = [
        {
            "seq": 0,
            "entity": row["entity"],
            "entity_id": row["entity_id"],
            "field": field[:60],
            "old_value": _text(values.get("old")),
            "new_value": _text(values.get("new")),
            "actor_id": row["actor_id"],
            "occurred_at": row["occurred_at"],
            "prev_hash": "",
            "row_hash": "",
        }
        for row in audit
        for field, values in json.loads(row["changes"]).items()
    ]
    heads |= _rechain(flattened, lambda _row: "audit")
    if flattened:
        columns = list(flattened[0])
        op.get_bind().execute(
            sa.text(
                f"INSERT INTO audit_event ({', '.join(columns)}) "
                f"VALUES ({', '.join(':' + c for c in columns)})"
            ),
            flattened,
        )
    _write_heads_old(heads)

    with op.batch_alter_table("certificate", schema=None) as batch_op:
        batch_op.drop_column("checkpoint_seq")
        batch_op.drop_column("state_key_id")
        batch_op.drop_column("state_signature")
        batch_op.drop_column("state_changed_at")
        batch_op.drop_column("state_seq")
    op.drop_table("signing_key")
    op.drop_table("log_checkpoint")


def _write_heads_old(heads: dict[str, tuple[int, str]]) -> None:
    if heads:
        op.get_bind().execute(
            sa.text(
                "INSERT INTO chain_head (name, last_seq, last_hash) VALUES (:name, :seq, :hash)"
            ),
            [{"name": n, "seq": s, "hash": h} for n, (s, h) in heads.items()],
        )
