"""Attacks by someone who can write the database but does not hold the signing key.

Each test does what such a person could do behind the application's back (with plain SQL or
the ORM, recomputing hashes with the published algorithm) and shows that the signed
checkpoints, the signed certificate state or the key history catch it. Before the signed
checkpoints existed, recomputing the hashes and moving the head passed every check."""

from __future__ import annotations

import base64
import hashlib
import json
import threading
from collections.abc import Iterator
from datetime import timedelta
from pathlib import Path

import pytest
import sqlalchemy as sa
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey
from sqlmodel import Session, col, select

from service.audit import checkpoints
from service.audit.chain import GENESIS, head_name, row_digest
from service.audit.models import AuditEvent, ChainHead, Checkpoint
from service.audit.service import apply_changes
from service.certificates.models import Certificate, PublishedKey
from service.certificates.service import withdraw_certificate
from service.certificates.signing import (
    key_id_of,
    key_statement,
    load_signing_key,
    raw_public,
    trusted_keys,
)
from service.cli import main as seepline
from service.common import CustodyKind
from service.custody.models import CustodyEvent
from service.custody.service import record_custody
from service.db import utcnow
from tests.certificates.arrange import trial_entries
from tests.conftest import IS_POSTGRES
from tests.proof.conftest import Proof


def _sql(session: Session, statement: str, **params: object) -> None:
    session.execute(sa.text(statement), params)
    session.commit()
    session.expire_all()


def _rewrite_chain(session: Session, log: str, key: str) -> None:
    """The attacker's finishing touch: recompute every link of one chain and its head."""
    rows: list[CustodyEvent] | list[AuditEvent]
    if log == "custody":
        sample_id = int(key.split(":")[1])
        rows = list(
            session.exec(
                select(CustodyEvent)
                .where(CustodyEvent.sample_id == sample_id)
                .order_by(col(CustodyEvent.seq))
            ).all()
        )
    else:
        rows = list(
            session.exec(
                select(AuditEvent).where(AuditEvent.chain == key).order_by(col(AuditEvent.seq))
            ).all()
        )
    previous = GENESIS
    for row in rows:
        row.prev_hash = previous
        row.row_hash = row_digest(row)
        previous = row.row_hash
        session.add(row)
    head = session.get(ChainHead, f"{log}/{key}")
    assert head is not None
    head.last_seq, head.last_hash = len(rows), previous
    session.add(head)
    session.commit()
    session.expire_all()


def _custody(proof: Proof, count: int) -> int:
    sample_id = proof.world.sample.id
    assert sample_id is not None
    for number in range(count):
        record_custody(
            proof.session,
            sample_id=sample_id,
            kind=CustodyKind.MOVED,
            actor_id=proof.world.technician.id,
            place=f"Shelf {number + 1}",
        )
    proof.session.commit()
    return sample_id


def _checkpoint(proof: Proof) -> Checkpoint:
    made = checkpoints.make_checkpoint(proof.session, reason="command")
    proof.session.commit()
    return made


def _verify(proof: Proof) -> checkpoints.LogsReport:
    proof.session.expire_all()
    report = checkpoints.verify_logs(proof.session)
    proof.session.rollback()
    return report


def test_untouched_logs_verify_and_name_what_is_not_yet_anchored(proof: Proof) -> None:
    _custody(proof, 1)
    before = _verify(proof)
    assert before.ok
    assert before.logs[0].unanchored_rows > 0  # nothing is anchored before the first checkpoint
    _checkpoint(proof)
    _custody(proof, 2)
    after = _verify(proof)
    assert after.ok
    custody = after.logs[0]
    assert (custody.chain, custody.unanchored_rows, custody.checkpoint) == ("custody", 2, 1)


