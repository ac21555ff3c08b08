"""The queue page (/queue) and assigning a test (/tests/{test_id}/assign)."""

from __future__ import annotations

import re
from datetime import timedelta

import pytest
from fastapi.testclient import TestClient
from sqlmodel import Session

from service.apparatus.models import Apparatus
from service.common import ApparatusKind, Role
from service.db import utcnow
from service.errors import InvalidInput
from service.lab_tests import service as lab_tests
from service.lab_tests.models import PermeabilityTest
from service.lab_tests.schemas import TestUpdate
from tests.factories import make_organisation, make_project, make_user
from tests.web.manager.conftest import HTMX, Lab, new_test, signed_in


def _rows(html: str) -> list[str]:
    """The lab IDs of the table's rows, in order."""
    return re.findall(r'<a href="/samples/\d+">([^<]+)</a>', html)


def test_queue_page_and_fragment(session: Session, lab: Lab, web_client: TestClient) -> None:
    new_test(session, lab, lab_id="26-0101")
    signed_in(session, web_client, lab.manager)
    page = web_client.get("/queue")
    assert page.status_code == 200
    assert "<!doctype html>" in page.text
    assert 'hx-push-url="true"' in page.text  # filter changes push the URL
    assert "HX-Request" in page.headers["vary"]
    assert _rows(page.text) == ["26-0101"]
    assert 'data-testid="state-counts"' in page.text
    assert "Tova Technician" in page.text  # load per technician
    fragment = web_client.get("/queue", headers=HTMX)
    assert fragment.status_code == 200
    assert "<!doctype html>" not in fragment.text
    assert fragment.text.lstrip().startswith('<div id="queue-results"')
    assert "HX-Request" in fragment.headers["vary"]
    # The form sends its empty fields too; the URL pushed leaves them (and defaults) out.
    pushed = web_client.get(
        "/queue?state=planned&client_id=&project_id=&technician_id=&due_before=&sort=due",
        headers=HTMX,
    )
    assert pushed.headers["hx-push-url"] == "/queue?state=planned"


def test_filters_narrow_the_table(session: Session, lab: Lab, web_client: TestClient) -> None:
    other_client = make_organisation(session, name="Another Invented Client")
    other_project = make_project(session, client=other_client, number="AC-07")
    session.commit()
    new_test(session, lab, lab_id="26-0201")
    new_test(session, lab, lab_id="26-0202", technician=lab.technician_2)
    new_test(session, lab, lab_id="26-0203", project=other_project)
    running = new_test(session, lab, lab_id="26-0204")
    assert running.id is not None
    lab_tests.start_test(session, running.id, actor=lab.technician)
    session.commit()
    signed_in(session, web_client, lab.manager)

    by_tech = web_client.get(f"/queue?technician_id={lab.technician_2.id}", headers=HTMX)
    assert _rows(by_tech.text) == ["26-0202"]
    by_client = web_client.get(f"/queue?client_id={other_client.id}", headers=HTMX)
    assert _rows(by_client.text) == ["26-0203"]
    by_project = web_client.get(f"/queue?project_id={lab.project.id}", headers=HTMX)
    assert sorted(_rows(by_project.text)) == ["26-0201", "26-0202", "26-0204"]
    by_state = web_client.get("/queue?state=running", headers=HTMX)
    assert _rows(by_state.text) == ["26-0204"]
    # The counts ignore the state filter: the whole picture stays at the top.
    assert re.search(r'data-state="planned".*?<strong>3</strong>', by_state.text, re.S)


def test_due_before_and_overdue_marker(session: Session, lab: Lab, web_client: TestClient) -> None:
    today = utcnow().date()
    new_test(session, lab, lab_id="26-0301", due=today - timedelta(days=3))
    new_test(session, lab, lab_id="26-0302", due=today + timedelta(days=20))
    signed_in(session, web_client, lab.manager)
    soon = web_client.get(f"/queue?due_before={(today + timedelta(days=1)).isoformat()}")
    assert _rows(soon.text) == ["26-0301"]
    everything = web_client.get("/queue")
    late_row = re.search(r'<tr class="is-overdue"[^>]*>.*?</tr>', everything.text, re.S)
    assert late_row is not None
    assert "26-0301" in late_row.group(0)
    # Word and shape, not colour alone: "Overdue 3 days" with the warning triangle.
    assert "Overdue 3 days" in late_row.group(0)
    assert "icon--warn" in late_row.group(0)
    assert everything.text.count('class="is-overdue"') == 1


