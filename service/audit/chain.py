"""Hash chains for the custody and audit logs: one chain per entity, appended under that
entity's head row only, and walked end to end against the signed checkpoints.

A chain's rows count `seq` from 1. Each row stores the previous row's `row_hash`
(`prev_hash`, 64 zeros for row 1) and its own `row_hash`: the SHA-256, in lower-case hex, of
the UTF-8 bytes of the canonical JSON of every column except `id` and `row_hash` (keys sorted,
separators "," and ":", non-ASCII escaped as \\uXXXX, timestamps as ISO 8601 with the UTC
offset, e.g. "2026-12-02T10:15:30.123456+00:00"). The head row (`chain_head`) holds the last
row's seq and hash, so a deleted tail row is seen; a signed checkpoint holds it too, so a
tail deleted together with the head moved back is seen as well."""

from __future__ import annotations

import hashlib
import json
from collections.abc import Iterable, Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from datetime import datetime
from itertools import groupby
from typing import Any, Literal

from sqlalchemy.dialects import postgresql, sqlite
from sqlalchemy.orm import make_transient_to_detached
from sqlalchemy.orm.attributes import set_committed_value
from sqlmodel import Session, SQLModel, col, select

from service.audit.models import AuditEvent, ChainHead
from service.custody.models import CustodyEvent

LogName = Literal["custody", "audit"]
LOGS: tuple[LogName, ...] = ("custody", "audit")
GENESIS = "0" * 64
LOCK_PREFIX = "lock/"
_CACHE = "chain_heads"


def head_name(log: LogName, key: str) -> str:
    """The head row's name: the log, a slash, the chain's key ("custody/sample:17")."""
    return f"{log}/{key}"


def custody_key(sample_id: int) -> str:
    return f"sample:{sample_id}"


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


# --- appending ---------------------------------------------------------------------------------


def _current_transaction(session: Session) -> object:
    return session.get_nested_transaction() or session.get_transaction()


def claim(session: Session, name: str) -> ChainHead:
    """The head row `name`, created if new and locked for the rest of the transaction.

    One statement: INSERT ... ON CONFLICT DO UPDATE ... RETURNING, which on PostgreSQL takes
    the row lock (only writers of the same entity wait); SQLite's write transactions are
    exclusive anyway. Read once per transaction; the ORM writes the new values at flush."""
    transaction = _current_transaction(session)
    cached = session.info.get(_CACHE)
    if cached is not None and cached[0] is transaction and name in cached[1]:
        head: ChainHead = cached[1][name]
        if head in session:
            return head
    dialect = session.get_bind().dialect.name
    insert = postgresql.insert if dialect == "postgresql" else sqlite.insert
    statement = (
        insert(ChainHead)
        .values(name=name, last_seq=0, last_hash=GENESIS, anchored_seq=0)
        .on_conflict_do_update(index_elements=["name"], set_={"name": name})
        .returning(col(ChainHead.last_seq), col(ChainHead.last_hash), col(ChainHead.anchored_seq))
    )
    last_seq, last_hash, anchored_seq = session.execute(statement).one()
    existing = session.identity_map.get(session.identity_key(ChainHead, name))
    if isinstance(existing, ChainHead):
        head = existing
        set_committed_value(head, "last_seq", last_seq)
        set_committed_value(head, "last_hash", last_hash)
        set_committed_value(head, "anchored_seq", anchored_seq)
    else:
        head = ChainHead(
            name=name, last_seq=last_seq, last_hash=last_hash, anchored_seq=anchored_seq
        )
        make_transient_to_detached(head)
        session.add(head)
    if cached is None or cached[0] is not transaction:
        heads: dict[str, ChainHead] = {}
        cached = (transaction, heads)
        session.info[_CACHE] = cached
    cached[1][name] = head
    return head


def lock_name(session: Session, name: str) -> None:
    """Serialise this transaction with every other that locks `name` (a head row that never
    holds a chain: "lock/checkpoint", "lock/reception")."""
    claim(session, LOCK_PREFIX + name)


