"""The layer rules of DESIGN.md: physics and fitting never import cv2, matplotlib, typer or the CLI.

Checked by reading every module's imports (the same contract is in pyproject.toml for import-linter).
"""
import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1] / "balltraj"
FORBIDDEN = {"cv2", "matplotlib", "typer", "rich", "balltraj.cli", "balltraj.report", "balltraj.library",
             "balltraj.vision", "balltraj.commands"}


def _imports(path: Path, package: str):
    tree = ast.parse(path.read_text(encoding="utf-8"))
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for a in node.names:
                yield a.name
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")[: len(package.split(".")) - node.level + 1]
                yield ".".join(base + ([node.module] if node.module else []))
            elif node.module:
                yield node.module


@pytest.mark.parametrize("layer", ["physics", "fitting"])
def test_layer_imports(layer):
    bad = []
    for f in (ROOT / layer).rglob("*.py"):
        for name in _imports(f, f"balltraj.{layer}"):
            if any(name == x or name.startswith(x + ".") for x in FORBIDDEN):
                bad.append(f"{f.name}: {name}")
    assert not bad, bad


def test_physics_does_not_import_fitting():
    for f in (ROOT / "physics").rglob("*.py"):
        for name in _imports(f, "balltraj.physics"):
            assert not name.startswith("balltraj.fitting"), f"{f.name} imports {name}"


def test_library_code_does_not_print():
    for layer in ("physics", "fitting"):
        for f in (ROOT / layer).rglob("*.py"):
            tree = ast.parse(f.read_text(encoding="utf-8"))
            calls = [n for n in ast.walk(tree) if isinstance(n, ast.Call) and getattr(n.func, "id", "") == "print"]
            assert not calls, f"{f} prints"
