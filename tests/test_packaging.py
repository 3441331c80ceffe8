"""The package list in pyproject.toml covers every package folder, and an installed
(non-editable) wheel carries the migrations, profiles and the sample runs."""

from __future__ import annotations

import subprocess
import sys
import tomllib
import zipfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_every_package_folder_is_listed():
    cfg = tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]
    listed = set(cfg["packages"])
    mapped = {k: v for k, v in cfg["package-dir"].items()}
    found = set()
    for init in (ROOT / "rundash").rglob("__init__.py"):
        found.add(".".join(init.parent.relative_to(ROOT).parts))
    for pkg, folder in mapped.items():
        for init in (ROOT / folder).rglob("__init__.py"):
            rel = init.parent.relative_to(ROOT / folder).parts
            found.add(".".join((pkg, *rel)))
    assert found == listed


def test_wheel_carries_migrations_profiles_and_sample_runs(tmp_path):
    subprocess.run([sys.executable, "-m", "pip", "wheel", "--no-deps", "--no-build-isolation",
                    "-q", "-w", str(tmp_path), str(ROOT)], check=True, capture_output=True)
    wheel = next(tmp_path.glob("rundash-*.whl"))
    names = set(zipfile.ZipFile(wheel).namelist())
    assert "rundash/migrations/env.py" in names
    assert "rundash/migrations/script.py.mako" in names
    assert any(n.startswith("rundash/migrations/versions/0001_") for n in names)
    assert "rundash/sample_runs/runs.toml" in names
    assert any(n.startswith("rundash/analysis/profiles/") and n.endswith(".toml") for n in names)
