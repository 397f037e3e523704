"""castline's package is layered, and imports only go down.

The layers, lowest first, are the folders of pipeline/ (DEVELOPERS.md, "The
map"); the modules at the top (runner, cli and its outcome, the package itself) may import any
of them. Every import statement is walked, those inside functions included.
"""

from __future__ import annotations

import ast
from pathlib import Path

from conftest import ROOT

PACKAGE = ROOT / "pipeline"
LAYERS = ["core", "spec", "features", "models", "stages", "record", "review", "present"]
TOP = len(LAYERS)
MAX_LINES = 600


def _module_name(path: Path) -> str:
    parts = list(path.relative_to(PACKAGE.parent).with_suffix("").parts)
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def _layer(module: str) -> int:
    parts = module.split(".")
    return LAYERS.index(parts[1]) if len(parts) > 1 and parts[1] in LAYERS else TOP


def _imports(path: Path) -> list[tuple[int, str]]:
    found = []
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            found += [(node.lineno, alias.name) for alias in node.names]
        elif isinstance(node, ast.ImportFrom) and node.module:
            assert node.level == 0, f"{path}:{node.lineno}: relative import"
            if node.module == "pipeline":   # from pipeline import x: x is the module
                found += [(node.lineno, f"pipeline.{alias.name}") for alias in node.names]
            else:
                found.append((node.lineno, node.module))
    return [(line, name) for line, name in found if name == "pipeline" or name.startswith("pipeline.")]


def _modules() -> list[Path]:
    return sorted(PACKAGE.rglob("*.py"))


def test_every_import_goes_down_or_stays_in_its_layer():
    upward = []
    for path in _modules():
        importer = _module_name(path)
        for line, imported in _imports(path):
            if _layer(imported) > _layer(importer):
                upward.append(f"{path.relative_to(PACKAGE.parent)}:{line}: {importer} "
                              f"({LAYERS[_layer(importer)] if _layer(importer) < TOP else 'top'}) "
                              f"imports {imported}")
    assert not upward, "imports that go up a layer:\n" + "\n".join(upward)


def test_the_walk_sees_an_upward_import(tmp_path):
    # The check itself can fail: a model importing a stage is caught.
    layered = _layer("pipeline.stages.backtest") > _layer("pipeline.models.ols")
    assert layered and _layer("pipeline.runner") == TOP and _layer("pipeline.core.errors") == 0
    source = tmp_path / "mod.py"
    source.write_text("def f():\n    from pipeline.stages import backtest\n")
    assert _imports(source) == [(2, "pipeline.stages")]


def test_every_module_is_in_a_layer_or_at_the_top():
    loose = [_module_name(p) for p in _modules()
             if _layer(_module_name(p)) == TOP
             and _module_name(p) not in ("pipeline", "pipeline.__main__", "pipeline.cli", "pipeline.outcome",
                                     "pipeline.runner")]
    assert not loose, f"modules outside the layers: {loose}"


def test_no_module_is_longer_than_the_limit():
    long = {str(p.relative_to(PACKAGE.parent)): n for p in _modules()
            if (n := len(p.read_text(encoding="utf-8").splitlines())) > MAX_LINES}
    assert not long, f"modules over {MAX_LINES} lines: {long}"