def test_sort_by_priority_and_state(session: Session, lab: Lab, web_client: TestClient) -> None:
    today = utcnow().date()
    new_test(session, lab, lab_id="26-0401", due=today + timedelta(days=1))
    new_test(session, lab, lab_id="26-0402", due=today + timedelta(days=9), priority="urgent")
    started = new_test(session, lab, lab_id="26-0403", due=today + timedelta(days=5))
    assert started.id is not None
    lab_tests.start_test(session, started.id, actor=lab.technician)
    session.commit()
    signed_in(session, web_client, lab.manager)
    assert _rows(web_client.get("/queue").text) == ["26-0401", "26-0403", "26-0402"]
    by_priority = web_client.get("/queue?sort=priority", headers=HTMX)
    assert _rows(by_priority.text) == ["26-0402", "26-0401", "26-0403"]
    by_state = web_client.get("/queue?sort=state", headers=HTMX)
    assert _rows(by_state.text) == ["26-0401", "26-0402", "26-0403"]


def test_pagination(session: Session, lab: Lab, web_client: TestClient) -> None:
    today = utcnow().date()
    for n in range(27):
        new_test(session, lab, lab_id=f"26-05{n:02d}", due=today + timedelta(days=n))
    signed_in(session, web_client, lab.manager)
    first = web_client.get("/queue")
    assert len(_rows(first.text)) == 25
    assert "page 1 of 2" in first.text
    assert 'href="/queue?page=2"' in first.text
    second = web_client.get("/queue?page=2", headers=HTMX)
    assert _rows(second.text) == ["26-0525", "26-0526"]
    # A page past the end shows the last page rather than an empty table.
    beyond = web_client.get("/queue?page=9")
    assert _rows(beyond.text) == ["26-0525", "26-0526"]


def test_bad_filter_comes_back_beside_its_field(
    session: Session, lab: Lab, web_client: TestClient
) -> None:
    new_test(session, lab, lab_id="26-0601")
    signed_in(session, web_client, lab.manager)
    page = web_client.get("/queue?due_before=31/12/2026&sort=priority")
    assert page.status_code == 422
    assert "Due before: &#39;31/12/2026&#39; is not a date" in page.text
    assert 'value="31/12/2026"' in page.text  # what was typed stays in the field
    assert _rows(page.text) == ["26-0601"]  # the other filters still apply
    fragment = web_client.get("/queue?due_before=31/12/2026", headers=HTMX)
    assert fragment.status_code == 422
    # The form is not swapped: the message reaches its field out of band.
    assert re.search(r'id="err-due_before"[^>]*hx-swap-oob="true"', fragment.text)


@pytest.mark.parametrize("role", [Role.TECHNICIAN])
def test_queue_refused_to_technicians(
    session: Session, lab: Lab, web_client: TestClient, role: Role
) -> None:
    user = make_user(session, role=role, organisation=lab.lab)
    signed_in(session, web_client, user)
    assert web_client.get("/queue").status_code == 403


def test_queue_is_not_there_for_clients(session: Session, lab: Lab, web_client: TestClient) -> None:
    signed_in(session, web_client, lab.client)
    assert web_client.get("/queue").status_code == 404
    assert web_client.get("/queue", headers=HTMX).status_code == 404


def test_queue_needs_sign_in(lab: Lab, web_client: TestClient) -> None:
    answer = web_client.get("/queue")
    assert answer.status_code == 303
    assert answer.headers["location"] == "/sign-in?next=/queue"


# ---------- assignment ----------


def test_assign_page_and_fragment(session: Session, lab: Lab, web_client: TestClient) -> None:
    test = new_test(session, lab)
    signed_in(session, web_client, lab.manager)
    page = web_client.get(f"/tests/{test.id}/assign")
    assert page.status_code == 200
    assert "<!doctype html>" in page.text
    assert "HX-Request" in page.headers["vary"]
    # Technicians only, and the overdue timer is marked as such.
    assert "Tova Technician" in page.text
    assert "Rhys Reviewer" not in page.text
    assert re.search(r"TMR-T1.*?Calibration overdue since", page.text, re.S)
    fragment = web_client.get(f"/tests/{test.id}/assign", headers=HTMX)
    assert "<!doctype html>" not in fragment.text
    assert 'data-testid="assign-form"' in fragment.text


def test_assign_saves_through_update_test(
    session: Session, lab: Lab, web_client: TestClient
) -> None:
    test = new_test(session, lab)
    read_version = test.version
    csrf = signed_in(session, web_client, lab.manager)
    form = {
        "technician_id": str(lab.technician_2.id),
        "apparatus_ids": [str(lab.permeameter.id), str(lab.overdue_timer.id)],
        "version": str(read_version),
        "next": "/queue?sort=priority",
    }
    plain = web_client.post(f"/tests/{test.id}/assign", data=form, headers=csrf)
    assert plain.status_code == 303
    assert plain.headers["location"] == f"/queue?sort=priority&assigned={test.id}"
    session.expire_all()
    saved = session.get(PermeabilityTest, test.id)
    assert saved is not None
    assert saved.technician_id == lab.technician_2.id
    assert saved.version == read_version + 1
    assert {a.identifier for a in lab_tests.apparatus_of(session, test.id or 0)} == {
        "PRM-T1",
        "TMR-T1",
    }
    notice = web_client.get(plain.headers["location"])
    assert "assigned to Udo Second; apparatus PRM-T1, TMR-T1" in notice.text


