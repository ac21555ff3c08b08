"""The live preview reads once and writes nothing (issue 14): every statement the database
is sent during one preview is counted with SQLAlchemy's cursor event, and its figures are
still the worked example's."""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

import pytest
import sqlalchemy as sa

from service.lab_tests.models import Specimen
from tests.web.testpage.conftest import Lab
from tests.web.testpage.test_test_page import (
    CV2_K20,
    CV2_SPECIMEN,
    CV2_TRIAL,
    post,
    save_specimen,
    shown,
    trials,
)

# A sign-in check (the session cookie's token and its user, one statement) precedes every
# signed-in request; the preview itself may add one read.
SIGN_IN_READS = 1


@contextmanager
def statements(engine: sa.Engine) -> Iterator[list[str]]:
    sent: list[str] = []

    def record(_conn: Any, _cursor: Any, statement: str, *_args: Any) -> None:
        sent.append(statement.strip().split(None, 1)[0].upper())

    # Every engine: an earlier test in this process may have left the app on an engine of
    # its own (the dropped-database tests build one), so listen on the class.
    sa.event.listen(sa.engine.Engine, "before_cursor_execute", record)
    try:
        yield sent
    finally:
        sa.event.remove(sa.engine.Engine, "before_cursor_execute", record)


def _reads_and_writes(sent: list[str]) -> tuple[int, int]:
    """(SELECTs; anything that changes data or takes SQLite's write lock)."""
    reads = sum(1 for s in sent if s in ("SELECT", "WITH"))
    writes = sum(1 for s in sent if s in ("INSERT", "UPDATE", "DELETE") or "IMMEDIATE" in s)
    return reads, writes


def test_a_preview_reads_once_and_writes_nothing(lab: Lab, engine: sa.Engine) -> None:
    csrf = lab.sign_in(lab.technician)
    save_specimen(lab, csrf)
    assert post(lab, "/trials/preview", CV2_TRIAL, csrf).status_code == 200  # inputs kept
    for typed in (CV2_TRIAL, {**CV2_TRIAL, "trial.duration": "3600 s"}):
        with statements(engine) as sent:
            response = post(lab, "/trials/preview", typed, csrf)
        assert response.status_code == 200, response.text
        # CV2 k20 (domain-reference §10 CV2), three significant figures shown.
        assert shown(response.text, "live-k20") == pytest.approx(CV2_K20, rel=0.006)
        reads, writes = _reads_and_writes(sent)
        assert (reads, writes) == (SIGN_IN_READS + 1, 0), sent
        assert not any(s.startswith("BEGIN") and "IMMEDIATE" in s for s in sent)
    assert trials(lab) == []


def test_a_preview_after_a_change_sees_the_change(lab: Lab, engine: sa.Engine) -> None:
    """The kept inputs are not used once the test changed: a longer specimen halves the
    gradient (i = Δh/L, Darcy's law; common practice, no source) and the preview says so."""
    csrf = lab.sign_in(lab.technician)
    save_specimen(lab, csrf)
    first = post(lab, "/trials/preview", CV2_TRIAL, csrf)
    assert "8.62" in first.text.split('data-testid="live-gradient"')[1][:20]  # 100/11.6
    lab.fresh()
    specimen = lab.session.exec(sa.select(Specimen).where(Specimen.test_id == lab.test_id)).one()[0]
    data = {
        **CV2_SPECIMEN,
        "specimen.length": "23.20 cm",
        "specimen.version": str(specimen.version),
    }
    response = post(lab, "/specimen", data, csrf)
    assert response.status_code == 200, response.text
    second = post(lab, "/trials/preview", CV2_TRIAL, csrf)
    assert "4.31" in second.text.split('data-testid="live-gradient"')[1][:20]  # 100/23.2
