"""The review page (/tests/{test_id}/review) and its actions: approve, send back, issue the
certificate, request a correction."""

from __future__ import annotations

import re

import pytest
from fastapi.testclient import TestClient
from sqlmodel import Session

from service.common import Preparation, TestState
from service.lab_tests import service as lab_tests
from service.lab_tests.models import PermeabilityTest
from service.lab_tests.schemas import (
    SendBackRequest,
    SignOffRequest,
    SpecimenWrite,
    TrialCreate,
    TrialExclusion,
)
from service.signoffs.service import sign_offs_of
from tests.web.manager.conftest import (
    HTMX,
    PASSWORD,
    Lab,
    falling_head_entries,
    new_test,
    signed_in,
    submitted_test,
)


def _state(session: Session, test_id: int | None) -> str:
    session.expire_all()
    test = session.get(PermeabilityTest, test_id)
    assert test is not None
    return test.state


def _approve(session: Session, lab: Lab, test: PermeabilityTest) -> None:
    assert test.id is not None
    lab_tests.approve_test(session, test.id, SignOffRequest(password=PASSWORD), actor=lab.reviewer)
    session.commit()


def test_review_page_shows_what_a_reviewer_needs(
    session: Session, lab: Lab, web_client: TestClient
) -> None:
    test = submitted_test(session, lab, with_readings=True)
    signed_in(session, web_client, lab.reviewer)
    page = web_client.get(f"/tests/{test.id}/review")
    assert page.status_code == 200
    assert "<!doctype html>" in page.text
    assert "HX-Request" in page.headers["vary"]
    text = page.text
    for testid in (
        "review-k",
        "uncertainty",
        "compliance",
        "plot-k",
        "plot-ln-head",
        "review-trials",
        "review-checks",
        "specimen-state",
        "conditions",
        "sign-offs",
        "audit",
        "approve-form",
        "send-back-form",
    ):
        assert f'data-testid="{testid}"' in text, testid
    # Every check with its status word, shape (icon) and source.
    checks = re.search(r'data-testid="review-checks".*?</table>', text, re.S)
    assert checks is not None
    assert checks.group(0).count("<tr data-check=") == len(test.result["checks"])  # type: ignore[index]
    assert "Specification limit" in checks.group(0)
    # provenance notes belong in docs/methods.md, never on a page (helper rules)
    for note in ("no source", "from memory", "[read]", "(read)"):
        assert note not in checks.group(0), note
    # The plots are server-rendered SVG with labelled axes.
    assert 'id="review-k-plot"' in text
    assert "Trial 4: ln(head) against time" in text
    assert "Performed and submitted" in text


def test_expanded_uncertainty_is_the_coverage_factor_times_the_standard(
    session: Session, lab: Lab, web_client: TestClient
) -> None:
    # GUM (JCGM 100:2008) 6.2-6.3 and G.3: U = k·u, k Student's t for ν_eff (2 when large).
    test = submitted_test(session, lab)
    assert test.result is not None
    u_rel = test.result["result"]["u_rel"]
    coverage = test.result["result"]["coverage_factor"]
    assert coverage >= 2.0
    signed_in(session, web_client, lab.reviewer)
    page = web_client.get(f"/tests/{test.id}/review").text
    assert f"{u_rel * 100:.2f}&nbsp;%" in page
    assert f"±{coverage * u_rel * 100:.2f}&nbsp;%" in page


def test_review_fragment(session: Session, lab: Lab, web_client: TestClient) -> None:
    test = submitted_test(session, lab)
    signed_in(session, web_client, lab.reviewer)
    fragment = web_client.get(f"/tests/{test.id}/review", headers=HTMX)
    assert fragment.status_code == 200
    assert "<!doctype html>" not in fragment.text
    assert fragment.text.lstrip().startswith('<div id="review-body"')
    assert "HX-Request" in fragment.headers["vary"]


def test_approve_with_password(session: Session, lab: Lab, web_client: TestClient) -> None:
    test = submitted_test(session, lab)
    csrf = signed_in(session, web_client, lab.reviewer)
    answer = web_client.post(
        f"/tests/{test.id}/review/approve",
        data={"password": PASSWORD, "note": "Checked.", "version": str(test.version)},
        headers={**csrf, **HTMX},
    )
    assert answer.status_code == 200
    assert answer.headers["hx-redirect"] == f"/tests/{test.id}/review?done=approved"
    assert _state(session, test.id) == TestState.APPROVED
    meanings = [s.meaning for s in sign_offs_of(session, test.id or 0)]
    assert meanings == ["performed", "approved"]
    page = web_client.get(answer.headers["hx-redirect"])
    assert "Approved and signed" in page.text
    assert 'data-testid="issue-form"' in page.text