def test_assign_with_htmx_redirects(session: Session, lab: Lab, web_client: TestClient) -> None:
    test = new_test(session, lab)
    csrf = signed_in(session, web_client, lab.manager)
    answer = web_client.post(
        f"/tests/{test.id}/assign",
        data={"technician_id": str(lab.technician.id), "version": str(test.version)},
        headers={**csrf, **HTMX},
    )
    assert answer.status_code == 200
    assert answer.headers["hx-redirect"] == f"/queue?assigned={test.id}"


def test_assign_without_csrf_is_refused(session: Session, lab: Lab, web_client: TestClient) -> None:
    test = new_test(session, lab)
    signed_in(session, web_client, lab.manager)
    answer = web_client.post(
        f"/tests/{test.id}/assign",
        data={"technician_id": str(lab.technician_2.id), "version": str(test.version)},
    )
    assert answer.status_code == 403
    assert "CSRF" in answer.text
    session.expire_all()
    assert session.get(PermeabilityTest, test.id).technician_id == lab.technician.id  # type: ignore[union-attr]


def test_assign_stale_version_shows_both(
    session: Session, lab: Lab, web_client: TestClient
) -> None:
    test = new_test(session, lab)
    csrf = signed_in(session, web_client, lab.manager)
    old_version = test.version
    first = web_client.post(
        f"/tests/{test.id}/assign",
        data={"technician_id": str(lab.technician_2.id), "version": str(old_version)},
        headers=csrf,
    )
    assert first.status_code == 303
    stale = web_client.post(
        f"/tests/{test.id}/assign",
        data={
            "technician_id": str(lab.technician.id),
            "apparatus_ids": [str(lab.balance.id)],
            "version": str(old_version),
        },
        headers={**csrf, **HTMX},
    )
    assert stale.status_code == 409
    assert 'data-testid="stale-versions"' in stale.text
    compare = re.search(r'data-testid="stale-versions".*?</table>', stale.text, re.S)
    assert compare is not None
    assert "Tova Technician" in compare.group(0)  # yours
    assert "Udo Second" in compare.group(0)  # saved now
    # Your choice is kept, against the version saved now.
    assert re.search(rf'<option value="{lab.technician.id}" selected', stale.text)
    assert f'name="version" value="{old_version + 1}"' in stale.text
    session.expire_all()
    assert session.get(PermeabilityTest, test.id).technician_id == lab.technician_2.id  # type: ignore[union-attr]


def test_assign_refusal_keeps_the_choice_and_commits_nothing(
    session: Session, lab: Lab, web_client: TestClient
) -> None:
    second_permeameter = Apparatus(
        identifier="PRM-T2", kind=ApparatusKind.RIGID_WALL_PERMEAMETER, specimen_area_m2=0.008
    )
    session.add(second_permeameter)
    session.commit()
    test = new_test(session, lab)
    csrf = signed_in(session, web_client, lab.manager)
    answer = web_client.post(
        f"/tests/{test.id}/assign",
        data={
            "technician_id": str(lab.technician_2.id),
            "apparatus_ids": [str(lab.permeameter.id), str(second_permeameter.id)],
            "version": str(test.version),
        },
        headers={**csrf, **HTMX},
    )
    assert answer.status_code == 422
    assert "one permeameter per test" in answer.text
    assert re.search(rf'<option value="{lab.technician_2.id}" selected', answer.text)
    assert answer.text.count(" checked") == 2
    session.expire_all()
    # The technician half of the refused change was not committed either.
    assert session.get(PermeabilityTest, test.id).technician_id == lab.technician.id  # type: ignore[union-attr]


def test_reviewer_is_not_assignable(session: Session, lab: Lab, web_client: TestClient) -> None:
    test = new_test(session, lab)
    csrf = signed_in(session, web_client, lab.manager)
    answer = web_client.post(
        f"/tests/{test.id}/assign",
        data={"technician_id": str(lab.reviewer.id), "version": str(test.version)},
        headers=csrf,
    )
    assert answer.status_code == 422
    assert "is not an active technician of the lab" in answer.text


def test_technician_cannot_assign(session: Session, lab: Lab, web_client: TestClient) -> None:
    test = new_test(session, lab)
    csrf = signed_in(session, web_client, lab.technician)
    assert web_client.get(f"/tests/{test.id}/assign").status_code == 403
    answer = web_client.post(
        f"/tests/{test.id}/assign",
        data={"technician_id": str(lab.technician.id), "version": str(test.version)},
        headers=csrf,
    )
    assert answer.status_code == 403