def test_custody_row_edited_and_later_hashes_recomputed_is_named(proof: Proof) -> None:
    sample_id = _custody(proof, 1)  # rows 1 (received) and 2 (moved)
    _checkpoint(proof)
    _custody(proof, 2)  # rows 3 and 4
    _checkpoint(proof)
    _sql(
        proof.session,
        "UPDATE custody_event SET place = 'Skip outside' WHERE sample_id = :s AND seq = 3",
        s=sample_id,
    )
    _rewrite_chain(proof.session, "custody", f"sample:{sample_id}")
    report = _verify(proof).logs[0]
    assert not report.ok
    # Row 2 matches checkpoint 1; row 4 no longer matches checkpoint 2: row 3 is the first
    # row that cannot be trusted.
    assert (report.first_broken_chain, report.first_broken_seq) == (f"sample:{sample_id}", 3)
    assert "checkpoint 2" in report.problem


def test_audit_row_edited_and_later_hashes_recomputed_is_named(proof: Proof) -> None:
    sample = proof.world.sample
    assert sample.id is not None
    apply_changes(proof.session, sample, {"description": "grey clay"}, actor_id=None)
    proof.session.commit()
    _checkpoint(proof)
    key = f"sample:{sample.id}"
    rows = proof.session.exec(select(AuditEvent).where(AuditEvent.chain == key)).all()
    last = max(row.seq for row in rows)
    _sql(
        proof.session,
        "UPDATE audit_event SET changes = REPLACE(changes, 'grey clay', 'sandy gravel') "
        "WHERE chain = :c AND seq = :s",
        c=key,
        s=last,
    )
    _rewrite_chain(proof.session, "audit", key)
    report = _verify(proof).logs[1]
    assert (report.ok, report.first_broken_chain) == (False, key)
    assert report.first_broken_seq == 1  # no earlier checkpoint vouches for any row of it
    assert f"a row from 1 to {last} was changed after checkpoint 1 signed" in report.problem


def test_last_row_deleted_and_head_moved_back_is_named(proof: Proof) -> None:
    sample_id = _custody(proof, 2)
    _checkpoint(proof)
    name = head_name("custody", f"sample:{sample_id}")
    head = proof.session.get(ChainHead, name)
    assert head is not None
    last = head.last_seq
    _sql(
        proof.session,
        "DELETE FROM custody_event WHERE sample_id = :s AND seq = :q",
        s=sample_id,
        q=last,
    )
    previous = proof.session.exec(
        select(CustodyEvent.row_hash).where(
            CustodyEvent.sample_id == sample_id, CustodyEvent.seq == last - 1
        )
    ).one()
    # The head goes back one row, as if the deleted row had never been written.
    _sql(
        proof.session,
        "UPDATE chain_head SET last_seq = :q, last_hash = :h, anchored_seq = :q WHERE name = :n",
        q=last - 1,
        h=previous,
        n=name,
    )
    report = _verify(proof).logs[0]
    assert (report.ok, report.first_broken_seq) == (False, last)
    assert f"row {last} is missing: checkpoint 1 signed this chain up to row {last}" in (
        report.problem
    )


def test_a_whole_chain_deleted_is_named(proof: Proof) -> None:
    sample_id = _custody(proof, 1)
    _checkpoint(proof)
    _sql(proof.session, "DELETE FROM custody_event WHERE sample_id = :s", s=sample_id)
    _sql(proof.session, "DELETE FROM chain_head WHERE name = :n", n=f"custody/sample:{sample_id}")
    report = _verify(proof).logs[0]
    assert (report.ok, report.first_broken_chain, report.first_broken_seq) == (
        False,
        f"sample:{sample_id}",
        1,
    )


def test_an_edited_checkpoint_is_refused_and_anchors_nothing(proof: Proof) -> None:
    sample_id = _custody(proof, 1)
    made = _checkpoint(proof)
    # Someone rewrites the checkpoint to match a rewritten chain: the signature no longer fits.
    _sql(
        proof.session,
        "UPDATE log_checkpoint SET body = REPLACE(body, :a, :b) WHERE seq = :s",
        a=f"custody/sample:{sample_id} 2 ",
        b=f"custody/sample:{sample_id} 1 ",
        s=made.seq,
    )
    report = _verify(proof)
    assert not report.ok
    assert report.checkpoints.problems == [
        "checkpoint 1: cannot be confirmed: the signature does not verify"
    ]


