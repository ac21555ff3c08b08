"""Signed checkpoints of the custody and audit logs: made, published, exported, checked.

A checkpoint's body is UTF-8 text, one item per line, each line ending in "\\n":

    seepline checkpoint 1
    sequence <n>                       1, 2, 3 ... without gaps
    made <ISO 8601 UTC>                e.g. 2026-12-02T10:15:30.123456+00:00
    previous <64 hex>                  SHA-256 of checkpoint n-1's body; 64 zeros for n = 1
    key <key id>                       the Ed25519 key that signs it
    heads <count>
    <head name> <last seq> <last row hash>    one line per head, sorted by name

The heads listed are those that moved since checkpoint n-1 ("custody/sample:17 5 9f3c...");
with `previous` linking each checkpoint to the one before, the latest checkpoint fixes the
head of every chain: the last head listed for it. Its `digest` is the SHA-256 of the body
and its `signature` the base64 Ed25519 signature of the body, both over the exact bytes."""

from __future__ import annotations

import hashlib
import json
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from typing import Any

from sqlmodel import Session, col, select

from service.audit import chain
from service.audit.chain import Anchor, ChainReport
from service.audit.models import Checkpoint
from service.certificates.signing import (
    TrustedKey,
    key_check,
    load_signing_key,
    register_key,
    timestamp,
    trusted_keys,
)
from service.config import get_settings
from service.db import utcnow

FORMAT = "seepline checkpoint 1"
EXPORT_FORMAT = "seepline-checkpoints"
LOCK = "checkpoint"
GENESIS = chain.GENESIS


@dataclass(frozen=True)
class Body:
    sequence: int
    made_at: datetime
    previous: str
    key_id: str
    heads: tuple[tuple[str, int, str], ...]


def render_body(body: Body) -> str:
    lines = [
        FORMAT,
        f"sequence {body.sequence}",
        f"made {timestamp(body.made_at)}",
        f"previous {body.previous}",
        f"key {body.key_id}",
        f"heads {len(body.heads)}",
        *(f"{name} {seq} {digest}" for name, seq, digest in body.heads),
    ]
    return "".join(line + "\n" for line in lines)


def parse_body(text: str) -> Body:
    """Read a body back; ValueError names what does not fit the layout."""
    lines = text.split("\n")
    if lines[-1] != "" or len(lines) < 7 or lines[0] != FORMAT:
        raise ValueError("not a checkpoint body")

    def item(index: int, label: str) -> str:
        word, _, value = lines[index].partition(" ")
        if word != label or not value:
            raise ValueError(f"line {index + 1} should start with '{label}'")
        return value

    sequence = int(item(1, "sequence"))
    made_at = datetime.fromisoformat(item(2, "made"))
    previous, key_id, count = item(3, "previous"), item(4, "key"), int(item(5, "heads"))
    head_lines = lines[6:-1]
    if count != len(head_lines):
        raise ValueError(f"it says {count} heads but lists {len(head_lines)}")
    heads: list[tuple[str, int, str]] = []
    for line in head_lines:
        name, seq, digest = line.split(" ")
        heads.append((name, int(seq), digest))
    if [h[0] for h in heads] != sorted({h[0] for h in heads}):
        raise ValueError("heads are not sorted by name, or one is listed twice")
    if made_at.tzinfo is None:
        raise ValueError("its time has no UTC offset")
    return Body(sequence, made_at, previous, key_id, tuple(heads))


def digest_of(body_text: str) -> str:
    return hashlib.sha256(body_text.encode()).hexdigest()


# --- making ----------------------------------------------------------------------------------


def latest(session: Session) -> Checkpoint | None:
    return session.exec(select(Checkpoint).order_by(col(Checkpoint.seq).desc()).limit(1)).first()


def reserve(session: Session) -> int:
    """Take the checkpoint lock for this transaction and answer the next sequence number (a
    certificate records the checkpoint it will be issued under before it is made)."""
    chain.lock_name(session, LOCK)
    last = latest(session)
    return (last.seq if last else 0) + 1