def test_wrong_password_is_refused_beside_the_field(
    session: Session, lab: Lab, web_client: TestClient
) -> None:
    test = submitted_test(session, lab)
    csrf = signed_in(session, web_client, lab.reviewer)
    answer = web_client.post(
        f"/tests/{test.id}/review/approve",
        data={"password": "not my password", "note": "Looks fine", "version": str(test.version)},
        headers={**csrf, **HTMX},
    )
    assert answer.status_code == 403
    assert answer.text.lstrip().startswith('<section class="panel review-actions"')
    assert re.search(r'id="err-approve-password"[^>]*>.*?password is not correct', answer.text)
    assert ">Looks fine</textarea>" in answer.text  # the note is kept
    assert "not my password" not in answer.text  # a password is never echoed
    assert _state(session, test.id) == TestState.SUBMITTED


def test_empty_password_is_refused(session: Session, lab: Lab, web_client: TestClient) -> None:
    test = submitted_test(session, lab)
    csrf = signed_in(session, web_client, lab.reviewer)
    answer = web_client.post(
        f"/tests/{test.id}/review/approve", data={"password": ""}, headers=csrf
    )
    assert answer.status_code == 422
    assert "<!doctype html>" in answer.text  # without htmx: the whole page again
    assert "re-enter your password to sign" in answer.text


def test_nobody_approves_their_own_test(session: Session, lab: Lab, web_client: TestClient) -> None:
    # The lab manager prepared and submitted this one (performed sign-off).
    test = submitted_test(session, lab, performer=lab.manager)
    csrf = signed_in(session, web_client, lab.manager)
    page = web_client.get(f"/tests/{test.id}/review").text
    assert 'data-testid="approve-form"' not in page
    assert "Nobody approves their own test" in page
    answer = web_client.post(
        f"/tests/{test.id}/review/approve",
        data={"password": PASSWORD, "version": str(test.version)},
        headers={**csrf, **HTMX},
    )
    assert answer.status_code == 403
    assert "you performed test" in answer.text
    assert _state(session, test.id) == TestState.SUBMITTED


def test_technician_cannot_approve(session: Session, lab: Lab, web_client: TestClient) -> None:
    test = submitted_test(session, lab, technician=lab.technician_2)
    csrf = signed_in(session, web_client, lab.technician)
    page = web_client.get(f"/tests/{test.id}/review")
    assert page.status_code == 200  # other lab staff read the review
    assert 'data-testid="approve-form"' not in page.text
    assert 'data-testid="send-back-form"' not in page.text
    assert "Approving is for reviewers and lab managers" in page.text
    answer = web_client.post(
        f"/tests/{test.id}/review/approve",
        data={"password": PASSWORD, "version": str(test.version)},
        headers={**csrf, **HTMX},
    )
    assert answer.status_code == 403
    assert _state(session, test.id) == TestState.SUBMITTED


def test_client_gets_404(session: Session, lab: Lab, web_client: TestClient) -> None:
    test = submitted_test(session, lab)
    csrf = signed_in(session, web_client, lab.client)
    assert web_client.get(f"/tests/{test.id}/review").status_code == 404
    answer = web_client.post(
        f"/tests/{test.id}/review/approve", data={"password": PASSWORD}, headers=csrf
    )
    assert answer.status_code == 404


def test_approve_without_csrf_is_refused(
    session: Session, lab: Lab, web_client: TestClient
) -> None:
    test = submitted_test(session, lab)
    signed_in(session, web_client, lab.reviewer)
    answer = web_client.post(
        f"/tests/{test.id}/review/approve", data={"password": PASSWORD, "csrf_token": "forged"}
    )
    assert answer.status_code == 403
    assert "CSRF" in answer.text
    assert _state(session, test.id) == TestState.SUBMITTED


