"""One direction of dependency: service -> schemas <- worker; engine imports no service code.

The imports of every module are read from its source (no import side effects).
"""
import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
PACKAGES = ["engine", "schemas", "jobs", "service", "worker", "cli"]
FORBIDDEN = {
    "engine": {"flask", "celery", "redis", "kombu", "schemas", "service", "worker", "jobs", "cli"},
    "schemas": {"flask", "celery", "redis", "service", "worker", "jobs", "cli"},
    "jobs": {"flask", "service", "worker", "cli", "engine"},
    "service": {"worker", "celery", "cli"},
    "worker": {"service", "flask", "cli"},
    "cli": {"service", "worker"},
}


def imported_roots(path: Path) -> set[str]:
    tree = ast.parse(path.read_text())
    roots = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            roots |= {a.name.split(".")[0] for a in node.names}
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            roots.add(node.module.split(".")[0])
    return roots


@pytest.mark.parametrize("package", PACKAGES)
def test_package_imports_respect_the_layering(package):
    offenders = {}
    for path in (ROOT / package).rglob("*.py"):
        bad = imported_roots(path) & FORBIDDEN[package]
        if bad:
            offenders[str(path.relative_to(ROOT))] = sorted(bad)
    assert offenders == {}