def make_checkpoint(session: Session, *, reason: str, now: datetime | None = None) -> Checkpoint:
    """Sign every head that moved since the last checkpoint, as checkpoint n+1.

    Serialised with other checkpoints by a named lock; heads another transaction is writing
    are left for the next checkpoint, so no writer waits on a checkpoint for long."""
    sequence = reserve(session)
    last = latest(session)
    now = now or utcnow()
    if last is not None and now <= last.made_at:
        now = last.made_at + timedelta(microseconds=1)
    key = load_signing_key()
    register_key(session, key, now)
    heads = chain.heads_to_anchor(session)
    body = Body(
        sequence=sequence,
        made_at=now,
        previous=last.digest if last else GENESIS,
        key_id=key.key_id,
        heads=tuple((h.name, h.last_seq, h.last_hash) for h in heads),
    )
    text = render_body(body)
    checkpoint = Checkpoint(
        seq=sequence,
        made_at=now,
        reason=reason,
        heads=len(heads),
        body=text,
        digest=digest_of(text),
        key_id=key.key_id,
        signature=key.sign(text.encode()),
    )
    for head in heads:
        head.anchored_seq = head.last_seq
        session.add(head)
    session.add(checkpoint)
    session.flush()
    return checkpoint


def is_due(session: Session, now: datetime) -> bool:
    """True when the interval has passed since the last checkpoint (or there is none) and
    some chain moved since (read only: cheap enough to ask often)."""
    minutes = get_settings().checkpoint_interval_minutes
    if minutes <= 0:
        return False
    last = latest(session)
    if last is not None and now - last.made_at < timedelta(minutes=minutes):
        return False
    return bool(chain.has_unanchored(session))


def checkpoint_if_due(session: Session, now: datetime | None = None) -> Checkpoint | None:
    """The opportunistic checkpoint: made only when `is_due` (checked again under the lock)."""
    now = now or utcnow()
    if not is_due(session, now):
        return None
    reserve(session)
    if not is_due(session, now):
        return None
    return make_checkpoint(session, reason="interval", now=now)


# --- publishing and exporting ----------------------------------------------------------------


def published(checkpoint: Checkpoint) -> dict[str, Any]:
    """One checkpoint as the public page and the export file give it."""
    return {
        "sequence": checkpoint.seq,
        "made_at": timestamp(checkpoint.made_at),
        "reason": checkpoint.reason,
        "heads": checkpoint.heads,
        "key_id": checkpoint.key_id,
        "digest": checkpoint.digest,
        "signature": checkpoint.signature,
        "body": checkpoint.body,
    }


def page(session: Session, *, after: int, limit: int) -> list[Checkpoint]:
    return list(
        session.exec(
            select(Checkpoint)
            .where(col(Checkpoint.seq) > after)
            .order_by(col(Checkpoint.seq))
            .limit(limit)
        ).all()
    )


def export(session: Session, *, lab_name: str, keys: list[dict[str, Any]]) -> dict[str, Any]:
    """Every checkpoint and the lab's public keys, as one JSON document to keep elsewhere."""
    everything = session.exec(select(Checkpoint).order_by(col(Checkpoint.seq))).all()
    return {
        "format": EXPORT_FORMAT,
        "version": 1,
        "laboratory": lab_name,
        "exported_at": timestamp(utcnow()),
        "body_layout": __doc__,
        "signing_keys": keys,
        "checkpoints": [published(c) for c in everything],
    }


@dataclass(frozen=True)
class OutsideCheckpoint:
    sequence: int
    body: str
    signature: str


def read_export(text: str) -> list[OutsideCheckpoint]:
    """The checkpoints of an export file (or of one page of the public list)."""
    data = json.loads(text)
    items = data.get("checkpoints", data.get("items")) if isinstance(data, dict) else data
    if not isinstance(items, list):
        raise ValueError("no list of checkpoints in the file")
    found = []
    for item in items:
        if not isinstance(item, dict):
            raise ValueError("a checkpoint entry is not an object")
        found.append(
            OutsideCheckpoint(int(item["sequence"]), str(item["body"]), str(item["signature"]))
        )
    return sorted(found, key=lambda c: c.sequence)


# --- checking --------------------------------------------------------------------------------