def test_stale_version_answers_409_with_both(
    session: Session, lab: Lab, web_client: TestClient
) -> None:
    test = submitted_test(session, lab)
    read_version = test.version
    assert test.id is not None
    # While the reviewer reads, a lab manager approves... no: sends it back, and the
    # technician submits again, so the version moves on.
    lab_tests.send_back(
        session, test.id, SendBackRequest(reason="Recheck trial 2."), actor=lab.manager
    )
    lab_tests.submit_test(session, test.id, SignOffRequest(password=PASSWORD), actor=lab.technician)
    session.commit()
    csrf = signed_in(session, web_client, lab.reviewer)
    answer = web_client.post(
        f"/tests/{test.id}/review/approve",
        data={"password": PASSWORD, "version": str(read_version)},
        headers={**csrf, **HTMX},
    )
    assert answer.status_code == 409
    compare = re.search(r'data-testid="stale-versions".*?</table>', answer.text, re.S)
    assert compare is not None
    session.expire_all()
    current = session.get(PermeabilityTest, test.id)
    assert current is not None
    assert f"<td>{read_version}</td><td>{current.version}</td>" in compare.group(0)
    assert current.state == TestState.SUBMITTED


def test_send_back_needs_a_reason(session: Session, lab: Lab, web_client: TestClient) -> None:
    test = submitted_test(session, lab)
    csrf = signed_in(session, web_client, lab.reviewer)
    answer = web_client.post(
        f"/tests/{test.id}/review/send-back",
        data={"reason": "   ", "version": str(test.version)},
        headers={**csrf, **HTMX},
    )
    assert answer.status_code == 422
    assert 'data-testid="send-back-form"' in answer.text  # the form comes back in place
    assert re.search(r'id="err-send_back-reason"[^>]*>.*?say what must change', answer.text)
    assert 'aria-invalid="true"' in answer.text
    assert _state(session, test.id) == TestState.SUBMITTED


def test_send_back_with_reason(session: Session, lab: Lab, web_client: TestClient) -> None:
    test = submitted_test(session, lab)
    csrf = signed_in(session, web_client, lab.reviewer)
    answer = web_client.post(
        f"/tests/{test.id}/review/send-back",
        data={"reason": "Trial 3 temperature looks wrong.", "version": str(test.version)},
        headers=csrf,
    )
    assert answer.status_code == 303
    assert _state(session, test.id) == TestState.RUNNING
    page = web_client.get(answer.headers["location"]).text
    assert "Trial 3 temperature looks wrong." in page


def test_issue_certificate_and_download(session: Session, lab: Lab, web_client: TestClient) -> None:
    test = submitted_test(session, lab)
    _approve(session, lab, test)
    csrf = signed_in(session, web_client, lab.reviewer)
    answer = web_client.post(f"/tests/{test.id}/review/issue", headers={**csrf, **HTMX})
    assert answer.status_code == 200
    target = answer.headers["hx-redirect"]
    assert re.fullmatch(rf"/tests/{test.id}/review\?issued=\d+", target)
    assert _state(session, test.id) == TestState.ISSUED
    page = web_client.get(target).text
    link = re.search(r'href="(/api/v1/certificates/\d+/pdf)" data-testid="issued-pdf"', page)
    assert link is not None
    pdf = web_client.get(link.group(1))
    assert pdf.status_code == 200
    assert pdf.content.startswith(b"%PDF")


def test_issue_refused_before_approval(session: Session, lab: Lab, web_client: TestClient) -> None:
    test = submitted_test(session, lab)
    csrf = signed_in(session, web_client, lab.reviewer)
    answer = web_client.post(f"/tests/{test.id}/review/issue", headers={**csrf, **HTMX})
    assert answer.status_code == 409
    assert "only approved tests reach a certificate" in answer.text


def test_request_correction(session: Session, lab: Lab, web_client: TestClient) -> None:
    test = submitted_test(session, lab)
    _approve(session, lab, test)
    csrf = signed_in(session, web_client, lab.manager)
    refused = web_client.post(
        f"/tests/{test.id}/review/correction", data={"reason": ""}, headers={**csrf, **HTMX}
    )
    assert refused.status_code == 422
    assert 'data-testid="correction-form"' in refused.text
    assert "say what the correction is for" in refused.text
    answer = web_client.post(
        f"/tests/{test.id}/review/correction",
        data={"reason": "Length read from the wrong line."},
        headers=csrf,
    )
    assert answer.status_code == 303
    new_id = int(re.findall(r"/tests/(\d+)/review", answer.headers["location"])[0])
    assert new_id != test.id
    assert _state(session, new_id) == TestState.RUNNING
    assert _state(session, test.id) == TestState.APPROVED  # readable until the new one is
    page = web_client.get(answer.headers["location"]).text
    assert "Length read from the wrong line." in page


def test_planned_test_has_nothing_to_decide(
    session: Session, lab: Lab, web_client: TestClient
) -> None:
    test = new_test(session, lab)
    signed_in(session, web_client, lab.reviewer)
    page = web_client.get(f"/tests/{test.id}/review").text
    assert 'data-testid="not-submitted"' in page
    assert 'data-testid="no-result"' in page


