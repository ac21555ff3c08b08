"""Twenty tablets at once: concurrent trial writes through a real server on loopback.

Invariant 7 of DESIGN.md: a retried write (same Idempotency-Key) never stores a second trial,
and an edit against an old version is refused with 409 showing both versions, never a silent
overwrite; nothing answers 500 and the audit chain still verifies afterwards."""

from __future__ import annotations

import socket
import threading
import time
from collections import Counter
from collections.abc import Iterator
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from typing import Any

import httpx
import pytest
import uvicorn
from sqlmodel import Session, select

from service.audit.chain import verify
from service.common import TestState
from service.lab_tests.models import PermeabilityTest, Trial
from tests.certificates.arrange import trial_entries
from tests.proof.conftest import Proof, _rewind, clone_test

CLIENTS = 20
TRIALS_PER_CLIENT = 3


@pytest.fixture
def server_url(proof: Proof) -> Iterator[str]:
    """The app under uvicorn on a free loopback port, in a thread, for this test only."""
    from service.main import create_app

    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        port = probe.getsockname()[1]
    config = uvicorn.Config(
        create_app(), host="127.0.0.1", port=port, log_level="warning", lifespan="on"
    )
    server = uvicorn.Server(config)
    thread = threading.Thread(target=server.run, daemon=True)
    thread.start()
    deadline = time.monotonic() + 10
    while not server.started:
        assert time.monotonic() < deadline, "uvicorn did not start within 10 s"
        time.sleep(0.02)
    yield f"http://127.0.0.1:{port}"
    server.should_exit = True
    thread.join(timeout=10)


@dataclass
class Outcome:
    statuses: list[tuple[str, int]] = field(default_factory=list)
    # (test_id, key) -> trial ids answered for it
    answers: dict[tuple[int, str], set[int]] = field(default_factory=dict)
    problems: list[str] = field(default_factory=list)
    edits: dict[int, list[int]] = field(default_factory=dict)
    lock: threading.Lock = field(default_factory=threading.Lock)

    def note(self, what: str, response: httpx.Response) -> None:
        with self.lock:
            self.statuses.append((what, response.status_code))
            if response.status_code >= 500:
                self.problems.append(f"{what}: {response.status_code} {response.text[:300]}")


def _running_tests(proof: Proof, count: int) -> list[int]:
    ids = [proof.running.id]
    for series in range(3, 3 + count - 1):
        test = clone_test(
            proof.session, proof.world.test, sample=proof.second_sample, series=series, trials=1
        )
        _rewind(proof.session, test, TestState.RUNNING)
        ids.append(test.id)
    proof.session.commit()
    return [int(i) for i in ids if i is not None]


def _body(client_no: int, trial_no: int) -> dict[str, Any]:
    # A distinct, valid Method C trial per (client, trial): heads within the arranged test's range.
    drop = 8.0 + 0.1 * client_no + 0.5 * trial_no
    return trial_entries(125.0, round(125.0 - drop, 1))


