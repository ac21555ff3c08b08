"""lab settings (name, address, accreditation); the reception role

Revision ID: 0003b
Revises: 0003a
Create Date: 2026-12-02 13:20:00

"""

from collections.abc import Sequence

import sqlalchemy as sa
import sqlmodel
from alembic import op

revision: str = "0003b"
down_revision: str | None = "0003a"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

_OLD_ROLES = "'technician', 'reviewer', 'lab_manager', 'client', 'admin'"
_NEW_ROLES = "'reception', " + _OLD_ROLES


def _roles(allowed: str) -> None:
    for table in ("app_user", "sign_off"):
        with op.batch_alter_table(table, schema=None) as batch_op:
            batch_op.drop_constraint(op.f(f"ck_{table}_role_allowed"), type_="check")
            batch_op.create_check_constraint(
                op.f(f"ck_{table}_role_allowed"), f"role IN ({allowed})"
            )


def upgrade() -> None:
    op.create_table(
        "lab_settings",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("name", sqlmodel.sql.sqltypes.AutoString(length=200), nullable=False),
        sa.Column("address", sqlmodel.sql.sqltypes.AutoString(length=500), nullable=False),
        sa.Column(
            "accreditation_body", sqlmodel.sql.sqltypes.AutoString(length=200), nullable=False
        ),
        sa.Column(
            "accreditation_number", sqlmodel.sql.sqltypes.AutoString(length=100), nullable=False
        ),
        sa.Column("version", sa.Integer(), nullable=False),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_lab_settings")),
    )
    _roles(_NEW_ROLES)


def downgrade() -> None:
    _roles(_OLD_ROLES)
    op.drop_table("lab_settings")