def test_plots_number_trials_as_the_table_and_add_head_time_and_k_time(
    session: Session, lab: Lab, web_client: TestClient
) -> None:
    # Five falling-head trials, the first left out: the table says trials 2-5, so must the
    # plots. Each trial's heads follow h2 = h1·exp(−k·A·t/(a·L)) (Darcy, falling head), so
    # ln h falls linearly in t (ASTM D5084 falling-head equation; common practice).
    ks = (3.0e-10, 2.0e-10, 2.1e-10, 1.95e-10, 2.05e-10)
    test = submitted_test(session, lab, k_values=ks, excluded=(1,))
    signed_in(session, web_client, lab.reviewer)
    text = web_client.get(f"/tests/{test.id}/review").text
    k_plot = re.search(r'<svg[^>]*id="review-k-plot".*?</svg>', text, re.S)
    assert k_plot is not None
    ticks = re.findall(
        r'<text x="[^"]*" y="[^"]*" text-anchor="middle" class="tick">(\d+)</text>', k_plot.group(0)
    )
    assert ticks == ["2", "3", "4", "5"]
    head_time = re.search(r'data-testid="plot-ln-head-trials".*?</svg>', text, re.S)
    assert head_time is not None
    assert re.findall(r'data-trial="(\d+)"', head_time.group(0)) == ["2", "3", "4", "5"]
    assert "trial 2: h from 1 m to" in head_time.group(0)  # h1 = 100.0 cm, every trial
    assert "ln h" in head_time.group(0)
    k_time = re.search(r'data-testid="plot-k-time".*?</svg>', text, re.S)
    assert k_time is not None
    # 6 h per trial: trials 2-5 end at 6, 12, 18 and 24 h of permeation.
    for trial, hours in ((2, 6), (3, 12), (4, 18), (5, 24)):
        assert re.search(rf"trial {trial}: k₂₀ [^;]* m/s at {hours} h", k_time.group(0)), trial


def test_dimensions_say_which_state_they_describe_and_trials_count_all_recorded(
    session: Session, lab: Lab, web_client: TestClient
) -> None:
    test = new_test(session, lab)
    assert test.id is not None
    lab_tests.write_specimen(
        session,
        test.id,
        SpecimenWrite(
            preparation=Preparation.INTACT,
            diameter="71.0 mm",
            length="116.0 mm",
            final_diameter="70.8 mm",
            final_length="115.2 mm",
            wet_mass="912.4 g",
            water_content="22.0 %",
            specific_gravity=2.70,
        ),
        actor=lab.technician,
    )
    written = [
        lab_tests.record_trial(
            session,
            test.id,
            TrialCreate(**falling_head_entries(k)),
            idempotency_key=f"dims-{seq}",
            actor=lab.technician,
        )
        for seq, k in enumerate((2.0e-10, 2.1e-10, 1.95e-10, 2.05e-10, 9.0e-10), start=1)
    ]
    odd = written[-1].trial
    assert odd.id is not None
    lab_tests.exclude_trial(
        session,
        test.id,
        odd.id,
        TrialExclusion(version=odd.version, reason="air bubble in the standpipe"),
        actor=lab.technician,
    )
    lab_tests.submit_test(session, test.id, SignOffRequest(password=PASSWORD), actor=lab.technician)
    session.commit()
    signed_in(session, web_client, lab.reviewer)
    text = web_client.get(f"/tests/{test.id}/review").text
    state = text.split('data-testid="specimen-state"')[1].split("</dl>")[0]
    assert "Diameter × length, as prepared" in state
    assert "71.0 mm × 116.0 mm" in state
    assert "Diameter × length, at permeation" in state
    assert "70.8 mm × 115.2 mm" in state
    assert "Dry density, at permeation" in state
    assert "2.70" in state  # Gs as it is reported, not 2.7
    averaged = text.split('data-testid="trials-averaged"')[1].split("</dd>")[0]
    assert "4 of 5 recorded" in averaged