@dataclass
class CheckpointReport:
    """The verdict on the checkpoints themselves (their signatures and links)."""

    checkpoints: int = 0
    latest: int | None = None
    latest_made_at: datetime | None = None
    outside: int = 0
    problems: list[str] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return not self.problems


def _check_one(
    keys: dict[str, TrustedKey], text: str, signature: str, where: str
) -> tuple[Body | None, str]:
    try:
        body = parse_body(text)
    except (ValueError, IndexError) as exc:
        return None, f"{where}: its body cannot be read ({exc})"
    problem = key_check(keys, body.key_id, body.made_at, text.encode(), signature)
    if problem:
        return body, f"{where}: cannot be confirmed: {problem}"
    return body, ""


def check_checkpoints(
    session: Session, outside: Sequence[OutsideCheckpoint] = ()
) -> tuple[CheckpointReport, dict[int, Body]]:
    """Check every stored checkpoint (signature, sequence, link to the one before, columns
    matching the body) and any outside copy against them; answer the bodies that hold."""
    keys = trusted_keys(session)
    report = CheckpointReport()
    bodies: dict[int, Body] = {}
    digests: dict[int, str] = {}
    stored = session.exec(select(Checkpoint).order_by(col(Checkpoint.seq))).all()
    for row in stored:
        report.checkpoints += 1
        where = f"checkpoint {row.seq}"
        body, problem = _check_one(keys, row.body, row.signature, where)
        if not problem and body is not None:
            if (body.sequence, body.key_id) != (row.seq, row.key_id) or row.digest != digest_of(
                row.body
            ):
                problem = f"{where}: its columns do not match its signed body"
            elif row.seq != len(bodies) + 1:
                problem = f"checkpoint {len(bodies) + 1} is missing"
            elif body.previous != digests.get(row.seq - 1, GENESIS):
                problem = f"{where} does not follow checkpoint {row.seq - 1}"
        if problem:
            report.problems.append(problem)
            break
        assert body is not None
        bodies[row.seq] = body
        digests[row.seq] = row.digest
    for copy in outside:
        where = f"outside copy of checkpoint {copy.sequence}"
        body, problem = _check_one(keys, copy.body, copy.signature, where)
        if problem or body is None:
            report.problems.append(problem)
            continue
        report.outside += 1
        if copy.sequence not in digests:
            report.problems.append(
                f"checkpoint {copy.sequence} of the outside copy is missing from the database"
            )
        elif digests[copy.sequence] != digest_of(copy.body):
            report.problems.append(
                f"checkpoint {copy.sequence} in the database differs from the outside copy"
            )
        # The signed outside copy anchors the chains, whatever the database says.
        bodies[copy.sequence] = body
    if bodies:
        report.latest = max(bodies)
        report.latest_made_at = bodies[report.latest].made_at
    return report, bodies


def anchors_of(bodies: Mapping[int, Body]) -> dict[str, list[Anchor]]:
    anchors: dict[str, list[Anchor]] = {}
    for sequence in sorted(bodies):
        for name, last_seq, last_hash in bodies[sequence].heads:
            anchors.setdefault(name, []).append(Anchor(sequence, last_seq, last_hash))
    return anchors


def load_anchors(session: Session) -> tuple[dict[str, list[Anchor]], int | None]:
    """The heads the stored checkpoints sign (those that verify), and the latest one's seq."""
    report, bodies = check_checkpoints(session)
    return anchors_of(bodies), report.latest


@dataclass(frozen=True)
class LogsReport:
    checkpoints: CheckpointReport
    logs: tuple[ChainReport, ...]

    @property
    def ok(self) -> bool:
        return self.checkpoints.ok and all(log.ok for log in self.logs)


def verify_logs(session: Session, outside: Sequence[OutsideCheckpoint] = ()) -> LogsReport:
    """Check the checkpoints, then walk every chain of both logs against them."""
    report, bodies = check_checkpoints(session, outside)
    anchors = anchors_of(bodies)
    logs = tuple(
        chain.verify(session, log, anchors, checkpoint=report.latest) for log in chain.LOGS
    )
    return LogsReport(report, logs)
