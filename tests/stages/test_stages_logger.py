"""Logger files for the consolidation and permeation stages: the mapping set once per
apparatus, a clean file taken in as the stage's readings, a file with bad cells refused by
row and column with nothing stored, and files that attack the reader."""

from __future__ import annotations

import io
from typing import Any

import pytest
from openpyxl import Workbook
from sqlmodel import select

from service.apparatus.models import Apparatus
from service.common import ApparatusKind
from service.lab_tests.models import TestApparatus
from service.stages.models import TestStage
from tests.auth_helpers import sign_in_cookie
from tests.stages.conftest import Lab, flexible_test, put_stage

CONSOLIDATION_MAPPING = {
    "time": {"column": "Elapsed (min)", "unit": "min"},
    "channels": {"volume_change": {"column": "Vol (mL)", "unit": "mL"}},
}
CLEAN = (
    "Elapsed (min),Vol (mL)\n1,0.17\n4,0.35\n16,0.70\n100,1.74\n900,3.10\n1440,3.10\n2160,3.10\n"
)


def _permeameter(lab: Lab, test_id: int) -> int:
    lab.session.commit()
    item = lab.session.exec(
        select(Apparatus)
        .join(TestApparatus, TestApparatus.apparatus_id == Apparatus.id)  # type: ignore[arg-type]
        .where(TestApparatus.test_id == test_id)
    ).one()
    assert item.kind == ApparatusKind.FLEXIBLE_WALL_PERMEAMETER
    assert item.id is not None
    return item.id


def _map(lab: Lab, apparatus_id: int, body: dict[str, Any]) -> Any:
    return lab.client.put(
        f"/api/v1/apparatus/{apparatus_id}/logger-mappings/consolidation",
        json=body,
        headers=lab.as_(lab.technician),
    )


def _upload(lab: Lab, test_id: int, name: str, data: bytes) -> Any:
    return lab.client.post(
        f"/api/v1/tests/{test_id}/stages/consolidation/logger",
        files={"file": (name, data, "text/csv")},
        headers=lab.as_(lab.technician),
    )


def _ready(lab: Lab) -> int:
    test_id = flexible_test(lab)
    body = {"entries": {"cell_pressure": "465 kPa", "back_pressure": "430 kPa"}}
    assert put_stage(lab, test_id, "consolidation", body).status_code == 200
    assert _map(lab, _permeameter(lab, test_id), CONSOLIDATION_MAPPING).status_code == 200
    return test_id


def test_a_clean_logger_file_becomes_the_stages_readings(lab: Lab) -> None:
    test_id = _ready(lab)
    answer = _upload(lab, test_id, "cell-f1.csv", CLEAN.encode())
    assert answer.status_code == 200, answer.text
    stage = answer.json()["consolidation"]
    assert stage["typed"]["readings"][0] == {"elapsed": "1 min", "volume_change": "0.17 mL"}
    # 1 min = 60 s, 1 mL = 1e-6 m³ (SI Brochure, 9th ed., tables 8 and 4).
    assert stage["si"]["readings"][3]["elapsed"] == pytest.approx(6000)
    assert stage["si"]["readings"][3]["volume_change"] == pytest.approx(1.74e-6)
    assert stage["outcome"]["end"]["complete"] is True
    assert stage["typed"]["cell_pressure"] == "465 kPa"  # the stage's own entries are kept


def test_an_xlsx_logger_file_is_read_too(lab: Lab) -> None:
    test_id = _ready(lab)
    book = Workbook()
    sheet = book.active
    assert sheet is not None
    for line in CLEAN.strip().splitlines():
        first, second = line.split(",")
        sheet.append([first, second] if not first[0].isdigit() else [float(first), float(second)])
    buffer = io.BytesIO()
    book.save(buffer)
    answer = _upload(lab, test_id, "cell-f1.xlsx", buffer.getvalue())
    assert answer.status_code == 200, answer.text
    assert len(answer.json()["consolidation"]["typed"]["readings"]) == 7


def test_bad_cells_are_named_by_row_and_column_and_nothing_is_stored(lab: Lab) -> None:
    test_id = _ready(lab)
    bad = CLEAN.replace("16,0.70", "16,0.7O").replace("100,1.74", "10,1.74")
    answer = _upload(lab, test_id, "cell-f1.csv", bad.encode())
    assert answer.status_code == 422
    labels = [e["label"] for e in answer.json()["errors"]]
    assert any("row 4" in label and "Vol (mL)" in label for label in labels), labels
    lab.session.commit()
    row = lab.session.exec(
        select(TestStage).where(TestStage.test_id == test_id, TestStage.stage == "consolidation")
    ).one()
    assert "readings" not in row.typed


def test_a_file_without_a_mapping_is_refused(lab: Lab) -> None:
    test_id = flexible_test(lab)
    assert _upload(lab, test_id, "cell-f1.csv", CLEAN.encode()).status_code == 409


def test_a_mapping_with_a_wrong_unit_is_refused_when_set(lab: Lab) -> None:
    test_id = flexible_test(lab)
    body = {
        "time": {"column": "t", "unit": "kPa"},
        "channels": {"volume_change": {"column": "v", "unit": "mL"}},
    }
    answer = _map(lab, _permeameter(lab, test_id), body)
    assert answer.status_code == 422
    assert "time" in str(answer.json()["errors"][0]["loc"])


@pytest.mark.parametrize(
    ("name", "data"),
    [
        ("bomb.xlsx", b"PK\x03\x04" + b"\x00" * 200),
        ("formula.csv", b"Elapsed (min),Vol (mL)\n=cmd|' /C calc'!A0,1\n"),
        ("binary.csv", bytes(range(256)) * 4),
        ("empty.csv", b""),
    ],
)
def test_hostile_logger_files_are_refused_not_stored(lab: Lab, name: str, data: bytes) -> None:
    test_id = _ready(lab)
    answer = _upload(lab, test_id, name, data)
    assert answer.status_code in (413, 422), answer.text
    lab.session.commit()
    row = lab.session.exec(
        select(TestStage).where(TestStage.test_id == test_id, TestStage.stage == "consolidation")
    ).one()
    assert "readings" not in row.typed


def test_the_stage_page_takes_a_logger_file_and_lists_bad_cells(lab: Lab) -> None:
    test_id = _ready(lab)
    lab.session.commit()  # end the read transaction before this session writes
    csrf = sign_in_cookie(lab.session, lab.client, lab.technician)
    url = f"/tests/{test_id}/stages/consolidation/logger"
    bad = CLEAN.replace("16,0.70", "16,0.7O")
    refused = lab.client.post(url, files={"file": ("f.csv", bad.encode())}, headers=csrf)
    assert refused.status_code == 422
    assert "row 4, column &#39;Vol (mL)&#39;" in refused.text
    saved = lab.client.post(
        url, files={"file": ("f.csv", CLEAN.encode())}, headers=csrf, follow_redirects=False
    )
    assert saved.status_code == 303
