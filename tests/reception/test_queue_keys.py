"""The queue's stored keys (effective due date, urgency rank) stay right whatever changes,
and keyset paging walks every open test exactly once, in order.

The rule checked is the queue's definition in issue 14 (common practice, no source): a
test is due on its own due date, else on its sample's; urgent samples come first on the same
day. The expected values are worked out here from the raw columns with that rule, not with
the code's own helpers."""

from __future__ import annotations

from datetime import date, timedelta
from typing import Any

from fastapi.testclient import TestClient
from sqlmodel import Session, select

from service.lab_tests.models import PermeabilityTest
from service.queue import QueueFilters, queue_tests
from service.samples.models import Sample
from tests.factories import make_sample, make_test
from tests.reception.conftest import Lab

FAR = date(9999, 12, 31)  # a test due on no date sorts after every dated one


def _expected(session: Session) -> dict[int, tuple[date, int]]:
    """(due date, rank) of every test, from the test's and its sample's own columns."""
    rows = session.exec(select(PermeabilityTest, Sample).join(Sample)).all()
    return {
        test.id or 0: (
            test.due_date or sample.due_date or FAR,
            0 if sample.priority == "urgent" else 1,
        )
        for test, sample in rows
    }


def _stored(engine: Any) -> dict[int, tuple[date, int]]:
    """What is in the table, read in a fresh session (nothing from an identity map)."""
    with Session(engine) as fresh:
        tests = fresh.exec(select(PermeabilityTest)).all()
        return {t.id or 0: (t.queue_due_date, t.queue_rank) for t in tests}


def test_keys_follow_state_due_date_and_sample_edits(
    client: TestClient, session: Session, lab: Lab
) -> None:
    engine = session.get_bind()
    today = date(2026, 12, 2)
    sample = make_sample(session, project=lab.project, due_date=today)
    other = make_sample(session, project=lab.project)  # no due date
    own = make_test(session, sample=sample, due_date=today - timedelta(days=2))
    inherits = make_test(session, sample=sample, series=2)
    undated = make_test(session, sample=other)
    session.commit()
    assert _stored(engine) == _expected(session)
    assert _stored(engine)[undated.id or 0] == (FAR, 1)

    # A state change leaves the keys as they were.
    inherits.state = "running"
    session.add(inherits)
    session.commit()
    assert _stored(engine) == _expected(session)

    # The test's own due date set, then removed: back to the sample's.
    inherits.due_date = today + timedelta(days=9)
    session.add(inherits)
    session.commit()
    assert _stored(engine)[inherits.id or 0] == (today + timedelta(days=9), 1)
    inherits.due_date = None
    session.add(inherits)
    session.commit()
    assert _stored(engine) == _expected(session)

    # The sample's due date and priority edited: every test of it follows, except where
    # the test has its own date; the tests loaded in the session see it too.
    sample.due_date = today + timedelta(days=20)
    sample.priority = "urgent"
    session.add(sample)
    session.commit()
    assert _stored(engine) == _expected(session)
    assert _stored(engine)[own.id or 0] == (today - timedelta(days=2), 0)
    assert (inherits.queue_due_date, inherits.queue_rank) == (today + timedelta(days=20), 0)

    # Through the API (the sample service) as a manager would.
    response = client.patch(
        f"/api/v1/samples/{sample.id}",
        json={"version": sample.version, "priority": "normal"},
        headers=lab.manager_headers,
    )
    assert response.status_code == 200, response.text
    session.commit()  # a new transaction: the API's commit in sight
    session.expire_all()
    assert _stored(engine) == _expected(session)
    assert _stored(engine)[inherits.id or 0][1] == 1


def _many(session: Session, lab: Lab) -> list[int]:
    """23 open tests with ties on the due date, urgent ones and undated ones, plus closed
    tests the queue must not show."""
    start = date(2026, 12, 1)
    ids = []
    for n in range(23):
        due = None if n % 7 == 0 else start + timedelta(days=n % 4)
        sample = make_sample(
            session,
            project=lab.project,
            due_date=due,
            priority="urgent" if n % 3 == 0 else "normal",
        )
        ids.append(make_test(session, sample=sample, state=("planned", "running")[n % 2]).id or 0)
        make_test(session, sample=sample, series=2, state="issued")
    session.commit()
    return ids


def test_keyset_paging_walks_every_open_test_once(
    client: TestClient, session: Session, lab: Lab
) -> None:
    open_ids = _many(session, lab)
    expected = _expected(session)
    for sort, key in (
        ("due", lambda i: (expected[i][0], expected[i][1], i)),
        ("priority", lambda i: (expected[i][1], expected[i][0], i)),
        ("state", None),
    ):
        seen: list[int] = []
        after = None
        while True:
            page = queue_tests(session, QueueFilters(), limit=5, sort=sort, after=after)
            seen += [item.test_id for item in page.items]
            assert page.total == len(open_ids)
            if page.next_after is None:
                break
            after = page.next_after
        assert sorted(seen) == sorted(open_ids), sort  # each once, none missing
        if key is not None:
            assert seen == sorted(open_ids, key=key), sort

    # The JSON API: the same walk with `after`.
    seen = []
    params: dict[str, Any] = {"limit": 4}
    while True:
        response = client.get("/api/v1/queue", params=params, headers=lab.manager_headers)
        assert response.status_code == 200, response.text
        page = response.json()["tests"]
        seen += [item["test_id"] for item in page["items"]]
        if page["next_after"] is None:
            break
        params["after"] = page["next_after"]
    assert seen == sorted(open_ids, key=lambda i: (expected[i][0], expected[i][1], i))


def test_a_forged_position_is_refused(client: TestClient, lab: Lab) -> None:
    for forged in (
        "not-base64!",
        "WzFd",  # [1]
        "eyJhIjoxfQ",  # {"a":1}
        "W3RydWUsMSwxXQ",  # [true,1,1]
        "WyJ4IiwxLDFd",  # ["x",1,1]
        "WyIyMDI2LTEyLTAxIiwxLDk5OTk5OTk5OTk5OTk5OTk5OTk5OTk5XQ",  # an id past 64 bits
        "WyIyMDI2LTEyLTAxIiwiYSIsMV0",  # ["2026-12-01","a",1]
        "x" * 200,
    ):
        response = client.get(
            "/api/v1/queue", params={"after": forged}, headers=lab.manager_headers
        )
        assert response.status_code == 422, (forged, response.text)
        assert "after" in response.text
