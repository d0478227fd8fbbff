"""The one-way flow of the architecture: a lower layer never imports a higher one.

Parses every module's imports (no import is executed), so a violation is caught even in code
paths tests do not reach.
"""

from __future__ import annotations

import ast
from pathlib import Path

PACKAGE = Path(__file__).resolve().parents[1] / "src" / "ethoscribe"

# Lowest first. A module may import its own layer or any layer before it.
LAYERS = [
    {"errors", "checks", "pose", "saved_state", "system", "body_plans"},
    {"io"},
    {"clean", "geometry", "filters", "track_pieces"},
    {"features", "postures", "missing_keypoints"},
    {"simulate"},
    {"segment"},
    {"ethogram", "curation", "label_table", "transitions"},
    {"stats", "effects", "multiplicity"},
    {"plots"},
    {"report", "workspace"},
    {"widgets", "cli", "__main__"},
]


def _layer_of(name: str) -> int:
    for i, layer in enumerate(LAYERS):
        if name in layer:
            return i
    raise AssertionError(f"module ethoscribe.{name} is in no layer of tests/test_layers.py")


def _top(module_path: Path) -> str:
    rel = module_path.relative_to(PACKAGE)
    return rel.parts[0].removesuffix(".py")


def _imported(tree: ast.AST) -> set[str]:
    names: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names.update(a.name for a in node.names)
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            names.add(node.module)
            names.update(f"{node.module}.{a.name}" for a in node.names)
    return {n.split(".")[1] for n in names if n.startswith("ethoscribe.") and n.count(".") >= 1}


def test_lower_layers_never_import_higher_ones():
    problems = []
    for path in sorted(PACKAGE.rglob("*.py")):
        top = _top(path)
        if top == "__init__":
            continue
        own = _layer_of(top)
        for name in _imported(ast.parse(path.read_text(), filename=str(path))):
            if name in ("__version__",) or name == top:
                continue
            if _layer_of(name) > own:
                problems.append(f"{path.relative_to(PACKAGE)} imports ethoscribe.{name}")
    assert not problems, "layering violated:\n" + "\n".join(problems)


def test_nothing_imports_widgets_or_cli():
    for path in sorted(PACKAGE.rglob("*.py")):
        top = _top(path)
        if top in ("widgets", "cli", "__main__"):
            continue
        imported = _imported(ast.parse(path.read_text()))
        assert not imported & {"widgets", "cli"}, f"{path} imports widgets or cli"


# Modules still importing another package's private module, each with its reason.
PRIVATE_IMPORTS_LEFT: set[str] = set()


def test_no_package_imports_another_packages_private_module():
    problems = []
    for path in sorted(PACKAGE.rglob("*.py")):
        rel = path.relative_to(PACKAGE)
        if rel.as_posix() in PRIVATE_IMPORTS_LEFT:
            continue
        for node in ast.walk(ast.parse(path.read_text())):
            if isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
                parts = node.module.split(".")
                private = [p for p in parts[1:] if p.startswith("_")]
                if parts[0] == "ethoscribe" and private and parts[1] != _top(path):
                    problems.append(f"{rel} imports {node.module}")
    assert not problems, "private modules used across packages:\n" + "\n".join(problems)


def test_production_code_never_imports_the_simulator():
    # Only the simulator itself, and the command that writes example sessions, use it.
    allowed = {"simulate", "cli"}
    users = [
        str(path.relative_to(PACKAGE))
        for path in sorted(PACKAGE.rglob("*.py"))
        if _top(path) not in allowed and "simulate" in _imported(ast.parse(path.read_text()))
    ]
    assert not users, f"modules importing ethoscribe.simulate: {users}"