def append(session: Session, log: LogName, key: str, row: CustodyEvent | AuditEvent) -> None:
    """Give `row` the next sequence number of chain `key` and the previous row's hash, then
    seal it; only this chain's head is locked."""
    head = claim(session, head_name(log, key))
    row.seq = head.last_seq + 1
    row.prev_hash = head.last_hash
    row.row_hash = row_digest(row)
    head.last_seq = row.seq
    head.last_hash = row.row_hash
    session.add(row)


# --- verifying ---------------------------------------------------------------------------------


@dataclass(frozen=True)
class Anchor:
    """A chain's head as one signed checkpoint states it."""

    checkpoint: int
    last_seq: int
    last_hash: str


@dataclass(frozen=True)
class Break:
    chain: str
    seq: int
    problem: str


@dataclass(frozen=True)
class ChainReport:
    """The verdict on one log (all its chains): every link holds, or the first that does not.

    `chain` is the log's name ("custody", "audit"); `first_broken_chain` the entity whose chain
    broke ("sample:17"), `first_broken_seq` its first row that cannot be trusted. Rows after
    the last checkpoint that lists their chain are `unanchored_rows` (not yet anchored)."""

    chain: str
    rows: int
    ok: bool
    first_broken_seq: int | None = None
    problem: str = ""
    first_broken_chain: str | None = None
    chains: int = 0
    unanchored_rows: int = 0
    checkpoint: int | None = None
    broken_chains: tuple[str, ...] = field(default=())

    def as_dict(self) -> dict[str, Any]:
        return {
            "chain": self.chain,
            "rows": self.rows,
            "ok": self.ok,
            "first_broken_seq": self.first_broken_seq,
            "first_broken_chain": self.first_broken_chain,
            "problem": self.problem,
            "chains": self.chains,
            "unanchored_rows": self.unanchored_rows,
            "checkpoint": self.checkpoint,
            "broken_chains": list(self.broken_chains),
        }


def walk_chain(
    key: str,
    rows: Sequence[CustodyEvent | AuditEvent],
    head: ChainHead | None,
    anchors: Sequence[Anchor],
) -> tuple[Break | None, int]:
    """Check one chain's links, its head and every checkpoint that lists it.

    Returns the first break (or None) and how many rows no checkpoint covers yet."""
    hashes: dict[int, str] = {}
    expected_prev, expected_seq = GENESIS, 1
    for row in rows:
        if row.seq != expected_seq:
            return Break(key, expected_seq, f"row {expected_seq} is missing"), 0
        if row.prev_hash != expected_prev:
            return Break(key, row.seq, f"row {row.seq} does not follow row {row.seq - 1}"), 0
        if row_digest(row) != row.row_hash:
            return Break(key, row.seq, f"row {row.seq} was altered"), 0
        hashes[row.seq] = row.row_hash
        expected_prev, expected_seq = row.row_hash, row.seq + 1
    count = len(rows)
    good = 0  # the last row a checkpoint confirmed
    for anchor in anchors:
        if anchor.last_seq > count:
            return Break(
                key,
                count + 1,
                f"row {count + 1} is missing: checkpoint {anchor.checkpoint} signed this "
                f"chain up to row {anchor.last_seq}",
            ), 0
        if hashes.get(anchor.last_seq) != anchor.last_hash:
            first = good + 1
            span = f"row {first}" if first == anchor.last_seq else f"a row from {first} to"
            return Break(
                key,
                first,
                f"{span} {anchor.last_seq} was changed after checkpoint {anchor.checkpoint} "
                f"signed the chain up to row {anchor.last_seq}",
            ), 0
        good = max(good, anchor.last_seq)
    last_seq = head.last_seq if head is not None else 0
    last_hash = head.last_hash if head is not None else GENESIS
    if last_seq > count:
        return Break(key, count + 1, f"rows after {count} were deleted"), 0
    if last_seq != count or last_hash != expected_prev:
        return Break(key, count, f"the chain's head does not match row {count}"), 0
    return None, count - good


