"""The command line says what it did and where the service answers."""

from __future__ import annotations

import pytest
import sqlalchemy as sa

from service.cli import main as seepline
from service.cli import migration_report
from service.config import served_address
from service.db import head_revision


def test_migrate_says_what_it_did(engine: sa.Engine, capsys: pytest.CaptureFixture[str]) -> None:
    # The suite's database is migrated already: a second run changes nothing and says so.
    assert seepline(["migrate"]) == 0
    assert capsys.readouterr().out.strip() == (
        f"the schema was already at revision {head_revision()}: nothing to do"
    )
    assert migration_report(None, "0001") == "created the schema at revision 0001"
    assert migration_report("0001", "0002") == "upgraded the schema from revision 0001 to 0002"


@pytest.mark.parametrize(
    ("host", "port", "address"),
    [
        ("127.0.0.1", 8000, "http://127.0.0.1:8000"),
        ("0.0.0.0", 8080, "http://127.0.0.1:8080"),
        ("bench-pc.lan", 9000, "http://bench-pc.lan:9000"),
        ("::1", 8000, "http://[::1]:8000"),
    ],
)
def test_the_demo_names_the_address_actually_served(host: str, port: int, address: str) -> None:
    assert served_address(host, port) == address
