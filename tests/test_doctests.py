"""The Examples in the docstrings of the pure layers and the leaves run and give what
they say (each Example recovers a known answer; the source is named beside it)."""

from __future__ import annotations

import doctest
import importlib
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1] / "rundash"
MODULES = sorted(
    ".".join(("rundash", *p.relative_to(ROOT).with_suffix("").parts)).removesuffix(".__init__")
    for folder in ("dsp", "analysis") for p in (ROOT / folder).glob("*.py"))
MODULES += ["rundash.errors", "rundash.units", "rundash.conventions", "rundash.presentation",
            "rundash.cli.common"]


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples(name):
    mod = importlib.import_module(name)
    result = doctest.testmod(mod, optionflags=doctest.NORMALIZE_WHITESPACE)
    assert result.failed == 0
