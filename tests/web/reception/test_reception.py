"""The reception page: choose a project, receive typed rows or a pasted / uploaded schedule,
see every refusal beside its field or cell before anything is stored, save once per form."""

from __future__ import annotations

import io
import re

import pytest
from fastapi.testclient import TestClient
from sqlmodel import Session, col, select

from service.samples.models import Sample
from tests.web.reception.conftest import HTMX, Lab, sample_count, sign_in

GOOD_SCHEDULE = (
    "client_sample_id,location,depth_top,depth_bottom,sample_type,seal_intact,storage_place\n"
    "U-01,BH-01,1.50 m,2.00 m,tube,yes,Cold room A / 1\n"
    "U-02,BH-01,5 ft,6 ft,tube,no,Cold room A / 1\n"
    "B-01,BH-02,0.5 m,1.0 m,bulk,,Bay 3\n"
)
# Row 3 (the second data row) names a sample type the lab does not take.
BAD_SCHEDULE = GOOD_SCHEDULE.replace("U-02,BH-01,5 ft,6 ft,tube", "U-02,BH-01,5 ft,6 ft,tub")


def form_key(text: str) -> str:
    found = re.search(r'name="idempotency_key" value="([0-9a-f]+)"', text)
    assert found, "the form carries an idempotency key"
    return found.group(1)


def rows_form(lab: Lab, key: str, **rows: str) -> dict[str, str]:
    data = {
        "project_id": str(lab.project.id),
        "entry": "rows",
        "idempotency_key": key,
        "row_count": "3",
        "delivered_by": "Courier Nine",
    }
    data.update({name.replace("__", "."): value for name, value in rows.items()})
    return data


def two_rows(lab: Lab, key: str, depth_top: str = "1.5") -> dict[str, str]:
    return rows_form(
        lab,
        key,
        rows__0__client_sample_id="U-01",
        rows__0__location=str(lab.bh1.id),
        rows__0__depth_top=depth_top,
        rows__0__depth_bottom="2.0",
        rows__0__depth_unit="m",
        rows__0__sample_type="tube",
        rows__0__seal_intact="yes",
        rows__0__storage_place="Cold room A / 1",
        rows__1__client_sample_id="B-01",
        rows__1__location=str(lab.bh2.id),
        rows__1__depth_top="5",
        rows__1__depth_bottom="6",
        rows__1__depth_unit="ft",
        rows__1__sample_type="bulk",
        rows__1__priority="urgent",
    )


# --- the page ----------------------------------------------------------------------------------


