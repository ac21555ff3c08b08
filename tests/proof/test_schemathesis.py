"""Property-based requests to every operation of /openapi.json (schemathesis), bounded for CI:
nothing answers 5xx, and every 4xx says what was wrong.

Run twice per operation: signed in as a lab manager (a bearer token; the widest role that
records, reviews and plans) and anonymously. Path ids point at real rows half of the time
(the arranged lab's), so generated bodies reach the services and not only the 404s."""

from __future__ import annotations

import json
import zlib
from typing import Any

import schemathesis
from hypothesis import HealthCheck, Phase, settings

from service.main import create_app
from tests.proof.conftest import Proof

MAX_EXAMPLES = 12
IDENTITIES = ("lab_manager", "anonymous")


# One app for the module; its schema is read at import (no database needed for that), its
# lifespan starts with the first request, once the fixtures have migrated the database.
APP = create_app()
schema = schemathesis.openapi.from_dict(APP.openapi())


def _message_of(response: Any) -> str:
    """The human-readable refusal in a 4xx body ('' if there is none)."""
    content_type = response.headers.get("content-type", [""])
    content_type = content_type[0] if isinstance(content_type, list) else content_type
    text = response.text or ""
    if "json" not in content_type:
        return text.strip()
    body = json.loads(text)
    if not isinstance(body, dict):
        return ""
    # RFC 9457 problem details: `detail` is always a sentence, field errors under `errors`.
    detail = body.get("detail")
    errors = body.get("errors")
    if isinstance(errors, list) and errors:
        messages = [item.get("msg", "") for item in errors if isinstance(item, dict)]
        if not all(messages):
            return ""
    return detail if isinstance(detail, str) else ""


def _real_ids(proof: Proof) -> dict[str, Any]:
    return {
        "sample_id": proof.world.sample.id,
        "project_id": proof.world.project.id,
        "test_id": proof.running.id,
        "trial_id": proof.trial.id,
        "apparatus_id": proof.world.permeameter.id,
        "user_id": proof.world.technician.id,
        "organisation_id": proof.world.client_org.id,
        "entity_id": proof.world.sample.id,
    }


@schema.parametrize()
@settings(
    max_examples=MAX_EXAMPLES,
    deadline=None,
    derandomize=True,
    database=None,
    phases=[Phase.generate],
    suppress_health_check=list(HealthCheck),
)
def test_no_server_errors_and_every_refusal_says_why(case: Any, proof: Proof) -> None:
    real = _real_ids(proof)
    seed = json.dumps(case.path_parameters or {}, sort_keys=True, default=str).encode()
    if case.path_parameters and zlib.crc32(seed) % 2 == 0:
        for name in case.path_parameters:
            if name in real:
                case.path_parameters[name] = real[name]
    for identity in IDENTITIES:
        response = case.call(app=APP, headers=proof.headers(identity))
        where = f"{identity}: {case.method} {case.formatted_path} -> {response.status_code}"
        assert response.status_code < 500, f"{where}\n{response.text[:500]}"
        if 400 <= response.status_code < 500:
            assert _message_of(response), f"{where}: no message in {response.text[:300]!r}"
