"""A made-up entry added to a method in the catalogue (and nowhere else) appears in the API
schema, the page form, the review page and the export."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import sqlalchemy as sa

ROOT = Path(__file__).resolve().parents[2]


def test_a_new_catalogue_entry_reaches_every_place_with_no_other_change(
    engine: sa.Engine,
) -> None:
    # The models and forms are built when the service is imported, so the entry is added in
    # a fresh interpreter before that (tests/foundation/catalogue_probe.py); it shares this
    # test's database, which the `engine` fixture empties afterwards.
    run = subprocess.run(
        [sys.executable, "-m", "tests.foundation.catalogue_probe"],
        cwd=ROOT,
        env=os.environ.copy(),
        capture_output=True,
        text=True,
        timeout=300,
        check=False,
    )
    assert run.returncode == 0, run.stderr
    report = json.loads(run.stdout.strip().splitlines()[-1])
    assert report["schema"]["title"] == "Tailwater level"
    assert report["schema"]["examples"] == ["3.0 cm"]
    assert report["form"] is True
    assert report["saved"] == 201
    assert report["review"] is True
    assert report["export"] == ["3.0 cm", "Tailwater level"]
