"""The demo: build a database from the bundled sample runs and process them.

The sample runs are an invented scenario (see sample_runs/README.md); they ship with the
package as ``rundash.sample_runs``. Building is idempotent: a run already in the database
(same file content) is not imported again.
"""

from __future__ import annotations

import tomllib
from datetime import datetime, timezone
from importlib import resources
from pathlib import Path
from typing import Callable

from rundash.errors import ConfigError, DuplicateRunError
from rundash.progress import Progress, no_progress
from rundash.storage.engine import Database


def sample_runs_dir() -> Path:
    return Path(str(resources.files("rundash.sample_runs")))


def build_demo(db: Database, *, progress: Progress = no_progress,
               log: Callable[[str], None] = lambda s: None, process: bool = True) -> list[int]:
    """Import (and process) every run of the demo manifest; returns the run ids."""
    from rundash.ingest.importer import import_run
    from rundash.ingest.machine_file import load_machine_description
    from rundash.storage import queries as q

    folder = sample_runs_dir()
    manifest_path = folder / "runs.toml"
    if not manifest_path.exists():
        raise ConfigError(f"demo manifest not found: {manifest_path.name}")
    manifest = tomllib.loads(manifest_path.read_text(encoding="utf-8"))
    machine_file = folder / manifest.get("machine", "")
    if not manifest.get("machine") or not machine_file.is_file():
        machine_file = next(iter(sorted(p for p in folder.glob("*.toml") if p.name != "runs.toml")))
    desc, text = load_machine_description(machine_file)
    ids: list[int] = []
    for entry in manifest["runs"]:
        path = folder / entry["file"]
        started = datetime.fromisoformat(entry["started_at"].replace("Z", "+00:00")
                                         ).astimezone(timezone.utc)
        try:
            res = import_run(db, path, desc, description_text=text, label=entry["label"],
                             cycle=entry.get("cycle", ""), notes=entry.get("notes", ""),
                             started_at=started, kind=entry.get("kind", "mixed"),
                             test_kind=entry.get("test_kind", "field"), progress=progress)
            run_id = res.run_id
            log(f"imported {path.name} as run {run_id}")
        except DuplicateRunError:
            from rundash.ingest.importer import file_sha256
            with db.read() as conn:
                run_id = q.find_run_by_hash(conn, file_sha256(path))
            log(f"{path.name} is already run {run_id}")
        ids.append(run_id)
        if process:
            with db.read() as conn:
                done = q.load_processing(conn, run_id) is not None
            if not done:
                from rundash.workflows.pipeline import process_run
                process_run(db, run_id, progress=progress)
                log(f"processed run {run_id}")
    return ids