def test_without_a_project_the_page_asks_for_one(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    sign_in(session, web_client, lab.technician)
    page = web_client.get("/reception")
    assert page.status_code == 200
    assert page.headers["vary"] == "HX-Request"
    assert "<!doctype html>" in page.text
    assert "P-100 · East levee raise" in page.text
    assert "Q-7 · Other work" in page.text
    fragment = web_client.get("/reception", headers=HTMX)
    assert fragment.status_code == 200
    assert "<!doctype html>" not in fragment.text
    assert fragment.text.lstrip().startswith('<div id="reception-work"')
    assert "HX-Request" in fragment.headers["vary"]


def test_row_form_is_labelled_numeric_and_keyed(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    sign_in(session, web_client, lab.technician)
    page = web_client.get(f"/reception?project_id={lab.project.id}")
    assert page.status_code == 200
    text = page.text
    assert '<link rel="stylesheet" href="/static/css/reception.css">' in text
    for field_id in re.findall(r'<(?:input|select|textarea) id="(f-[^"]+)"', text):
        assert f'<label for="{field_id}">' in text, field_id
    depth_inputs = re.findall(r'<input id="f-rows-\d-depth_(?:top|bottom)"[^>]*>', text)
    assert len(depth_inputs) == 6
    assert all('inputmode="decimal"' in tag for tag in depth_inputs)
    assert '<option value="' + str(lab.bh1.id) + '">BH-01</option>' in text
    # A fresh key per rendering: a second page load must not reuse the first one's key.
    assert form_key(text) != form_key(
        web_client.get(f"/reception?project_id={lab.project.id}").text
    )


# --- typed rows --------------------------------------------------------------------------------


def test_check_marks_the_bad_field_and_keeps_everything_typed(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    csrf = sign_in(session, web_client, lab.technician)
    data = two_rows(lab, "k1", depth_top="abc")
    data["action"] = "check"
    response = web_client.post("/reception", data=data, headers={**csrf, **HTMX})
    assert response.status_code == 422
    assert "<!doctype html>" not in response.text
    message = re.search(r'id="err-rows-0-depth_top"[^>]*>(.*?)</p>', response.text, re.S)
    assert message
    assert "abc" in message.group(1)
    assert (
        'id="f-rows-0-depth_top" name="rows.0.depth_top" type="text" value="abc"' in response.text
    )
    assert 'value="Cold room A / 1"' in response.text
    assert 'value="Courier Nine"' in response.text
    assert 'name="idempotency_key" value="k1"' in response.text
    assert sample_count(session) == 0


def test_depth_below_its_bottom_is_refused_beside_the_bottom(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    csrf = sign_in(session, web_client, lab.technician)
    data = two_rows(lab, "k2", depth_top="3.0")
    data["action"] = "save"
    response = web_client.post("/reception", data=data, headers={**csrf, **HTMX})
    assert response.status_code == 422
    message = re.search(r'id="err-rows-0-depth_bottom"[^>]*>(.*?)</p>', response.text, re.S)
    assert message
    assert "above" in message.group(1)
    assert sample_count(session) == 0


def test_a_clean_check_stores_nothing(web_client: TestClient, session: Session, lab: Lab) -> None:
    csrf = sign_in(session, web_client, lab.technician)
    data = {**two_rows(lab, "k3"), "action": "check"}
    response = web_client.post("/reception", data=data, headers={**csrf, **HTMX})
    assert response.status_code == 200
    assert 'data-testid="check-ok"' in response.text
    assert sample_count(session) == 0


def test_save_gives_lab_ids_and_stores_depths_in_metres(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    csrf = sign_in(session, web_client, lab.technician)
    data = {**two_rows(lab, "k4"), "action": "save"}
    response = web_client.post("/reception", data=data, headers={**csrf, **HTMX})
    assert response.status_code == 201
    samples = session.exec(select(Sample).order_by(col(Sample.lab_id))).all()
    assert len(samples) == 2
    for sample in samples:
        assert sample.lab_id in response.text
        assert f'href="/samples/{sample.id}"' in response.text
    ids = ",".join(str(s.id) for s in samples)
    assert f'href="/samples/labels?ids={ids}"' in response.text
    tube, bulk = samples
    assert (tube.depth_top_text, tube.depth_top_m) == ("1.5 m", 1.5)
    # 1 ft = 0.3048 m exactly (international yard and pound agreement, 1959).
    assert bulk.depth_top_text == "5 ft"
    assert bulk.depth_top_m == pytest.approx(5 * 0.3048, rel=1e-12)
    assert bulk.depth_bottom_m == pytest.approx(6 * 0.3048, rel=1e-12)
    assert tube.seal_intact is True
    assert tube.storage_place == "Cold room A / 1"
    assert bulk.priority == "urgent"
    assert bulk.location_id == lab.bh2.id


def test_a_double_tap_stores_the_batch_once(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    csrf = sign_in(session, web_client, lab.technician)
    data = {**two_rows(lab, "same-key-1"), "action": "save"}
    first = web_client.post("/reception", data=data, headers={**csrf, **HTMX})
    second = web_client.post("/reception", data=data, headers={**csrf, **HTMX})
    assert first.status_code == second.status_code == 201
    assert sample_count(session) == 2
    ids = re.findall(r'class="lab-id">([^<]+)<', first.text)
    assert ids
    assert ids == re.findall(r'class="lab-id">([^<]+)<', second.text)


def test_the_same_key_for_another_batch_is_explained_not_stored(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    csrf = sign_in(session, web_client, lab.technician)
    data = {**two_rows(lab, "same-key-2"), "action": "save"}
    assert web_client.post("/reception", data=data, headers={**csrf, **HTMX}).status_code == 201
    changed = {**data, "rows.0.client_sample_id": "U-09"}
    response = web_client.post("/reception", data=changed, headers={**csrf, **HTMX})
    assert response.status_code == 409
    assert "already used to receive a different batch" in response.text
    assert 'value="U-09"' in response.text
    assert form_key(response.text) != "same-key-2"
    assert sample_count(session) == 2


def test_add_row_keeps_what_was_typed(web_client: TestClient, session: Session, lab: Lab) -> None:
    csrf = sign_in(session, web_client, lab.technician)
    data = {**two_rows(lab, "k5"), "action": "add_row"}
    response = web_client.post("/reception", data=data, headers={**csrf, **HTMX})
    assert response.status_code == 200
    assert 'name="row_count" value="4"' in response.text
    assert 'id="f-rows-3-client_sample_id"' in response.text
    assert 'value="U-01"' in response.text
    assert 'value="B-01"' in response.text
    assert sample_count(session) == 0


def test_empty_rows_are_refused_with_a_message(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    csrf = sign_in(session, web_client, lab.technician)
    data = {**rows_form(lab, "k6"), "action": "save"}
    response = web_client.post("/reception", data=data, headers={**csrf, **HTMX})
    assert response.status_code == 422
    assert "at least one sample row" in response.text


def test_without_javascript_the_whole_page_answers(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    data = {**two_rows(lab, "k7"), "action": "save"}
    csrf = sign_in(session, web_client, lab.technician)
    data["csrf_token"] = csrf["X-CSRF-Token"]
    response = web_client.post("/reception", data=data)
    assert response.status_code == 201
    assert "<!doctype html>" in response.text
    assert response.headers["vary"] == "HX-Request"


# --- schedules ---------------------------------------------------------------------------------


def schedule_form(lab: Lab, text: str, action: str, key: str = "s1") -> dict[str, str]:
    return {
        "project_id": str(lab.project.id),
        "entry": "schedule",
        "idempotency_key": key,
        "delivered_by": "Courier Nine",
        "schedule": text,
        "action": action,
    }


def test_pasted_schedule_preview_marks_the_bad_row_and_cell(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    csrf = sign_in(session, web_client, lab.technician)
    response = web_client.post(
        "/reception", data=schedule_form(lab, BAD_SCHEDULE, "check"), headers={**csrf, **HTMX}
    )
    assert response.status_code == 422
    rows = re.findall(r'<tr class="(row-\w+)" data-row="(\d+)">', response.text)
    assert rows == [("row-ok", "2"), ("row-bad", "3"), ("row-ok", "4")]
    bad_row = response.text.split('data-row="3"')[1].split("</tr>")[0]
    assert bad_row.count('class="cell-bad"') == 1
    assert "tub" in bad_row
    assert "tube" in bad_row
    assert "U-02,BH-01,5 ft,6 ft,tub," in response.text  # the pasted text kept as typed
    assert sample_count(session) == 0


def test_fixed_schedule_checks_clean_then_saves(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    csrf = sign_in(session, web_client, lab.technician)
    checked = web_client.post(
        "/reception", data=schedule_form(lab, GOOD_SCHEDULE, "check"), headers={**csrf, **HTMX}
    )
    assert checked.status_code == 200
    assert "all ready" in checked.text
    assert sample_count(session) == 0
    saved = web_client.post(
        "/reception", data=schedule_form(lab, GOOD_SCHEDULE, "save"), headers={**csrf, **HTMX}
    )
    assert saved.status_code == 201
    assert sample_count(session) == 3
    again = web_client.post(
        "/reception", data=schedule_form(lab, GOOD_SCHEDULE, "save"), headers={**csrf, **HTMX}
    )
    assert again.status_code == 201
    assert sample_count(session) == 3


def test_unknown_location_in_a_schedule_is_marked_in_its_cell(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    csrf = sign_in(session, web_client, lab.technician)
    text = GOOD_SCHEDULE.replace("B-01,BH-02", "B-01,BH-99")
    response = web_client.post(
        "/reception", data=schedule_form(lab, text, "save"), headers={**csrf, **HTMX}
    )
    assert response.status_code == 422
    bad_row = response.text.split('data-row="4"')[1].split("</tr>")[0]
    assert "BH-99" in bad_row
    assert "BH-01, BH-02" in bad_row
    assert sample_count(session) == 0


def test_uploaded_xlsx_becomes_editable_text_with_a_preview(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    from openpyxl import Workbook

    workbook = Workbook()
    sheet = workbook.active
    sheet.append(["client_sample_id", "location", "depth_top [m]", "sample_type"])
    sheet.append(["X-1", "BH-01", 1.25, "block"])
    buffer = io.BytesIO()
    workbook.save(buffer)
    csrf = sign_in(session, web_client, lab.technician)
    response = web_client.post(
        "/reception",
        data=schedule_form(lab, "", "check"),
        files={"schedule_file": ("delivery.xlsx", buffer.getvalue(), "application/octet-stream")},
        headers={**csrf, **HTMX},
    )
    assert response.status_code == 200, response.text
    assert "X-1,BH-01,1.25,block" in response.text
    assert 'data-row="2"' in response.text


def test_an_unreadable_upload_is_refused_beside_the_file_field(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    csrf = sign_in(session, web_client, lab.technician)
    response = web_client.post(
        "/reception",
        data=schedule_form(lab, "", "check"),
        files={"schedule_file": ("notes.pdf", b"%PDF-1.4", "application/pdf")},
        headers={**csrf, **HTMX},
    )
    assert response.status_code == 422
    message = re.search(r'id="err-schedule_file"[^>]*>(.*?)</p>', response.text, re.S)
    assert message
    assert "notes.pdf" in message.group(1)


def test_an_empty_schedule_is_refused_beside_the_text_area(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    csrf = sign_in(session, web_client, lab.technician)
    response = web_client.post(
        "/reception", data=schedule_form(lab, "  ", "check"), headers={**csrf, **HTMX}
    )
    assert response.status_code == 422
    assert re.search(r'id="err-schedule"[^>]*>.*Paste the schedule', response.text, re.S)


# --- refusals ----------------------------------------------------------------------------------


def test_a_post_without_the_csrf_token_is_refused(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    sign_in(session, web_client, lab.technician)
    data = {**two_rows(lab, "k8"), "action": "save"}
    response = web_client.post("/reception", data=data, headers=HTMX)
    assert response.status_code == 403
    assert sample_count(session) == 0


@pytest.mark.parametrize("role", ["reviewer", "client_user"])
def test_roles_without_reception_are_refused(
    web_client: TestClient, session: Session, lab: Lab, role: str
) -> None:
    csrf = sign_in(session, web_client, getattr(lab, role))
    assert web_client.get("/reception").status_code == 403
    data = {**two_rows(lab, "k9"), "action": "save"}
    assert web_client.post("/reception", data=data, headers={**csrf, **HTMX}).status_code == 403
    assert sample_count(session) == 0


def test_signed_out_visitors_go_to_sign_in(web_client: TestClient, lab: Lab) -> None:
    response = web_client.get(f"/reception?project_id={lab.project.id}")
    assert response.status_code == 303
    assert response.headers["location"].startswith("/sign-in?next=/reception")


def test_an_unknown_project_is_404(web_client: TestClient, session: Session, lab: Lab) -> None:
    sign_in(session, web_client, lab.technician)
    assert web_client.get("/reception?project_id=999999").status_code == 404


def test_a_wrong_choice_lists_the_choices_in_plain_words(
    web_client: TestClient, session: Session, lab: Lab
) -> None:
    csrf = sign_in(session, web_client, lab.technician)
    data = two_rows(lab, "k-choice")
    data["rows.0.sample_type"] = "tub"
    data["action"] = "check"
    response = web_client.post("/reception", data=data, headers={**csrf, **HTMX})
    assert response.status_code == 422
    message = re.search(r'id="err-rows-0-sample_type"[^>]*>(.*?)</p>', response.text, re.S)
    assert message
    assert "choose one of: tube, block" in message.group(1).lower()
    assert "tube" in message.group(1)
    assert "Input should be" not in response.text
    assert "rows[0]" not in response.text
    assert sample_count(session) == 0
