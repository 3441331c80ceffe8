"""Rules of the analysis layer: imports, no plotting or tables, and docstring examples."""

import ast
import doctest
import importlib
from pathlib import Path

import pytest

import rundash.analysis

PKG = Path(rundash.analysis.__file__).resolve().parent
MODULES = sorted(p for p in PKG.glob("*.py"))
ALLOWED_TOP = {"numpy", "scipy", "rundash", "__future__", "math", "warnings", "dataclasses",
               "typing", "tomllib", "importlib", "pathlib"}
ALLOWED_RUNDASH = ("rundash", "rundash.errors", "rundash.units", "rundash.conventions",
                   "rundash.analysis", "rundash.dsp")


@pytest.mark.parametrize("path", MODULES, ids=lambda p: p.name)
def test_imports_follow_the_layer_map(path):
    # DESIGN section 3: analysis may import dsp and the leaves; no pandas, plotly, storage
    tree = ast.parse(path.read_text(), filename=str(path))
    for node in ast.walk(tree):
        names = []
        if isinstance(node, ast.Import):
            names = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom) and node.level == 0:
            names = [node.module]
        for name in names:
            assert name.split(".")[0] in ALLOWED_TOP, f"{path.name}:{node.lineno} imports {name}"
            if name.startswith("rundash"):
                assert name == "rundash" or name.startswith(ALLOWED_RUNDASH), \
                    f"{path.name}:{node.lineno} imports {name}"


@pytest.mark.parametrize("path", MODULES, ids=lambda p: p.name)
def test_docstring_examples(path):
    mod = importlib.import_module(f"rundash.analysis.{path.stem}" if path.stem != "__init__" else "rundash.analysis")
    result = doctest.testmod(mod, optionflags=doctest.NORMALIZE_WHITESPACE)
    assert result.failed == 0