def test_client_gets_404_on_assign(session: Session, lab: Lab, web_client: TestClient) -> None:
    test = new_test(session, lab)
    signed_in(session, web_client, lab.client)
    assert web_client.get(f"/tests/{test.id}/assign").status_code == 404


def test_assign_with_nobody_chosen_is_refused_beside_the_field(
    session: Session, lab: Lab, web_client: TestClient
) -> None:
    test = new_test(session, lab)
    csrf = signed_in(session, web_client, lab.manager)
    answer = web_client.post(
        f"/tests/{test.id}/assign",
        data={"technician_id": "", "version": str(test.version)},
        headers={**csrf, **HTMX},
    )
    assert answer.status_code == 422
    assert re.search(r'id="err-technician_id"[^>]*>.*?Choose a technician', answer.text, re.S)
    assert "assigned to nobody" not in answer.text
    session.expire_all()
    assert session.get(PermeabilityTest, test.id).technician_id == lab.technician.id  # type: ignore[union-attr]


def test_assign_refuses_a_permeameter_built_for_another_method(
    session: Session, lab: Lab, web_client: TestClient
) -> None:
    # A constant-head cell reads the head loss at manometer ports (ASTM D2434 §6.1, from
    # memory); a falling-head test needs the standpipe's area (ASTM D5084 eq. for method C,
    # a = standpipe area; common practice, no source): such a cell cannot run it.
    cell = Apparatus(
        identifier="PRM-CH1",
        kind=ApparatusKind.RIGID_WALL_PERMEAMETER,
        port_spacing_m=0.15,
        port_spacing_text="150 mm",
    )
    session.add(cell)
    session.commit()
    test = new_test(session, lab)  # a falling-head test
    csrf = signed_in(session, web_client, lab.manager)
    answer = web_client.post(
        f"/tests/{test.id}/assign",
        data={
            "technician_id": str(lab.technician.id),
            "apparatus_ids": [str(cell.id)],
            "version": str(test.version),
        },
        headers={**csrf, **HTMX},
    )
    assert answer.status_code == 422
    message = re.search(r'id="err-apparatus_ids".*?<span>(.*?)</span>', answer.text, re.S)
    assert message is not None
    assert "PRM-CH1" in message.group(1)
    assert "falling head" in message.group(1)
    assert "standpipe area" in message.group(1)
    ids = {a.identifier for a in lab_tests.apparatus_of(session, test.id or 0)}
    assert "PRM-CH1" not in ids


def test_assign_refuses_a_wall_the_standard_does_not_use(
    session: Session, lab: Lab, web_client: TestClient
) -> None:
    # ASTM D5084 is the flexible-wall method, D5856 the rigid-wall compaction-mold one
    # (their titles).
    test = new_test(session, lab)
    flexible = Apparatus(identifier="PRM-F9", kind=ApparatusKind.FLEXIBLE_WALL_PERMEAMETER)
    session.add(flexible)
    stored = session.get(PermeabilityTest, test.id)
    assert stored is not None
    stored.standard = "ASTM D5856"
    session.add(stored)
    session.commit()
    csrf = signed_in(session, web_client, lab.manager)
    answer = web_client.post(
        f"/tests/{test.id}/assign",
        data={
            "technician_id": str(lab.technician.id),
            "apparatus_ids": [str(flexible.id)],
            "version": str(stored.version),
        },
        headers={**csrf, **HTMX},
    )
    assert answer.status_code == 422
    assert "PRM-F9 (flexible-wall permeameter) does not fit ASTM D5856" in answer.text


def test_the_assign_link_scrolls_its_panel_into_view(
    session: Session, lab: Lab, web_client: TestClient
) -> None:
    test = new_test(session, lab)
    signed_in(session, web_client, lab.manager)
    page = web_client.get("/queue")
    assert 'hx-target="#assign-slot" hx-swap="innerHTML show:top"' in page.text
    fragment = web_client.get(f"/tests/{test.id}/assign", headers=HTMX)
    assert re.search(r'<select id="assign-technician-\d+"[^>]*autofocus', fragment.text)


def test_a_new_standard_must_fit_the_permeameter_kept(session: Session, lab: Lab) -> None:
    # ASTM D5856 is the rigid-wall compaction-mold method (its title); PRM-T1 is flexible.
    test = new_test(session, lab)
    assert test.id is not None
    with pytest.raises(InvalidInput, match="PRM-T1"):
        lab_tests.update_test(
            session,
            test.id,
            TestUpdate(version=test.version, standard="ASTM D5856"),
            actor=lab.manager,
        )
