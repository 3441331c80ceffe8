"""Imports follow the layer map (DEVELOPERS.md, "Layers"): parse every module and fail
on an import that runs the wrong way, naming the file and line."""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
LEAVES = {"rundash", "rundash.errors", "rundash.units", "rundash.conventions", "rundash.progress"}

# layer -> layers it may import (besides itself and the leaves)
ALLOWED = {
    "leaf": set(),
    "model": set(),
    "dsp": set(),
    "analysis": {"dsp"},
    "storage": {"model"},
    "migrations": {"storage"},
    "ingest": {"storage", "model"},
    "pipeline": {"storage", "ingest", "dsp", "analysis", "model", "findings"},
    "batch": {"pipeline", "storage", "model"},  # pipeline level: process_run on Dask
    "live": {"pipeline", "storage", "ingest", "dsp", "analysis", "model"},
    "findings": {"analysis", "dsp", "model"},
    "figures": {"analysis", "dsp", "model"},
    "face": {"pipeline", "batch", "live", "figures", "model", "storage", "ingest", "demo", "face",
             "analysis.profiles"},
    "demo": {"pipeline", "ingest", "storage", "model"},
}


def layer_of(module: str) -> str:
    if module in LEAVES:
        return "leaf"
    if module.startswith("rundash.migrations"):
        return "migrations"
    parts = module.split(".")
    second = parts[1] if len(parts) > 1 else ""
    if second in ("dashboard", "report", "cli"):
        return "face"
    if second == "comparison":  # pipeline-level glue: storage reads + analysis
        return "pipeline"
    return second


def target_layer(name: str) -> str:
    if name.startswith("rundash.analysis.profiles"):
        return "analysis.profiles"
    return layer_of(name)


def modules():
    for path in sorted((ROOT / "rundash").rglob("*.py")):
        rel = path.relative_to(ROOT).with_suffix("")
        name = ".".join(rel.parts).removesuffix(".__init__")
        yield name, path
    for path in sorted((ROOT / "migrations").rglob("*.py")):
        rel = path.relative_to(ROOT / "migrations").with_suffix("")
        name = ".".join(("rundash", "migrations", *rel.parts)).removesuffix(".__init__")
        yield name, path


def imported(tree: ast.AST, module: str):
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for a in node.names:
                yield a.name, node.lineno
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = module.split(".")[: -node.level]
                name = ".".join(base + ([node.module] if node.module else []))
            else:
                name = node.module or ""
            yield name, node.lineno
            for a in node.names:  # from rundash import storage -> rundash.storage
                if name == "rundash" and ((ROOT / "rundash" / a.name).is_dir() or
                                          (ROOT / "rundash" / f"{a.name}.py").exists()):
                    yield f"rundash.{a.name}", node.lineno


def test_imports_follow_the_layer_map():
    bad = []
    for module, path in modules():
        src = layer_of(module)
        allowed = ALLOWED[src] | {src}
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for name, line in imported(tree, module):
            if not name.startswith("rundash") or name in LEAVES:
                continue
            if name.startswith("rundash.sample_runs"):
                continue
            dst = target_layer(name)
            if dst == "leaf" or dst in allowed or (dst == "analysis.profiles" and
                                                   "analysis" in allowed):
                continue
            bad.append(f"{path.relative_to(ROOT)}:{line}: {src} imports {name} ({dst})")
    assert not bad, "imports against the layer map:\n" + "\n".join(bad)


def test_pure_layers_import_no_io_libraries():
    forbidden = {"sqlalchemy", "pandas", "plotly", "dash", "h5py", "pyarrow", "alembic"}
    bad = []
    for module, path in modules():
        if layer_of(module) not in ("dsp", "analysis"):
            continue
        for name, line in imported(ast.parse(path.read_text(encoding="utf-8")), module):
            if name.split(".")[0] in forbidden:
                bad.append(f"{path.relative_to(ROOT)}:{line}: imports {name}")
    assert not bad, "\n".join(bad)


def test_import_command_does_not_load_dash():
    code = ("import sys; from rundash import cli; cli.build_parser(); "
            "import rundash.ingest.importer, rundash.storage.queries; "
            "print(sorted(m for m in sys.modules if m.split('.')[0] in ('dash', 'plotly')))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True, cwd=ROOT).stdout.strip()
    assert out == "[]"
