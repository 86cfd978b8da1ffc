"""The dependency rule: analysis imports neither rig nor simulators; simulators does not import rig."""

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
FORBIDDEN = {"analysis": {"rig", "simulators"}, "simulators": {"rig"}}


def imported_packages(path: Path) -> set[str]:
    tree = ast.parse(path.read_text(), filename=str(path))
    names = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names |= {alias.name.split(".")[0] for alias in node.names}
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            names.add(node.module.split(".")[0])
    return names


@pytest.mark.parametrize("package", sorted(FORBIDDEN))
def test_layer_imports(package):
    files = sorted((ROOT / package).rglob("*.py"))
    assert files
    offenders = {f.relative_to(ROOT).as_posix(): sorted(imported_packages(f) & FORBIDDEN[package]) for f in files}
    assert {f: bad for f, bad in offenders.items() if bad} == {}
