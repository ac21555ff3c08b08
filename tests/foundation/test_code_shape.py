"""The shape the contributor guide promises (DEVELOPERS.md): no module of service/ over 800
lines, no route function over 40 (common practice, no source: the house limits)."""

from __future__ import annotations

import ast
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2] / "service"
MAX_MODULE_LINES = 800
MAX_ROUTE_LINES = 40
ROUTE_VERBS = {"get", "post", "put", "patch", "delete", "api_route"}


def _modules() -> list[Path]:
    return sorted(ROOT.rglob("*.py"))


def _is_route(node: ast.FunctionDef | ast.AsyncFunctionDef) -> bool:
    for decorator in node.decorator_list:
        target = decorator.func if isinstance(decorator, ast.Call) else decorator
        if isinstance(target, ast.Attribute) and target.attr in ROUTE_VERBS:
            return True
    return False


def test_no_module_is_over_800_lines() -> None:
    long = {
        str(path.relative_to(ROOT)): n
        for path in _modules()
        if (n := len(path.read_text(encoding="utf-8").splitlines())) > MAX_MODULE_LINES
    }
    assert long == {}


def test_no_route_is_over_40_lines() -> None:
    long = {}
    for path in _modules():
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            if isinstance(node, ast.FunctionDef | ast.AsyncFunctionDef) and _is_route(node):
                first = min([d.lineno for d in node.decorator_list] + [node.lineno])
                lines = (node.end_lineno or node.lineno) - first + 1
                if lines > MAX_ROUTE_LINES:
                    long[f"{path.relative_to(ROOT)}:{node.name}"] = lines
    assert long == {}


def test_the_checks_see_routes_and_modules() -> None:
    # Guard against a check that passes because it found nothing.
    routes = sum(
        1
        for path in _modules()
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8")))
        if isinstance(node, ast.FunctionDef | ast.AsyncFunctionDef) and _is_route(node)
    )
    assert len(_modules()) > 100
    assert routes > 100
