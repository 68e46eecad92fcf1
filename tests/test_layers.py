"""The layer rules: computation never imports cv2, matplotlib, typer, rich or the CLI; no module grows
past what a reader takes in; comments cite only documents in the repository.

Checked by reading every module (the same layer contract is in pyproject.toml for import-linter).
"""
import ast
import re
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]
ROOT = REPO / "balltraj"
FORBIDDEN = {"cv2", "matplotlib", "typer", "rich", "balltraj.cli", "balltraj.report", "balltraj.library",
             "balltraj.vision", "balltraj.commands", "balltraj.pipeline", "balltraj.formats"}
MAX_MODULE_LINES = 450


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


@pytest.mark.parametrize("layer", ["physics", "fitting", "record"])
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


@pytest.mark.parametrize("layer", ["physics", "fitting", "record", "camera", "vision", "library"])
def test_library_code_does_not_print(layer):
    for f in (ROOT / layer).rglob("*.py"):
        tree = ast.parse(f.read_text(encoding="utf-8"))
        calls = [n for n in ast.walk(tree) if isinstance(n, ast.Call) and getattr(n.func, "id", "") == "print"]
        assert not calls, f"{f} prints"


def test_no_module_is_too_long():
    long = {str(f.relative_to(REPO)): n for f in ROOT.rglob("*.py")
            if (n := len(f.read_text(encoding="utf-8").splitlines())) > MAX_MODULE_LINES}
    assert not long, long


def test_cited_documents_are_in_the_repository():
    # the docs/*.md files cited anywhere in the code, tests or docs must exist
    missing = set()
    for f in list(ROOT.rglob("*.py")) + list((REPO / "tests").rglob("*.py")) + list((REPO / "docs").glob("*.md")):
        for name in re.findall(r"docs/([A-Za-z0-9_-]+\.md)", f.read_text(encoding="utf-8")):
            if not (REPO / "docs" / name).exists():
                missing.add(f"{f.name}: docs/{name}")
    assert not missing, sorted(missing)


@pytest.mark.parametrize("layer", ["physics", "fitting", "camera", "record"])
def test_low_layers_do_not_name_command_line_options(layer):
    # errors say which input they are about (BallTrajError.about); the CLI names the option
    bad = []
    for f in (ROOT / layer).rglob("*.py"):
        tree = ast.parse(f.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            if isinstance(node, ast.Raise) and node.exc is not None:
                for s in ast.walk(node.exc):
                    if isinstance(s, ast.Constant) and isinstance(s.value, str) and re.search(r"--[a-z]", s.value):
                        bad.append(f"{f.name}:{node.lineno}")
    assert not bad, bad
