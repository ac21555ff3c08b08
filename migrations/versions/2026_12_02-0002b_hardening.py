"""sign-in limits per email address and device; apparatus identifier key

Revision ID: 0002b
Revises: 0002a
Create Date: 2026-12-02 08:46:47.571797

"""

import re
import unicodedata
from collections.abc import Sequence

import sqlalchemy as sa
import sqlmodel
from alembic import op

revision: str = "0002b"
down_revision: str | None = "0002a"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

# The rule of service/text.py identifier_key() as of this revision (a migration keeps its own
# copy: it must give the same keys whatever the code becomes later).
_INVISIBLE = re.compile("[\u061c\u200e\u200f\u202a-\u202e\u2066-\u2069\u200b-\u200d\u2060\ufeff]")


def _key(text: str) -> str:
    normalised = _INVISIBLE.sub("", unicodedata.normalize("NFC", text)).strip()
    return unicodedata.normalize("NFC", normalised.casefold())


def upgrade() -> None:
    op.create_table(
        "sign_in_throttle",
        sa.Column("subject", sqlmodel.sql.sqltypes.AutoString(length=64), nullable=False),
        sa.Column("failures", sa.Integer(), nullable=False),
        sa.Column("last_failure_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("wait_until", sa.DateTime(timezone=True), nullable=True),
        sa.CheckConstraint("failures >= 0", name=op.f("ck_sign_in_throttle_failures_non_negative")),
        sa.PrimaryKeyConstraint("subject", name=op.f("pk_sign_in_throttle")),
    )
    with op.batch_alter_table("apparatus", schema=None) as batch_op:
        batch_op.add_column(
            sa.Column("identifier_key", sqlmodel.sql.sqltypes.AutoString(length=160), nullable=True)
        )
    apparatus = sa.table(
        "apparatus",
        sa.column("id", sa.Integer),
        sa.column("identifier", sa.String),
        sa.column("identifier_key", sa.String),
    )
    connection = op.get_bind()
    used: set[str] = set()
    rows = connection.execute(sa.select(apparatus.c.id, apparatus.c.identifier).order_by("id"))
    for item_id, identifier in rows.all():
        key = _key(identifier)
        # Items that only the old, ASCII-only comparison told apart keep distinct keys.
        if key in used:
            key = f"{key}#{item_id}"
        used.add(key)
        connection.execute(
            apparatus.update().where(apparatus.c.id == item_id).values(identifier_key=key)
        )
    with op.batch_alter_table("apparatus", schema=None) as batch_op:
        batch_op.alter_column(
            "identifier_key",
            existing_type=sqlmodel.sql.sqltypes.AutoString(length=160),
            nullable=False,
        )
        batch_op.create_unique_constraint(
            batch_op.f("uq_apparatus_identifier_key"), ["identifier_key"]
        )


def downgrade() -> None:
    with op.batch_alter_table("apparatus", schema=None) as batch_op:
        batch_op.drop_constraint(batch_op.f("uq_apparatus_identifier_key"), type_="unique")
        batch_op.drop_column("identifier_key")
    op.drop_table("sign_in_throttle")