def test_an_outside_copy_catches_a_deleted_checkpoint_and_a_rolled_back_chain(
    proof: Proof, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    sample_id = _custody(proof, 1)
    _checkpoint(proof)
    _custody(proof, 1)  # row 3
    _checkpoint(proof)
    copy = tmp_path / "checkpoints.json"
    assert seepline(["export-checkpoints", str(copy)]) == 0
    exported = json.loads(copy.read_text())
    assert [c["sequence"] for c in exported["checkpoints"]] == [1, 2]
    # Row 3 and the checkpoint that signed it disappear; the head goes back to row 2.
    two = proof.session.exec(
        select(CustodyEvent).where(CustodyEvent.sample_id == sample_id, CustodyEvent.seq == 2)
    ).one()
    _sql(proof.session, "DELETE FROM custody_event WHERE sample_id = :s AND seq = 3", s=sample_id)
    _sql(
        proof.session,
        "UPDATE chain_head SET last_seq = 2, last_hash = :h, anchored_seq = 2 WHERE name = :n",
        h=two.row_hash,
        n=f"custody/sample:{sample_id}",
    )
    _sql(proof.session, "DELETE FROM log_checkpoint WHERE seq = 2")
    # The database alone cannot tell (the README says so) ...
    assert seepline(["verify-logs"]) == 0
    capsys.readouterr()
    # ... the copy kept outside can.
    assert seepline(["verify-logs", "--checkpoints", str(copy)]) == 1
    out = capsys.readouterr().out
    assert "checkpoint 2 of the outside copy is missing from the database" in out
    assert f"custody log: BROKEN at sample:{sample_id} row 3" in out


def test_the_public_list_is_a_valid_outside_copy(
    proof: Proof, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    _custody(proof, 1)
    _checkpoint(proof)
    page = proof.client.get("/.well-known/seepline-checkpoints")
    assert page.status_code == 200
    listed = page.json()
    assert (listed["latest"], len(listed["items"]), listed["next"]) == (1, 1, None)
    copy = tmp_path / "page.json"
    copy.write_text(page.text)
    assert seepline(["verify-logs", "--checkpoints", str(copy)]) == 0
    assert "1 from the outside copy" in capsys.readouterr().out


# --- certificates -------------------------------------------------------------------------------


def _status(proof: Proof, certificate: Certificate) -> dict[str, object]:
    response = proof.client.get(f"/api/v1/certificates/verify/{certificate.verification_code}")
    assert response.status_code == 200
    return dict(response.json())


def test_a_certificate_names_the_checkpoint_it_was_issued_under(proof: Proof) -> None:
    certificate = proof.certificate
    made = proof.session.get(Checkpoint, certificate.checkpoint_seq)
    assert made is not None
    assert made.reason == "certificate"
    assert f"audit/certificate:{certificate.id} " in made.body
    assert _status(proof, certificate)["checkpoint_seq"] == made.seq
    assert _status(proof, certificate)["confirmed"] is True


def test_withdrawn_set_back_to_issued_cannot_be_confirmed(proof: Proof) -> None:
    certificate = proof.certificate
    assert certificate.id is not None
    withdraw_certificate(
        proof.session, certificate.id, actor=proof.world.manager, reason="wrong specimen"
    )
    proof.session.commit()
    assert _status(proof, certificate)["state"] == "withdrawn"
    _sql(
        proof.session,
        "UPDATE certificate SET state = 'issued', withdrawn_at = NULL, reason = '' WHERE id = :i",
        i=certificate.id,
    )
    status = _status(proof, certificate)
    assert (status["state"], status["is_current"], status["confirmed"]) == ("issued", False, False)
    assert "cannot be confirmed" in str(status["headline"])
    page = proof.client.get(f"/verify/{certificate.verification_code}")
    assert 'data-state="unconfirmed"' in page.text
    assert "Issued and current" not in page.text
    upload = proof.client.post(
        "/api/v1/certificates/verify",
        files={"file": ("c.pdf", certificate.pdf, "application/pdf")},
    ).json()
    assert upload["current"] is False


def test_withdrawn_put_back_with_the_signature_made_at_issue_cannot_be_confirmed(
    proof: Proof,
) -> None:
    certificate = proof.certificate
    assert certificate.id is not None
    at_issue = (certificate.state_seq, certificate.state_changed_at, certificate.state_signature)
    withdraw_certificate(
        proof.session, certificate.id, actor=proof.world.manager, reason="wrong specimen"
    )
    proof.session.commit()
    # The whole state record as it was at issue, signature included (a replay).
    _sql(
        proof.session,
        "UPDATE certificate SET state = 'issued', withdrawn_at = NULL, reason = '', "
        "state_seq = :q, state_changed_at = :t, state_signature = :g WHERE id = :i",
        q=at_issue[0],
        t=at_issue[1],
        g=at_issue[2],
        i=certificate.id,
    )
    status = _status(proof, certificate)
    assert (status["is_current"], status["confirmed"]) == (False, False)
    assert "last state recorded in its audit record" in str(status["problem"])


def test_swapped_pdf_bytes_are_not_served_as_genuine(proof: Proof) -> None:
    certificate = proof.certificate
    forged = certificate.pdf.replace(b"Seepline", b"Seeplime", 1)
    assert forged != certificate.pdf
    _sql(proof.session, "UPDATE certificate SET pdf = :p WHERE id = :i", p=forged, i=certificate.id)
    url = f"/verify/{certificate.verification_code}/pdf"
    refused = proof.client.get(url)
    assert refused.status_code == 409
    assert not refused.content.startswith(b"%PDF")
    assert "the file differs from the one issued" in refused.text
    # Swapping the stored hash as well does not help: the signature is over the real bytes.
    _sql(
        proof.session,
        "UPDATE certificate SET sha256 = :h WHERE id = :i",
        h=hashlib.sha256(forged).hexdigest(),
        i=certificate.id,
    )
    again = proof.client.get(url)
    assert again.status_code == 409
    assert "the signature does not verify" in again.text


# --- the signing key ----------------------------------------------------------------------------


@pytest.fixture
def restored_key() -> Iterator[Path]:
    """Put the suite's signing key file back after a test that replaces it."""
    path = load_signing_key().path
    original = path.read_bytes()
    yield path
    for leftover in path.parent.glob(f"{path.name}.retired-*"):
        leftover.unlink()
    path.write_bytes(original)
    load_signing_key.cache_clear()


def test_certificates_and_checkpoints_signed_before_a_key_change_still_verify(
    proof: Proof, restored_key: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    certificate = proof.certificate
    old_key = load_signing_key().key_id
    assert seepline(["rotate-signing-key"]) == 0
    new_key = load_signing_key().key_id
    assert new_key != old_key
    assert f"{restored_key.name}.retired-{old_key}" in capsys.readouterr().out
    proof.session.expire_all()
    # The upload and the code lookup agree: genuine, issued and current.
    upload = proof.client.post(
        "/api/v1/certificates/verify",
        files={"file": ("c.pdf", certificate.pdf, "application/pdf")},
    ).json()
    assert (upload["genuine"], upload["current"]) == (True, True), upload["message"]
    assert _status(proof, certificate)["is_current"] is True
    keys = proof.client.get("/.well-known/seepline-signing-keys").json()["keys"]
    assert [(k["key_id"], k["current"]) for k in keys] == [(old_key, False), (new_key, True)]
    assert keys[0]["valid_until"] == keys[1]["valid_from"]
    # Checkpoint 1 (the certificate's, old key) and 2 (the key change, new key) both hold.
    assert seepline(["verify-logs"]) == 0
    assert "latest 2" in capsys.readouterr().out


def test_a_key_planted_in_the_database_is_not_trusted(proof: Proof) -> None:
    certificate = proof.certificate
    planted = Ed25519PrivateKey.generate()
    row = PublishedKey(
        key_id=key_id_of(planted.public_key()),
        public_key=raw_public(planted.public_key()),
        valid_from=utcnow(),
        endorsed_by=load_signing_key().key_id,
    )
    # Signed with the planted key itself: no trusted key vouches for it.
    row.endorsement = base64.b64encode(planted.sign(key_statement(row, with_end=True))).decode()
    proof.session.add(row)
    proof.session.commit()
    assert row.key_id not in trusted_keys(proof.session)
    listed = proof.client.get("/.well-known/seepline-signing-keys").json()["keys"]
    assert row.key_id not in {k["key_id"] for k in listed}
    # A state record re-signed with it does not confirm.
    _sql(
        proof.session,
        "UPDATE certificate SET state_key_id = :k WHERE id = :i",
        k=row.key_id,
        i=certificate.id,
    )
    assert _status(proof, certificate)["confirmed"] is False


# --- writers of different entities do not wait for each other -----------------------------------


@pytest.mark.skipif(not IS_POSTGRES, reason="SQLite serialises every writer by design")
def test_writers_of_different_samples_do_not_wait_for_each_other(proof: Proof) -> None:
    first, second = proof.world.sample.id, proof.second_sample.id
    assert first is not None
    assert second is not None
    engine = proof.session.get_bind()
    holding = threading.Event()
    release = threading.Event()

    def hold_first() -> None:
        with Session(engine) as other:
            record_custody(other, sample_id=first, kind=CustodyKind.MOVED, actor_id=None, place="A")
            holding.set()
            release.wait(10)
            other.commit()

    holder = threading.Thread(target=hold_first)
    holder.start()
    assert holding.wait(10)
    try:
        with Session(engine) as writer:
            writer.execute(sa.text("SET LOCAL lock_timeout = '2s'"))
            record_custody(
                writer, sample_id=second, kind=CustodyKind.MOVED, actor_id=None, place="B"
            )
            writer.commit()  # not blocked by the open transaction on the other sample
        with Session(engine) as writer:
            writer.execute(sa.text("SET LOCAL lock_timeout = '200ms'"))
            with pytest.raises(sa.exc.OperationalError, match="lock timeout"):
                record_custody(
                    writer, sample_id=first, kind=CustodyKind.MOVED, actor_id=None, place="C"
                )
    finally:
        release.set()
        holder.join(10)
    assert _verify(proof).ok


# --- when checkpoints are made; what a trial costs ----------------------------------------------


def test_the_interval_checkpoint_is_made_only_when_due_and_something_moved(
    proof: Proof, monkeypatch: pytest.MonkeyPatch
) -> None:
    from service.config import get_settings

    monkeypatch.setattr(get_settings(), "checkpoint_interval_minutes", 60)
    first = checkpoints.checkpoint_if_due(proof.session)
    assert first is not None  # none yet, and the arranged lab has moved chains
    proof.session.commit()
    assert first.reason == "interval"
    _custody(proof, 1)
    soon = first.made_at + timedelta(minutes=59)
    assert checkpoints.checkpoint_if_due(proof.session, soon) is None
    later = first.made_at + timedelta(minutes=61)
    second = checkpoints.checkpoint_if_due(proof.session, later)
    assert second is not None
    assert second.heads == 2  # the sample's custody chain and its audit chain (storage place)
    proof.session.commit()
    assert checkpoints.checkpoint_if_due(proof.session, later + timedelta(hours=2)) is None
    monkeypatch.setattr(get_settings(), "checkpoint_interval_minutes", 0)
    _custody(proof, 1)
    assert checkpoints.checkpoint_if_due(proof.session, later + timedelta(hours=3)) is None


def test_a_recorded_trial_is_one_audit_row_in_its_tests_chain(proof: Proof) -> None:
    test_id = proof.running.id
    before = proof.session.exec(select(AuditEvent.id)).all()
    response = proof.client.post(
        f"/api/v1/tests/{test_id}/trials",
        json=trial_entries(125.0, 114.2),
        headers={**proof.headers("technician"), "Idempotency-Key": "one-row"},
    )
    assert response.status_code == 201, response.text
    proof.session.expire_all()
    added = proof.session.exec(select(AuditEvent).where(col(AuditEvent.id).not_in(before))).all()
    assert [(row.entity, row.chain) for row in added] == [("trial", f"permeability_test:{test_id}")]
    changes = json.loads(added[0].changes)
    assert changes["entries"]["old"] is None
    assert changes["entries"]["new"]["head_initial"] == "125.0 cm"
