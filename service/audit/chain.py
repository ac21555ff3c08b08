"""Hash chains for the custody and audit logs: append under a lock, verify end to end."""

from __future__ import annotations

import hashlib
import json
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import datetime
from typing import Any, Literal, cast

from sqlmodel import Session, SQLModel, col, select

from service.audit.models import AuditEvent, ChainHead
from service.custody.models import CustodyEvent

ChainName = Literal["custody", "audit"]
GENESIS = "0" * 64
_TABLES: dict[str, type[CustodyEvent] | type[AuditEvent]] = {
    "custody": CustodyEvent,
    "audit": AuditEvent,
}


def _canonical(value: Any) -> Any:
    if isinstance(value, datetime):
        return value.isoformat()
    return value


def row_digest(row: SQLModel) -> str:
    """SHA-256 over every column except the surrogate key and the digest itself."""
    payload = {
        name: _canonical(getattr(row, name))
        for name in sorted(type(row).model_fields)
        if name not in {"id", "row_hash"}
    }
    encoded = json.dumps(payload, sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha256(encoded.encode()).hexdigest()


def _lock_head(session: Session, chain: ChainName) -> ChainHead:
    """The chain's head row, locked for the rest of this transaction (read once per transaction)."""
    transaction = session.get_transaction()
    cached = session.info.get(("chain_head", chain))
    # The cached head is trusted only in the same transaction and while still in the session
    # (a rolled-back savepoint expunges a head it created).
    if cached is not None and cached[0] is transaction and cached[1] in session:
        return cast(ChainHead, cached[1])
    head = session.exec(
        select(ChainHead).where(ChainHead.name == chain).with_for_update()
    ).one_or_none()
    if head is None:
        head = ChainHead(name=chain, last_seq=0, last_hash=GENESIS)
        session.add(head)
    session.info[("chain_head", chain)] = (transaction, head)
    return head


def append(session: Session, chain: ChainName, row: CustodyEvent | AuditEvent) -> None:
    """Give `row` the next sequence number and the previous row's hash, then seal it.

    The head is locked on first use in a transaction (SELECT ... FOR UPDATE on PostgreSQL;
    SQLite's write transactions are already exclusive), so concurrent writers queue up."""
    head = _lock_head(session, chain)
    row.seq = head.last_seq + 1
    row.prev_hash = head.last_hash
    row.row_hash = row_digest(row)
    head.last_seq = row.seq
    head.last_hash = row.row_hash
    session.add(row)


@dataclass(frozen=True)
class ChainReport:
    chain: str
    rows: int
    ok: bool
    first_broken_seq: int | None = None
    problem: str = ""

    def as_dict(self) -> dict[str, Any]:
        return {
            "chain": self.chain,
            "rows": self.rows,
            "ok": self.ok,
            "first_broken_seq": self.first_broken_seq,
            "problem": self.problem,
        }


def verify(session: Session, chain: ChainName) -> ChainReport:
    """Walk the chain in sequence order and report the first link that does not hold."""
    table = _TABLES[chain]
    rows = cast(
        Sequence[CustodyEvent | AuditEvent],
        session.exec(select(table).order_by(col(table.seq))).all(),
    )
    expected_prev, expected_seq = GENESIS, 1
    for row in rows:
        if row.seq != expected_seq:
            return ChainReport(
                chain, len(rows), False, expected_seq, f"row {expected_seq} is missing"
            )
        if row.prev_hash != expected_prev:
            return ChainReport(
                chain, len(rows), False, row.seq, f"row {row.seq} does not follow row {row.seq - 1}"
            )
        if row_digest(row) != row.row_hash:
            return ChainReport(chain, len(rows), False, row.seq, f"row {row.seq} was altered")
        expected_prev, expected_seq = row.row_hash, row.seq + 1
    head = session.get(ChainHead, chain)
    last_seq = head.last_seq if head else 0
    if last_seq != len(rows) or (head is not None and head.last_hash != expected_prev):
        return ChainReport(
            chain, len(rows), False, len(rows) + 1, f"rows after {len(rows)} were deleted"
        )
    return ChainReport(chain, len(rows), True)