def test_audit_list_reads_as_actions_in_words_and_lab_time(
    session: Session, lab: Lab, web_client: TestClient, monkeypatch: pytest.MonkeyPatch
) -> None:
    from service.config import get_settings

    monkeypatch.setenv("LAB_TIMEZONE", "Asia/Kolkata")  # UTC+05:30 all year, no DST
    get_settings.cache_clear()
    try:
        test = submitted_test(session, lab)
        signed_in(session, web_client, lab.reviewer)
        text = web_client.get(f"/tests/{test.id}/review").text
    finally:
        monkeypatch.delenv("LAB_TIMEZONE")
        get_settings.cache_clear()
    audit = text.split('data-testid="audit"')[1].split("</section>")[0]
    # Labels, not column names; rounded values with units.
    assert "Result, k at the reference temperature" in audit
    assert "result k ref" not in audit
    assert re.search(r"\d\.\d\d × 10⁻[⁰¹²³⁴⁵⁶⁷⁸⁹]+ m/s", audit)
    assert not re.search(r"\d\.\d{6,}", audit)  # no unrounded float
    # The lab's local time, to the minute, with its zone; no microseconds.
    assert " IST" in audit
    assert not re.search(r"\d\d:\d\d:\d\d", audit)
    assert not re.search(r"\.\d{6}", audit)
    # One item per action: the fields saved together are listed under it.
    assert audit.count('class="audit-list__changes"') >= 1


SUPERSCRIPT = str.maketrans("⁻⁰¹²³⁴⁵⁶⁷⁸⁹", "-0123456789")


def _checks_of(page: str) -> dict[str, str]:
    table = re.search(r'data-testid="review-checks".*?</table>', page, re.S)
    assert table is not None
    rows = re.findall(r'<tr data-check="([a-z_]+)">(.*?)</tr>', table.group(0), re.S)
    return {check: " ".join(re.sub(r"<[^>]+>|&nbsp;", " ", row).split()) for check, row in rows}


def _figures(text: str, unit: str) -> list[float]:
    """Every figure followed by `unit` in a text ('2.02 × 10⁻¹⁰ m/s' -> 2.02e-10)."""
    found = re.findall(rf"([\d.]+)(?: × 10([⁻⁰¹²³⁴⁵⁶⁷⁸⁹]+))? {re.escape(unit)}\b", text)
    return [float(m) * 10 ** int(p.translate(SUPERSCRIPT) or "0") for m, p in found]


def test_check_texts_are_in_the_users_units(
    session: Session, lab: Lab, web_client: TestClient
) -> None:
    # Conversions by the exact definitions 1 ft = 0.3048 m and 1 in = 0.0254 m (international
    # yard, 1959; NIST SP 811 (2008) Appendix B.8) and 1 day = 86 400 s.
    test = new_test(session, lab)
    test.standard = "ASTM D5084"  # its specimen-size rule has a smallest dimension (25 mm)
    session.add(test)
    session.commit()
    assert test.id is not None
    lab_tests.write_specimen(
        session,
        test.id,
        SpecimenWrite(
            preparation=Preparation.INTACT,
            diameter="71.0 mm",
            length="73.0 mm",
            wet_mass="570.0 g",
            water_content="22.0 %",
            specific_gravity=2.70,
        ),
        actor=lab.technician,
    )
    for seq, k in enumerate((2.0e-10, 2.1e-10, 1.95e-10), start=1):
        lab_tests.record_trial(
            session,
            test.id,
            TrialCreate(**falling_head_entries(k)),
            idempotency_key=f"units-{seq}",
            actor=lab.technician,
        )
    session.commit()
    signed_in(session, web_client, lab.reviewer)
    si = _checks_of(web_client.get(f"/tests/{test.id}/review").text)
    lab.reviewer.display_units = "us"
    session.add(lab.reviewer)
    session.commit()
    us = _checks_of(web_client.get(f"/tests/{test.id}/review").text)

    # SI: the limit check in m/s, the specimen size in mm (71.0 mm, at least 25 mm).
    si_k = _figures(si["specification"], "m/s")
    assert si_k
    assert si_k[-1] == pytest.approx(1e-9)
    assert "Smallest dimension 71.0 mm is at least 25 mm" in si["specimen_size"]
    assert " in " not in si["specimen_size"]
    assert "ft/day" not in si["specification"]
    # US customary: the same figures in ft/day and inches, to the digits shown.
    assert "m/s" not in us["specification"]
    assert "m/s" not in us["steady_state"]
    us_k = _figures(us["specification"], "ft/day")
    assert len(us_k) == len(si_k)
    for feet_per_day, metres_per_second in zip(us_k, si_k, strict=True):
        assert feet_per_day * 0.3048 / 86_400 == pytest.approx(metres_per_second, rel=5e-3)
    assert "mm" not in us["specimen_size"]
    inches = _figures(us["specimen_size"], "in")
    # measured, limit (table columns) then the two figures of the message
    assert [x * 25.4 for x in inches] == pytest.approx([71.0, 25.0, 71.0, 25.0], rel=2e-2)
