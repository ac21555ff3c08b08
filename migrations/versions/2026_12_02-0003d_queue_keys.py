"""the queue's keys stored on each test (effective due date, urgency rank) and its indexes

Revision ID: 0003d
Revises: 0002b
Create Date: 2026-12-02 13:20:00

"""

from collections.abc import Sequence
from datetime import date

import sqlalchemy as sa
from alembic import op

revision: str = "0003d"
down_revision: str | None = "0002b"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

# As of this revision (a migration keeps its own copy of the rules it applies).
_OPEN = "state IN ('planned', 'running', 'submitted', 'approved')"
_NO_DUE_DATE = date.max


def upgrade() -> None:
    with op.batch_alter_table("permeability_test", schema=None) as batch_op:
        batch_op.add_column(
            sa.Column(
                "queue_due_date",
                sa.Date(),
                nullable=False,
                server_default=sa.literal(_NO_DUE_DATE.isoformat()),
            )
        )
        batch_op.add_column(
            sa.Column("queue_rank", sa.Integer(), nullable=False, server_default="1")
        )
    test = sa.table(
        "permeability_test",
        sa.column("id", sa.Integer),
        sa.column("sample_id", sa.Integer),
        sa.column("due_date", sa.Date),
        sa.column("queue_due_date", sa.Date),
        sa.column("queue_rank", sa.Integer),
    )
    sample = sa.table(
        "sample",
        sa.column("id", sa.Integer),
        sa.column("due_date", sa.Date),
        sa.column("priority", sa.String),
    )
    of_sample = sa.and_(sample.c.id == test.c.sample_id)
    op.execute(
        test.update().values(
            queue_due_date=sa.func.coalesce(
                test.c.due_date,
                sa.select(sample.c.due_date).where(of_sample).scalar_subquery(),
                sa.literal(_NO_DUE_DATE, sa.Date()),
            ),
            queue_rank=sa.select(sa.case((sample.c.priority == "urgent", 0), else_=1))
            .where(of_sample)
            .scalar_subquery(),
        )
    )
    with op.batch_alter_table("permeability_test", schema=None) as batch_op:
        batch_op.alter_column("queue_due_date", server_default=None)
        batch_op.alter_column("queue_rank", server_default=None)
        batch_op.drop_index("ix_permeability_test_state")
        batch_op.create_index(
            "ix_permeability_test_queue", ["state", "technician_id", "queue_due_date"]
        )
        for name, columns in (
            ("ix_permeability_test_open_by_due", ["queue_due_date", "queue_rank", "id"]),
            ("ix_permeability_test_open_by_rank", ["queue_rank", "queue_due_date", "id"]),
        ):
            batch_op.create_index(
                name,
                columns,
                sqlite_where=sa.text(_OPEN),
                postgresql_where=sa.text(_OPEN),
            )


def downgrade() -> None:
    with op.batch_alter_table("permeability_test", schema=None) as batch_op:
        batch_op.drop_index("ix_permeability_test_open_by_rank")
        batch_op.drop_index("ix_permeability_test_open_by_due")
        batch_op.drop_index("ix_permeability_test_queue")
        batch_op.create_index("ix_permeability_test_state", ["state"])
        batch_op.drop_column("queue_rank")
        batch_op.drop_column("queue_due_date")