def _chain_key(row: CustodyEvent | AuditEvent) -> str:
    if isinstance(row, CustodyEvent):
        return custody_key(row.sample_id)
    return row.chain


def _rows_by_chain(
    session: Session, log: LogName
) -> Iterator[tuple[str, list[CustodyEvent | AuditEvent]]]:
    rows: Iterable[CustodyEvent] | Iterable[AuditEvent]
    if log == "custody":
        rows = session.exec(
            select(CustodyEvent)
            .order_by(col(CustodyEvent.sample_id), col(CustodyEvent.seq))
            .execution_options(yield_per=2000)
        )
    else:
        rows = session.exec(
            select(AuditEvent)
            .order_by(col(AuditEvent.chain), col(AuditEvent.seq))
            .execution_options(yield_per=2000)
        )
    for key, group in groupby(rows, key=_chain_key):
        yield key, list[CustodyEvent | AuditEvent](group)


def verify(
    session: Session,
    log: LogName,
    anchors: Mapping[str, Sequence[Anchor]] | None = None,
    *,
    checkpoint: int | None = None,
) -> ChainReport:
    """Walk every chain of `log` in order and report the first link that does not hold.

    `anchors` maps head names to the checkpoints that list them, oldest first; without it the
    database's own signed checkpoints are used (service/audit/checkpoints.py)."""
    if anchors is None:
        from service.audit.checkpoints import load_anchors

        anchors, checkpoint = load_anchors(session)
    prefix = f"{log}/"
    heads = {
        head.name: head
        for head in session.exec(
            select(ChainHead).where(col(ChainHead.name).startswith(prefix))
        ).all()
    }
    breaks: list[Break] = []
    rows_total = chains = unanchored = 0
    seen: set[str] = set()

    def check(key: str, rows: Sequence[CustodyEvent | AuditEvent]) -> None:
        nonlocal rows_total, chains, unanchored
        name = head_name(log, key)
        seen.add(name)
        chains += 1
        rows_total += len(rows)
        found, pending = walk_chain(key, rows, heads.get(name), anchors.get(name, ()))
        unanchored += pending
        if found is not None:
            breaks.append(found)

    for key, rows in _rows_by_chain(session, log):
        check(key, rows)
    for name in sorted((set(heads) | {n for n in anchors if n.startswith(prefix)}) - seen):
        check(name.removeprefix(prefix), [])
    if not breaks:
        return ChainReport(
            log, rows_total, True, chains=chains, unanchored_rows=unanchored, checkpoint=checkpoint
        )
    first = breaks[0]
    return ChainReport(
        log,
        rows_total,
        False,
        first.seq,
        f"{first.chain}: {first.problem}",
        first.chain,
        chains=chains,
        unanchored_rows=unanchored,
        checkpoint=checkpoint,
        broken_chains=tuple(b.chain for b in breaks),
    )


def heads_to_anchor(session: Session) -> list[ChainHead]:
    """Heads that moved since the last checkpoint, by name; on PostgreSQL each is locked, and
    one another writer holds is left for the next checkpoint (SKIP LOCKED: never wait)."""
    statement = (
        select(ChainHead)
        .where(col(ChainHead.last_seq) > col(ChainHead.anchored_seq))
        .order_by(col(ChainHead.name))
        .with_for_update(skip_locked=True)
        .execution_options(populate_existing=True)
    )
    return [head for head in session.exec(statement).all() if head.last_seq > 0]


def has_unanchored(session: Session) -> bool:
    """Whether any chain moved since the last checkpoint (served by a partial index)."""
    statement = (
        select(ChainHead.name).where(col(ChainHead.last_seq) > col(ChainHead.anchored_seq)).limit(1)
    )
    return session.exec(statement).first() is not None
