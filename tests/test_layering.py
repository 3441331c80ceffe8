"""Imports follow the layer map of DEVELOPERS.md ("Layers"), keyed by folder: parse every
module and fail on an import that runs the wrong way, naming the file and line.

A module's layer is the folder (or top-level module) it sits in under ``rundash/``:
``rundash/workflows/live.py`` is in ``workflows``, ``rundash/cli/commands.py`` in ``cli``. The
migrations (``migrations/``, installed as ``rundash.migrations``) are the ``migrations``
layer. There are no passes by module name.
"""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
# leaves: anyone may import them; they import only each other
LEAVES = {"", "errors", "units", "conventions", "progress"}

# layer -> layers it may import (besides itself and the leaves); DEVELOPERS.md, "Layers"
ALLOWED = {
    "leaf": set(),
    "model": set(),
    "dsp": set(),
    "analysis": {"dsp"},
    "storage": {"model"},
    "migrations": {"storage"},
    "ingest": {"storage", "model", "analysis"},
    "workflows": {"storage", "ingest", "dsp", "analysis", "model"},
    "figures": {"analysis", "dsp", "model"},
    "presentation": set(),
    "report": {"workflows", "figures", "presentation", "model", "storage", "ingest"},
    "dashboard": {"workflows", "figures", "presentation", "model", "storage", "ingest",
                  "report"},
    "cli": {"workflows", "figures", "presentation", "model", "storage", "ingest", "report",
            "dashboard"},
    # rundash/api.py, the public Python API: a face for notebooks and scripts
    "api": {"workflows", "storage", "ingest", "model"},
}
# layer -> layers it may import inside a function only (a lazy import, run on first use),
# never at module level: the leaves, so the package root (rundash/__init__.py) offers the
# API's names (rundash.open, ...) through a module __getattr__ and `import rundash` stays
# light.
LAZY = {"leaf": {"api"}}
# the pure layers: no I/O, no tables, no plots (DEVELOPERS.md, "Layers")
PURE = ("dsp", "analysis")
NO_IO = {"sqlalchemy", "pandas", "plotly", "dash", "flask", "h5py", "pyarrow", "alembic",
         "tomllib", "pathlib", "io", "json", "csv", "sqlite3", "socket", "shutil",
         "tempfile", "importlib", "pickle", "subprocess"}


def layer_of(module: str) -> str:
    parts = module.split(".")
    key = parts[1] if len(parts) > 1 else ""
    return "leaf" if key in LEAVES else key


def modules():
    for path in sorted((ROOT / "rundash").rglob("*.py")):
        rel = path.relative_to(ROOT).with_suffix("")
        name = ".".join(rel.parts).removesuffix(".__init__")
        yield name, path
    for path in sorted((ROOT / "migrations").rglob("*.py")):
        rel = path.relative_to(ROOT / "migrations").with_suffix("")
        name = ".".join(("rundash", "migrations", *rel.parts)).removesuffix(".__init__")
        yield name, path


def imported(tree: ast.AST, module: str, is_package: bool):
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for a in node.names:
                yield a.name, node.lineno
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = module.split(".")
                base = base[: len(base) - node.level + (1 if is_package else 0)]
                name = ".".join(base + ([node.module] if node.module else []))
            else:
                name = node.module or ""
            yield name, node.lineno
            for a in node.names:  # from rundash import storage -> rundash.storage
                if name == "rundash" and ((ROOT / "rundash" / a.name).is_dir() or
                                          (ROOT / "rundash" / f"{a.name}.py").exists()):
                    yield f"rundash.{a.name}", node.lineno


def _tree(path: Path) -> ast.AST:
    return ast.parse(path.read_text(encoding="utf-8"), filename=str(path))


def _lines_inside_functions(tree: ast.AST) -> set[int]:
    """Line numbers of the imports inside a function body."""
    return {n.lineno for f in ast.walk(tree) if isinstance(f, (ast.FunctionDef, ast.AsyncFunctionDef))
            for n in ast.walk(f) if isinstance(n, (ast.Import, ast.ImportFrom))}


def test_every_folder_has_a_layer():
    unknown = sorted({layer_of(m) for m, _ in modules()} - set(ALLOWED))
    assert not unknown, (f"folders of rundash/ without a layer in the map: {unknown} "
                         "(add them to ALLOWED here and to DEVELOPERS.md)")


def test_imports_follow_the_layer_map():
    bad = []
    for module, path in modules():
        src = layer_of(module)
        allowed = ALLOWED.get(src, set()) | {src, "leaf"}
        tree = _tree(path)
        lazy = _lines_inside_functions(tree)
        for name, line in imported(tree, module, path.name == "__init__.py"):
            if name.split(".")[0] != "rundash":
                continue
            dst = layer_of(name)
            if dst in LAZY.get(src, set()) and line in lazy:
                continue
            if dst not in allowed:
                bad.append(f"{path.relative_to(ROOT)}:{line}: {src} imports {name} ({dst})")
    assert not bad, "imports against the layer map:\n" + "\n".join(bad)


def test_no_private_names_across_modules():
    """``from rundash.x import _name`` reaches into another module's insides."""
    bad = []
    for module, path in modules():
        for node in ast.walk(_tree(path)):
            if isinstance(node, ast.ImportFrom) and (node.module or "").startswith("rundash"):
                for a in node.names:
                    if a.name.startswith("_") and not a.name.startswith("__"):
                        bad.append(f"{path.relative_to(ROOT)}:{node.lineno}: imports "
                                   f"{node.module}.{a.name}")
    assert not bad, "\n".join(bad)


@pytest.mark.parametrize("layer", PURE)
def test_pure_layers_do_no_io(layer):
    bad = []
    for module, path in modules():
        if layer_of(module) != layer:
            continue
        tree = _tree(path)
        for name, line in imported(tree, module, path.name == "__init__.py"):
            if name.split(".")[0] in NO_IO:
                bad.append(f"{path.relative_to(ROOT)}:{line}: imports {name}")
        for node in ast.walk(tree):
            if (isinstance(node, ast.Call) and isinstance(node.func, ast.Name)
                    and node.func.id in ("open", "print", "input")):
                bad.append(f"{path.relative_to(ROOT)}:{node.lineno}: calls {node.func.id}()")
    assert not bad, "\n".join(bad)


def test_import_rundash_is_light_and_the_api_loads_no_dash(tmp_path):
    """`import rundash` loads no library at all; the Python API (rundash.open and a
    DataFrame of runs) loads pandas and SQLAlchemy but neither Dash nor plotly."""
    code = ("import sys; import rundash; "
            "print(sorted({m.split('.')[0] for m in sys.modules} & "
            "{'pandas', 'sqlalchemy', 'numpy', 'dash', 'plotly'})); "
            f"db = rundash.open({str(tmp_path / 'api.sqlite')!r}, create=True); db.runs(); "
            "print(sorted(m for m in sys.modules if m.split('.')[0] in ('dash', 'plotly')))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True, cwd=ROOT).stdout.split("\n")
    assert out[:2] == ["[]", "[]"]


def test_import_command_does_not_load_dash():
    code = ("import sys; from rundash import cli; cli.build_parser(); "
            "import rundash.ingest.importer, rundash.storage.queries; "
            "print(sorted(m for m in sys.modules if m.split('.')[0] in ('dash', 'plotly')))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True, cwd=ROOT).stdout.strip()
    assert out == "[]"
