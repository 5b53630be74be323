"""The package's layers (docs/architecture.md), enforced on the source.

Each subpackage of ``explorer`` is a layer; a module may import its own layer and the
layers below it, never one above: the numerical core never imports the search or the
outputs. Every package import is at module top (the graph is visible), the one
exception being the command's edge: ``explorer/cli/__init__.py`` imports the
application inside ``main()``, and ``explorer/cli/app.py`` loads a command's module by
name, only the one a command needs, so a missing dependency is one line and the loop
checks run with numpy and scipy alone. No module imports another
module's private (``_name``) names, and every module says what it offers in
``__all__``.
"""

from __future__ import annotations

import ast
import importlib
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "explorer"

#: Lowest first. A module of layer i may import layers 0..i.
LAYERS = ("core", "model", "frequency", "time_domain", "design", "evaluation", "outputs",
          "search", "cli")
#: Outside the layers: the package's own __init__/__main__, and the schema generator
#: (a developer script over the metric list).
OUTSIDE = {"__init__.py", "__main__.py", "schemas"}
#: The one place allowed to import inside a function.
EDGE = PACKAGE / "cli" / "__init__.py"


def _modules() -> list[Path]:
    return sorted(p for p in PACKAGE.rglob("*.py")
                  if p.relative_to(PACKAGE).parts[0] not in OUTSIDE)


def _layer_of_path(p: Path) -> str:
    return p.relative_to(PACKAGE).parts[0]


def _explorer_imports(tree: ast.Module) -> list[tuple[ast.stmt, str, list[str]]]:
    """(node, dotted module, imported names) of every import of the package."""
    out = []
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom):
            assert node.level == 0, "relative imports are not used in this package"
            if node.module and (node.module == "explorer" or node.module.startswith("explorer.")):
                out.append((node, node.module, [a.name for a in node.names]))
        elif isinstance(node, ast.Import):
            for a in node.names:
                if a.name.startswith("explorer."):
                    out.append((node, a.name, []))
    return out


def _target_layer(module: str, names: list[str]) -> list[str]:
    parts = module.split(".")
    if len(parts) >= 2:
        return [parts[1]]
    return names  # ``from explorer import core`` names the layer itself


def test_every_module_is_in_a_layer() -> None:
    for p in _modules():
        assert _layer_of_path(p) in LAYERS, f"{p.relative_to(PACKAGE)}: not in a layer"
    # and every layer exists as a subpackage with a docstring saying what it holds
    for layer in LAYERS:
        init = PACKAGE / layer / "__init__.py"
        assert init.is_file(), layer
        assert ast.get_docstring(ast.parse(init.read_text(encoding="utf-8"))), layer


@pytest.mark.parametrize("path", _modules(), ids=lambda p: str(p.relative_to(PACKAGE)))
def test_imports_go_down_the_layers(path: Path) -> None:
    own = LAYERS.index(_layer_of_path(path))
    tree = ast.parse(path.read_text(encoding="utf-8"))
    for node, module, names in _explorer_imports(tree):
        for target in _target_layer(module, names):
            assert target in LAYERS, f"{path.name}:{node.lineno} imports {module}"
            assert LAYERS.index(target) <= own, (
                f"{path.relative_to(PACKAGE)}:{node.lineno} imports {module}: layer "
                f"{target!r} is above {LAYERS[own]!r}")


@pytest.mark.parametrize("path", _modules(), ids=lambda p: str(p.relative_to(PACKAGE)))
def test_imports_are_at_module_top(path: Path) -> None:
    tree = ast.parse(path.read_text(encoding="utf-8"))
    top = set(map(id, tree.body))
    inner = [n for n in ast.walk(tree)
             if isinstance(n, (ast.Import, ast.ImportFrom)) and id(n) not in top]
    if path == EDGE:
        return
    assert not inner, (f"{path.relative_to(PACKAGE)}: imports inside functions at lines "
                       f"{[n.lineno for n in inner]}")


@pytest.mark.parametrize("path", _modules(), ids=lambda p: str(p.relative_to(PACKAGE)))
def test_no_private_names_cross_modules(path: Path) -> None:
    tree = ast.parse(path.read_text(encoding="utf-8"))
    for node, _module, names in _explorer_imports(tree):
        private = [n for n in names if n.startswith("_")]
        assert not private, f"{path.relative_to(PACKAGE)}:{node.lineno} imports {private}"


@pytest.mark.parametrize("path", _modules(), ids=lambda p: str(p.relative_to(PACKAGE)))
def test_every_module_declares_its_public_names(path: Path) -> None:
    rel = path.relative_to(PACKAGE).with_suffix("")
    name = "explorer." + ".".join(p for p in rel.parts if p != "__init__")
    mod = importlib.import_module(name)
    public = getattr(mod, "__all__", None)
    assert public is not None, f"{name}: no __all__"
    missing = [n for n in public if not hasattr(mod, n)]
    assert not missing, f"{name}: __all__ names {missing} that do not exist"


def test_the_rule_catches_an_upward_import(tmp_path: Path) -> None:
    """The checker itself: an import of the search from the core is reported."""
    fake = PACKAGE / "core" / "loop.py"
    tree = ast.parse("from explorer.search.tune import Problem\n")
    (node, module, names), = _explorer_imports(tree)
    assert _target_layer(module, names) == ["search"]
    assert LAYERS.index("search") > LAYERS.index(_layer_of_path(fake))
    inner = ast.parse("def f():\n    from explorer.core.loop import Rational\n")
    assert any(isinstance(n, ast.ImportFrom) and n not in inner.body for n in ast.walk(inner))


_BLOCK = ("import sys\n"
          "for m in ('altair', 'optuna', 'pandas', 'vl_convert'):\n"
          "    sys.modules[m] = None  # importing it now raises ImportError\n"
          "from explorer.cli import main\n"
          "sys.exit(main(sys.argv[1:]))\n")


@pytest.mark.parametrize("argv", [
    ["check", "studies/balance_platform.toml", "--json"],
    ["balance", "studies/balance_platform.toml", "--json"],
    ["implement", "studies/conveyor_plc.toml", "--design", "PI", "--json"],
])
def test_checks_need_only_numpy_and_scipy(argv) -> None:
    """The command modules are loaded at the edge, only the one a command needs: the
    loop checks run where Optuna, pandas and Altair are not installed."""
    import json
    import subprocess
    import sys

    root = PACKAGE.parent
    r = subprocess.run([sys.executable, "-c", _BLOCK, *argv], cwd=root,
                       capture_output=True, text=True, timeout=120)
    assert r.returncode == 0, r.stderr[-400:]
    assert "caution" in json.loads(r.stdout)


def test_a_command_missing_its_library_says_so_in_one_line(tmp_path) -> None:
    import subprocess
    import sys

    root = PACKAGE.parent
    r = subprocess.run([sys.executable, "-c", _BLOCK, "explore", "studies/kiln_damper.toml",
                        "--out", str(tmp_path / "x")], cwd=root, capture_output=True,
                       text=True, timeout=120)
    assert r.returncode == 1 and r.stdout == ""
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and "is not installed" in lines[0], r.stderr[-400:]
