"""The library's layers: lower layers never import higher ones (DEVELOPERS.md, "Layers")."""
import ast
from pathlib import Path

import pytest

PKG = Path(__file__).resolve().parents[1] / "scripts" / "siteshift"

#: what each layer may import from siteshift (besides itself)
ALLOWED = {
    "base": set(),
    "structures": {"base"},
    "qm": {"base"},
    "environment": {"base", "structures"},
    "interactions": {"base", "structures", "environment", "qm"},
    "study": {"base", "structures", "environment", "qm", "interactions"},
    "cli": {"base", "structures", "environment", "qm", "interactions", "study"},
}
#: longest module, in lines (a module that grows past it is split along its seams)
MAX_LINES = 500


def _layer(path: Path) -> str:
    rel = path.relative_to(PKG)
    return rel.parts[0] if len(rel.parts) > 1 else rel.stem


def _imported_layers(path: Path, pkg: Path = PKG):
    """(lineno, layer) of every siteshift import in a module, absolute or relative."""
    tree = ast.parse(path.read_text())
    pkg_parts = path.relative_to(pkg).parts[:-1]
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = list(pkg_parts[:len(pkg_parts) - node.level + 1])
                target = base + (node.module.split(".") if node.module else [])
                if not target:  # "from .. import x" at the top: x names the layer
                    for a in node.names:
                        yield node.lineno, a.name
                    continue
                yield node.lineno, target[0]
            elif node.module and node.module.split(".")[0] == "siteshift":
                parts = node.module.split(".")
                if len(parts) > 1:
                    yield node.lineno, parts[1]
        elif isinstance(node, ast.Import):
            for a in node.names:
                parts = a.name.split(".")
                if parts[0] == "siteshift" and len(parts) > 1:
                    yield node.lineno, parts[1]


MODULES = sorted(p for p in PKG.rglob("*.py") if p.name != "__init__.py" or p.parent != PKG)


@pytest.mark.parametrize("path", MODULES, ids=lambda p: str(p.relative_to(PKG)))
def test_no_layer_imports_a_higher_one(path):
    layer = _layer(path)
    assert layer in ALLOWED, f"{path}: module outside the known layers {sorted(ALLOWED)}"
    bad = [(ln, target) for ln, target in _imported_layers(path)
           if target != layer and target in ALLOWED and target not in ALLOWED[layer]]
    assert not bad, f"{path.relative_to(PKG)} ({layer}) imports higher layers: {bad}"


def test_every_layer_says_what_it_may_import():
    for sub in (p for p in PKG.iterdir() if p.is_dir() and p.name in ALLOWED):
        doc = ast.get_docstring(ast.parse((sub / "__init__.py").read_text())) or ""
        assert "May import" in doc, f"{sub.name}/__init__.py must say what the layer may import"


@pytest.mark.parametrize("path", MODULES, ids=lambda p: str(p.relative_to(PKG)))
def test_modules_stay_small(path):
    n = len(path.read_text().splitlines())
    assert n <= MAX_LINES, f"{path.relative_to(PKG)} has {n} lines (> {MAX_LINES}): split it"


def test_the_layer_check_sees_a_violation(tmp_path):
    # the checker itself must catch an upward import (else the tests above could never fail)
    (tmp_path / "siteshift" / "qm").mkdir(parents=True)
    mod = tmp_path / "siteshift" / "qm" / "probe.py"
    mod.write_text("from ..study import stages\nfrom siteshift.environment import metrics\n"
                   "from .dfjk import CompactDF\n")
    found = sorted(t for _ln, t in _imported_layers(mod, tmp_path / "siteshift"))
    assert found == ["environment", "qm", "study"]
