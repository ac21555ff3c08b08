"""The reception role; one test requested on many samples (at receipt and from the project
page); the labels page's print and back; overdue tests on the technician's home marked by the
queue's own rule."""

from __future__ import annotations

import re
from datetime import timedelta

from fastapi.testclient import TestClient
from sqlmodel import Session, func, select

from service.common import Role, TestState
from service.db import utcnow
from service.lab_tests.models import PermeabilityTest
from service.samples.models import Sample
from tests.factories import make_sample, make_test, make_user
from tests.web.reception.conftest import HTMX, Lab, sign_in
from tests.web.reception.test_reception import two_rows


def _tests_on(session: Session, sample_ids: list[int]) -> list[PermeabilityTest]:
    session.rollback()
    session.expire_all()
    return list(
        session.exec(
            select(PermeabilityTest).where(PermeabilityTest.sample_id.in_(sample_ids))  # type: ignore[attr-defined]
        ).all()
    )


def _message(html: str, name: str) -> str:
    found = re.search(rf'id="err-{name}"[^>]*>(.*?)</p>', html, re.S)
    return re.sub(r"<[^>]+>", "", found.group(1)) if found else ""


def test_reception_receives_with_a_test_on_every_sample(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    desk = make_user(session, role=Role.RECEPTION, organisation=lab.lab)
    session.commit()
    csrf = sign_in(session, web_client, desk)
    page = web_client.get(f"/reception?project_id={lab.project.id}")
    assert 'name="test_method"' in page.text
    data = two_rows(lab, "batch-1") | {"action": "save", "test_method": "falling_head"}
    answer = web_client.post("/reception", data=data, headers={**csrf, **HTMX})
    assert answer.status_code == 201, answer.text
    assert 'data-testid="tests-requested"' in answer.text
    ids = [int(i) for i in re.findall(r'href="/samples/(\d+)"', answer.text)]
    assert len(ids) == 2
    tests = _tests_on(session, ids)
    assert sorted(t.sample_id for t in tests) == sorted(ids)
    assert {t.method for t in tests} == {"falling_head"}
    assert {t.requested_by_id for t in tests} == {desk.id}
    # The same form saved again (a double tap) receives once and requests once.
    again = web_client.post("/reception", data=data, headers={**csrf, **HTMX})
    assert again.status_code == 201
    assert len(_tests_on(session, ids)) == 2


def test_a_hostile_method_is_refused_beside_its_field_and_nothing_is_stored(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    csrf = sign_in(session, web_client, lab.manager)
    data = two_rows(lab, "batch-2") | {"action": "save", "test_method": "<script>x</script>"}
    answer = web_client.post("/reception", data=data, headers={**csrf, **HTMX})
    assert answer.status_code == 422
    assert _message(answer.text, "test_method")
    assert "<script>x" not in answer.text
    assert session.exec(select(func.count()).select_from(Sample)).one() == 0


def test_a_technician_receives_but_may_not_request_tests(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    csrf = sign_in(session, web_client, lab.technician)
    page = web_client.get(f"/reception?project_id={lab.project.id}")
    assert 'name="test_method"' not in page.text
    data = two_rows(lab, "batch-3") | {"action": "save", "test_method": "falling_head"}
    answer = web_client.post("/reception", data=data, headers={**csrf, **HTMX})
    assert answer.status_code == 422
    assert "Requesting tests is for reception, lab managers" in answer.text


def test_reception_may_not_record_or_approve(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    desk = make_user(session, role=Role.RECEPTION, organisation=lab.lab)
    sample = make_sample(session, project=lab.project)
    test = make_test(session, sample=sample, state=TestState.RUNNING)
    session.commit()
    csrf = sign_in(session, web_client, desk)
    assert web_client.get(f"/samples/{sample.id}").status_code == 200  # custody is there
    assert web_client.get(f"/samples/labels?ids={sample.id}").status_code == 200
    home = web_client.get("/")
    assert 'href="/reception"' in home.text
    assert 'href="/queue"' not in home.text
    for path in (f"/tests/{test.id}/trials", f"/tests/{test.id}/submit"):
        assert web_client.post(path, data={}, headers=csrf).status_code in (403, 422)
    assert web_client.get("/queue").status_code == 403


def test_project_page_requests_one_test_on_the_ticked_samples(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    ours = [make_sample(session, project=lab.project) for _ in range(3)]
    theirs = make_sample(session, project=lab.other_project)
    session.commit()
    csrf = sign_in(session, web_client, lab.manager)
    page = web_client.get(f"/projects/{lab.project.id}")
    assert page.text.count('name="sample_ids"') == 3
    url = f"/projects/{lab.project.id}/tests"
    none = web_client.post(url, data={"method": "falling_head"}, headers=csrf)
    assert none.status_code == 422
    assert "Tick at least one sample" in _message(none.text, "sample_ids") or _message(
        none.text, "sample_ids"
    )
    stranger = {"sample_ids": [str(ours[0].id), str(theirs.id)], "method": "falling_head"}
    refused = web_client.post(url, data=stranger, headers=csrf)
    assert refused.status_code == 422
    assert re.search(rf'value="{ours[0].id}" checked', refused.text)  # the ticks are kept
    assert _tests_on(session, [s.id for s in [*ours, theirs] if s.id]) == []
    chosen = {"sample_ids": [str(ours[0].id), str(ours[2].id)], "method": "constant_head"}
    done = web_client.post(url, data=chosen, headers=csrf)
    assert done.status_code == 303
    tests = _tests_on(session, [s.id for s in ours if s.id])
    assert {t.sample_id for t in tests} == {ours[0].id, ours[2].id}
    assert len(tests) == 2
    assert {t.method for t in tests} == {"constant_head"}


def test_the_tick_boxes_are_a_fingertip_wide(web_client: TestClient) -> None:
    css = web_client.get("/static/css/reception.css").text
    rule = re.search(r'\.tick-box input\[type="checkbox"\] \{(.*?)\}', css, re.S)
    assert rule
    # --touch is 2.75rem, 44 px: the minimum touch target of WCAG 2.2 SC 2.5.5 (AAA).
    assert "width: var(--touch)" in rule.group(1)
    assert "height: var(--touch)" in rule.group(1)


def test_labels_page_has_print_and_back(web_client: TestClient, session: Session, lab: Lab) -> None:
    sample = make_sample(session, project=lab.project)
    session.commit()
    sign_in(session, web_client, lab.technician)
    page = web_client.get(f"/samples/labels?ids={sample.id}")
    assert 'data-print data-testid="print-labels"' in page.text
    assert f'href="/projects/{lab.project.id}" data-testid="labels-back"' in page.text
    assert '<script src="/static/js/print.js" defer></script>' in page.text


def test_technicians_home_marks_overdue_as_the_queue_does(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    today = utcnow().date()
    # The test carries no due date of its own: the sample's (receipt + turnaround) applies,
    # as in the queue. Three days past it is overdue; a submitted test no longer counts
    # against the technician's bench but a planned one does.
    late = make_sample(session, project=lab.project, due_date=today - timedelta(days=3))
    on_time = make_sample(session, project=lab.project, due_date=today + timedelta(days=3))
    make_test(session, sample=late, technician_id=lab.technician.id)
    make_test(session, sample=on_time, technician_id=lab.technician.id)
    session.commit()
    sign_in(session, web_client, lab.technician)
    home = web_client.get("/").text
    assert home.count('data-testid="overdue"') == 1
    assert "Overdue 3 days" in home
    assert f"due {(today - timedelta(days=3)).isoformat()}" in home
    sign_in(session, web_client, lab.manager)
    queue = web_client.get("/queue").text
    assert queue.count('data-testid="overdue"') == 1