def _tablet(
    base_url: str,
    headers: dict[str, str],
    client_no: int,
    test_ids: list[int],
    outcome: Outcome,
    start: threading.Barrier,
) -> None:
    with httpx.Client(base_url=base_url, headers=headers, timeout=60) as http:
        start.wait()
        for trial_no in range(TRIALS_PER_CLIENT):
            # Odd clients share keys with the client before them (the same technician's tablet
            # retrying through a second connection); every third write goes to one busy test.
            key_owner = client_no - (client_no % 2)
            key = f"tablet-{key_owner}-trial-{trial_no}"
            test_id = test_ids[0] if trial_no == 0 else test_ids[(key_owner + trial_no) % 3]
            body = _body(key_owner, trial_no)
            url = f"/api/v1/tests/{test_id}/trials"
            first = http.post(url, json=body, headers={"Idempotency-Key": key})
            outcome.note("post", first)
            retry = http.post(url, json=body, headers={"Idempotency-Key": key})
            outcome.note("retry", retry)
            for response in (first, retry):
                if response.status_code != 201:
                    outcome.problems.append(f"{key}: answered {response.status_code}")
                    continue
                with outcome.lock:
                    outcome.answers.setdefault((test_id, key), set()).add(
                        response.json()["trial"]["id"]
                    )
            # The same key with a different body is another request, not a retry: 409.
            changed = {**body, "temperature": "21.0 degC"}
            reused = http.post(url, json=changed, headers={"Idempotency-Key": key})
            outcome.note("reused-key", reused)
            if reused.status_code != 409:
                outcome.problems.append(f"{key} reused with another body: {reused.status_code}")
            if first.status_code != 201:
                continue
            # Both tablets of a pair edit the trial against the version their answer showed:
            # one edit wins, the other is told it is stale (409 with both versions).
            trial = first.json()["trial"]
            edit = http.patch(
                f"{url}/{trial['id']}",
                json={"version": trial["version"], "temperature": f"20.{client_no % 2 + 1} degC"},
            )
            outcome.note("edit", edit)
            with outcome.lock:
                outcome.edits.setdefault(trial["id"], []).append(edit.status_code)
            if edit.status_code == 409:
                context = edit.json()  # problem details: both versions beside the detail
                if not {"yours", "current"} <= set(context):
                    outcome.problems.append(f"409 without both versions: {edit.text[:200]}")


def test_twenty_tablets_store_each_trial_once(
    proof: Proof, server_url: str, session: Session
) -> None:
    test_ids = _running_tests(proof, 3)
    in_trials = Trial.test_id.in_(test_ids)  # type: ignore[attr-defined]
    before = {(t.test_id, t.idempotency_key) for t in session.exec(select(Trial).where(in_trials))}
    technician = proof.headers("technician")
    manager = proof.headers("lab_manager")
    outcome = Outcome()
    start = threading.Barrier(CLIENTS)
    with ThreadPoolExecutor(max_workers=CLIENTS) as pool:
        futures = [
            pool.submit(
                _tablet,
                server_url,
                technician if (n // 2) % 2 == 0 else manager,
                n,
                test_ids,
                outcome,
                start,
            )
            for n in range(CLIENTS)
        ]
        for future in futures:
            future.result()

    assert outcome.problems == []
    assert not [s for s in outcome.statuses if s[1] >= 500]
    # Every answer for one key names one and the same trial.
    assert all(len(ids) == 1 for ids in outcome.answers.values()), outcome.answers
    # Per trial, two edits against one version: exactly one stored, one refused.
    assert outcome.edits
    assert all(sorted(codes) == [200, 409] for codes in outcome.edits.values()), outcome.edits
    session.expire_all()
    stored = session.exec(select(Trial).where(in_trials)).all()
    keys = Counter((t.test_id, t.idempotency_key) for t in stored)
    expected = set(outcome.answers)
    assert set(keys) - before == expected
    assert max(keys.values()) == 1, "a key stored more than one trial"
    assert len(expected) == CLIENTS // 2 * TRIALS_PER_CLIENT
    assert {t.id for t in stored} >= {next(iter(ids)) for ids in outcome.answers.values()}
    for test_id in test_ids:
        test = session.get(PermeabilityTest, test_id)
        assert test is not None
        assert test.state == TestState.RUNNING
    for chain in ("audit", "custody"):
        report = verify(session, chain)
        assert report.ok, report


def test_an_edit_against_an_old_version_is_refused_with_both_versions(proof: Proof) -> None:
    url = f"/api/v1/tests/{proof.running.id}/trials/{proof.trial.id}"
    headers = proof.headers("technician")
    first = proof.client.patch(
        url, json={"version": proof.trial.version, "temperature": "20.3 degC"}, headers=headers
    )
    assert first.status_code == 200, first.text
    stale = proof.client.patch(
        url, json={"version": proof.trial.version, "temperature": "20.4 degC"}, headers=headers
    )
    assert stale.status_code == 409
    context = stale.json()
    assert context["yours"]["version"] == proof.trial.version
    assert context["current"]["version"] == proof.trial.version + 1
    proof.session.expire_all()
    kept = proof.session.get(Trial, proof.trial.id)
    assert kept is not None
    assert kept.entries["temperature"] == "20.3 degC"  # the stale edit overwrote nothing
