"""Run in a fresh interpreter by test_catalogue_derived.py: add a made-up trial entry to the
falling-head method of the catalogue *before* the service is imported, then report (as JSON
on stdout) where it shows: the API schema, the test page's form, the review page and the
project export. Nothing but the catalogue is changed."""

from __future__ import annotations

import json
from dataclasses import replace

from service.engine import catalogue
from service.engine.catalogue import Entry, Scope

MADE_UP = Entry(
    "tail_level",
    catalogue.units.LENGTH,
    Scope.TRIAL,
    "Tailwater level",
    symbol="h_t",
    example="3.0 cm",
    help="Level of the tailwater above the outlet (a made-up entry).",
)
catalogue.CATALOGUE[Scope.TRIAL] = (*catalogue.TRIAL, MADE_UP)
catalogue.METHODS = tuple(
    replace(m, trial=(*m.trial, MADE_UP.id)) if m.id == "falling_head" else m
    for m in catalogue.METHODS
)


def main() -> None:
    from fastapi.testclient import TestClient
    from sqlmodel import Session

    from service.apparatus.models import Apparatus
    from service.common import ApparatusKind, Role
    from service.db import get_engine
    from service.lab_tests.models import TestApparatus
    from service.main import create_app
    from tests.auth_helpers import bearer, sign_in_cookie
    from tests.factories import make_organisation, make_project, make_sample, make_test, make_user

    report: dict[str, object] = {}
    # expire_on_commit=False: reading an id after a commit must not open a read snapshot
    # that a write of this session could no longer upgrade (SQLite WAL).
    app = create_app()
    with TestClient(app) as client, Session(get_engine(), expire_on_commit=False) as session:
        lab = make_organisation(session, kind="lab")
        technician = make_user(session, role=Role.TECHNICIAN, organisation=lab)
        session.commit()
        # The OpenAPI document is for signed-in callers (service/api/openapi.py).
        served = client.get("/openapi.json", headers=bearer(session, technician))
        schema = served.json()["components"]["schemas"]
        report["schema"] = schema["TrialEntries"]["properties"].get("tail_level")
        manager = make_user(session, role=Role.LAB_MANAGER, organisation=lab)
        project = make_project(session)
        sample = make_sample(session, project=project)
        test = make_test(session, sample=sample, technician_id=technician.id)
        permeameter = Apparatus(
            identifier="PRM-X",
            kind=ApparatusKind.RIGID_WALL_PERMEAMETER,
            standpipe_area_m2=0.283e-4,
            standpipe_area_text="0.283 cm**2",
        )
        session.add(permeameter)
        session.flush()
        session.add(TestApparatus(test_id=test.id or 0, apparatus_id=permeameter.id or 0))
        session.commit()
        sign_in_cookie(session, client, technician)
        page = client.get(f"/tests/{test.id}").text
        report["form"] = 'name="trial.tail_level"' in page and "Tailwater level" in page
        headers = bearer(session, technician)
        trial = {"head_initial": "100 cm", "head_final": "70 cm", "duration": "3600 s"}
        saved = client.post(
            f"/api/v1/tests/{test.id}/trials",
            json={**trial, "tail_level": "3.0 cm"},
            headers={**headers, "Idempotency-Key": "probe-1"},
        )
        report["saved"] = saved.status_code
        client.cookies.clear()
        sign_in_cookie(session, client, manager)
        review = client.get(f"/tests/{test.id}/review").text
        report["review"] = "Tailwater level" in review and "3.0 cm" in review
        export = client.get(
            f"/api/v1/projects/{project.id}/export.json", headers=bearer(session, manager)
        ).json()
        entries = export["samples"][0]["tests"][0]["trials"][0]["entries"]
        legend = {e["id"]: e["label"] for e in export["entries"]["trials"]}
        report["export"] = [entries.get("tail_level"), legend.get("tail_level")]
    print(json.dumps(report))


if __name__ == "__main__":
    main()
