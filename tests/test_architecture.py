"""The rules that keep ndtmap's structure readable (docs/architecture.md), checked on the source.

Nothing is imported: the imports of every module (also those inside functions) are read with ``ast``.

* Subpackages stand in layers; a module imports only from its own subpackage or from lower layers.
* No module outside the command line imports ``ndtmap.cli``.
* No module takes a private (leading-underscore) name from another subpackage.
* One definition of each shared vocabulary (MAP_KINDS, the gate's default level, the caution text).
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "ndtmap"

#: The layers, lowest first. A room (subpackage or top-level module) imports only from its own room and from rooms
#: of lower layers. Rooms on one layer do not import each other.
LAYERS: tuple[tuple[str, ...], ...] = (
    ("errors", "_version"),
    ("_shared", "cluster"),
    ("physics",),
    ("grid",),
    ("io", "signal"),
    ("simulate",),
    ("gates",),
    ("scans",),
    ("indications",),
    ("procedure",),
    ("plot",),
    ("report",),
    ("workbench",),
    ("cli",),
    ("__main__",),
)
LAYER_OF = {room: k for k, rooms in enumerate(LAYERS) for room in rooms}


def _modules() -> dict[str, Path]:
    out = {}
    for path in sorted(PACKAGE.rglob("*.py")):
        parts = list(path.relative_to(PACKAGE.parent).with_suffix("").parts)
        if parts[-1] == "__init__":
            parts = parts[:-1]
        out[".".join(parts)] = path
    return out


MODULES = _modules()


def _room(module: str) -> str | None:
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else None


def _imports(module: str, path: Path) -> list[tuple[str, str | None, int]]:
    """(imported module, imported name or None, line) for every import of ndtmap in `path`."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    package = module if path.name == "__init__.py" else module.rsplit(".", 1)[0]
    out = []
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")[: len(package.split(".")) - (node.level - 1)]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            if target == "ndtmap" or target.startswith("ndtmap."):
                for alias in node.names:
                    full = f"{target}.{alias.name}"
                    if full in MODULES:
                        out.append((full, None, node.lineno))
                    else:
                        out.append((target, alias.name, node.lineno))
        elif isinstance(node, ast.Import):
            for alias in node.names:
                if alias.name.startswith("ndtmap"):
                    out.append((alias.name, None, node.lineno))
    return out


IMPORTS = {m: _imports(m, p) for m, p in MODULES.items()}


def test_every_room_has_a_layer():
    rooms = {_room(m) for m in MODULES} - {None}
    assert rooms <= set(LAYER_OF), f"rooms without a layer in LAYERS: {sorted(rooms - set(LAYER_OF))}"


def test_imports_go_down_the_layers():
    wrong = []
    for module, imports in IMPORTS.items():
        room = _room(module)
        if room is None:  # ndtmap/__init__.py: the curated face of everything (loaded lazily)
            continue
        for target, _name, line in imports:
            other = _room(target)
            if target == "ndtmap":  # the package top re-exports every room: importing it runs back up
                wrong.append(f"{module}:{line} imports the package top ndtmap (import from the room that defines it)")
                continue
            if other == room:
                continue
            if LAYER_OF[other] >= LAYER_OF[room]:
                wrong.append(f"{module}:{line} imports {target} ({other} is not below {room})")
    assert not wrong, "\n".join(wrong)


def test_the_library_never_imports_the_command_line():
    users = [f"{m}:{line}" for m, imports in IMPORTS.items() for target, _n, line in imports
             if (target == "ndtmap.cli" or target.startswith("ndtmap.cli.")) and _room(m) not in ("cli", "__main__")]
    assert not users, users


def test_no_private_names_across_rooms():
    reach = [f"{m}:{line} takes {target}.{name}" for m, imports in IMPORTS.items() for target, name, line in imports
             if name and name.startswith("_") and not name.startswith("__") and _room(target) != _room(m)]
    assert not reach, "\n".join(reach)


@pytest.mark.parametrize("name", ["MAP_KINDS", "DEFAULT_THRESHOLD_FSH", "CAUTION"])
def test_one_definition_of_shared_vocabulary(name):
    defining = []
    for module, path in MODULES.items():
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in tree.body:
            targets = node.targets if isinstance(node, ast.Assign) else [node.target] \
                if isinstance(node, ast.AnnAssign) else []
            if any(isinstance(t, ast.Name) and t.id == name for t in targets):
                defining.append(module)
    assert len(defining) == 1, f"{name} is defined in {defining}"
