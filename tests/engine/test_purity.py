"""The engine is pure: it imports nothing from the web, the database or the rest of service."""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ENGINE = Path(__file__).resolve().parents[2] / "service" / "engine"
ALLOWED_THIRD_PARTY = {"numpy", "pint"}
FORBIDDEN = {
    "fastapi",
    "starlette",
    "sqlalchemy",
    "sqlmodel",
    "pydantic",
    "jinja2",
    "alembic",
    "iapws",
}


def _imports(path: Path) -> list[str]:
    tree = ast.parse(path.read_text(), filename=str(path))
    names: list[str] = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names.extend(alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            names.append(node.module)
    return names


MODULES = sorted(ENGINE.glob("*.py"))


def test_engine_modules_found():
    assert len(MODULES) >= 10


@pytest.mark.parametrize("path", MODULES, ids=[p.name for p in MODULES])
def test_engine_module_imports_only_stdlib_numpy_pint_and_engine(path):
    import sys

    for name in _imports(path):
        top = name.split(".")[0]
        assert top not in FORBIDDEN, f"{path.name} imports {name}"
        if top == "service":
            assert name.startswith("service.engine"), f"{path.name} imports {name}"
        else:
            assert (
                top in sys.stdlib_module_names or top in ALLOWED_THIRD_PARTY or top == "__future__"
            ), f"{path.name} imports {name}"


METHODS = ENGINE.parents[1] / "docs" / "methods.md"


def test_engine_cites_the_methods_document_and_its_sections_exist():
    # issue 10 item 7: docstrings cite docs/methods.md (by section) or the published source,
    # never a file outside the repository
    import re

    headings = set(re.findall(r"^#{2,3} (\d+(?:\.\d+)?)\.? ", METHODS.read_text(), re.MULTILINE))
    cited: set[str] = set()
    for path in MODULES:
        text = path.read_text()
        assert "domain-reference" not in text, path.name
        cited.update(re.findall(r"methods\.md §(\d+(?:\.\d+)?)", text))
    assert len(cited) >= 20
    assert cited <= headings, sorted(cited - headings)
