"""The layers written as import-linter contracts (pyproject.toml) hold, and no module reaches
into another module's private (underscore) names."""

from __future__ import annotations

import ast
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]
LAYERS = ("tui", "analysis", "schemas", "common", "demo_season")


def test_import_contracts_are_kept():
    exe = shutil.which("lint-imports") or str(Path(sys.executable).with_name("lint-imports"))
    r = subprocess.run([exe, "--config", str(REPO / "pyproject.toml")], cwd=REPO,
                       capture_output=True, text=True, timeout=120)
    assert r.returncode == 0, r.stdout[-3000:] + r.stderr[-2000:]
    assert "0 broken" in r.stdout


def _private_imports(path: Path):
    tree = ast.parse(path.read_text(encoding="utf-8"), str(path))
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom) and node.module and node.module.startswith("fieldslope"):
            for alias in node.names:
                if alias.name.startswith("_"):
                    yield f"{path.relative_to(REPO)}:{node.lineno} imports {node.module}.{alias.name}"
        if isinstance(node, ast.Attribute) and node.attr.startswith("_") and not node.attr.startswith("__"):
            base = node.value
            if isinstance(base, ast.Name) and base.id in _module_aliases(tree):
                yield f"{path.relative_to(REPO)}:{node.lineno} uses {base.id}.{node.attr}"


def _module_aliases(tree: ast.Module) -> set[str]:
    names = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom) and node.module and node.module.startswith("fieldslope"):
            names.update(a.asname or a.name for a in node.names if not a.name[:1].isupper())
        elif isinstance(node, ast.Import):
            names.update(a.asname or a.name for a in node.names if a.name.startswith("fieldslope"))
    return names


@pytest.mark.parametrize("layer", LAYERS)
def test_no_module_imports_another_modules_private_names(layer):
    found = [hit for path in sorted((REPO / layer).rglob("*.py")) for hit in _private_imports(path)]
    assert found == []
