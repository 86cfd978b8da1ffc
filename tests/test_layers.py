"""The dependency rules.

Packages: analysis imports neither rig nor simulators; simulators does not import rig.
Inside rig, imports run one way: cli -> commands -> run -> devices and output -> the shared modules at rig's top level
(errors, safety, atomic, options). No command imports another command.
"""

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
FORBIDDEN = {"analysis": {"rig", "simulators"}, "simulators": {"rig"}}
ROOMS = ("commands", "run", "devices", "output")
# The rooms of rig each room may import from ("shared" is rig's top level other than cli).
MAY_IMPORT = {
    "shared": {"shared"},
    "devices": {"shared", "devices"},
    "output": {"shared", "output"},
    "run": {"shared", "devices", "output", "run"},
    "commands": {"shared", "devices", "output", "run", "commands"},
}


def imported_modules(path: Path) -> set[str]:
    """Dotted names of every module ``path`` imports, at the top or inside functions; ``from a import b`` gives
    both a and a.b, since b may be a module."""
    tree = ast.parse(path.read_text(), filename=str(path))
    package = ".".join(path.relative_to(ROOT).with_suffix("").parts[:-1])
    names = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names |= {alias.name for alias in node.names}
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                parent = package.split(".")[:len(package.split(".")) - node.level + 1]
                base = ".".join(parent + ([base] if base else []))
            names.add(base)
            names |= {f"{base}.{alias.name}" for alias in node.names}
    return names


def imported_packages(path: Path) -> set[str]:
    return {name.split(".")[0] for name in imported_modules(path)}


def room_of(module: str) -> str | None:
    """The room of a rig module: 'cli', one of ROOMS, or 'shared'; None outside rig."""
    parts = module.split(".")
    if parts[0] != "rig":
        return None
    if len(parts) == 1:
        return "shared"
    if parts[1] in ROOMS or parts[1] == "cli":
        return parts[1]
    return "shared"


def module_name(path: Path) -> str:
    parts = path.relative_to(ROOT).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def rig_files() -> list[Path]:
    files = sorted((ROOT / "rig").rglob("*.py"))
    assert files
    return files


@pytest.mark.parametrize("package", sorted(FORBIDDEN))
def test_layer_imports(package):
    files = sorted((ROOT / package).rglob("*.py"))
    assert files
    offenders = {f.relative_to(ROOT).as_posix(): sorted(imported_packages(f) & FORBIDDEN[package]) for f in files}
    assert {f: bad for f, bad in offenders.items() if bad} == {}


def test_rig_imports_run_one_way():
    """commands -> run -> devices and output -> shared; nothing below cli imports it, nothing imports upwards."""
    offenders = {}
    for f in rig_files():
        room = room_of(module_name(f))
        if room == "cli":
            continue
        bad = sorted(m for m in imported_modules(f) if room_of(m) not in (None, *MAY_IMPORT[room]))
        if bad:
            offenders[f.relative_to(ROOT).as_posix()] = bad
    assert offenders == {}


def test_no_command_imports_another():
    offenders = {}
    for f in sorted((ROOT / "rig" / "commands").glob("*.py")):
        me = module_name(f)
        bad = sorted(m for m in imported_modules(f) if m.startswith("rig.commands.") and m != me)
        if bad:
            offenders[f.relative_to(ROOT).as_posix()] = bad
    assert offenders == {}


def test_rig_top_level_is_small():
    """rig/ holds its four rooms and at most six modules beside them, none of them a command."""
    top = sorted(p.name for p in (ROOT / "rig").glob("*.py"))
    assert len(top) <= 6, top
    assert not [name for name in top if name.endswith("_cmd.py")]
    assert all((ROOT / "rig" / room / "__init__.py").is_file() for room in ROOMS)
