"""Helpers of the fleet tests: small distinct runs, and a full dump of a stored run that
two databases can be compared by (every chunk and result, ids mapped away)."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
from scipy.io import wavfile
from sqlalchemy import select

from rundash.storage import orm
from rundash.storage.sync import run_content_hash
from tests.workflows.test_pipeline import MACHINE as PIPELINE_MACHINE

# the pipeline test's two-probe rig, under a name of its own
MACHINE = PIPELINE_MACHINE.replace('name = "Synthetic rig"', 'name = "Fleet rig F-1"')


def write_run_wavs(folder: Path, n: int, *, n_samples: int, fs: int = 2048, seed: int = 0):
    """``n`` WAV files of distinct content (seeded noise under a 1/rev pulse train)."""
    rng = np.random.default_rng(seed)
    paths = []
    for k in range(n):
        t = np.arange(n_samples) / fs
        theta = 20.0 * t + 0.5 * 2.0 * t ** 2  # revolutions: 1200 rpm rising at 120 rpm/s
        tach = np.where((theta % 1.0) < 0.05, 0.5, 0.0)
        x = 0.3 * np.cos(2 * np.pi * theta) + 0.01 * rng.standard_normal(n_samples)
        v = 0.1 * np.sin(2 * np.pi * theta) + 0.01 * rng.standard_normal(n_samples)
        p = folder / f"run{k:02d}.wav"
        wavfile.write(p, fs, np.vstack([tach, x, v]).T.astype(np.float32))
        paths.append(p)
    return paths


def _norm(v):
    if isinstance(v, float):
        return float(v).hex()  # bit-exact comparison, NaN included
    if isinstance(v, (dict, list)):
        return json.dumps(v, sort_keys=True)
    return v


def dump_run(db, run_id: int) -> dict:
    """Everything stored for a run, with database ids replaced by what they mean."""
    t = orm.Base.metadata.tables
    R, C, W = t["run"], t["channel"], t["waveform_chunk"]
    out: dict = {}
    with db.read() as conn:
        r = conn.execute(select(R).where(R.c.id == run_id)).first()
        out["run"] = {k: _norm(v) for k, v in r._mapping.items() if k not in ("id", "machine_id")}
        chans = conn.execute(select(C).where(C.c.run_id == run_id).order_by(C.c.position)).all()
        pos = {c.id: c.position for c in chans}
        out["channels"] = [{k: _norm(v) for k, v in c._mapping.items()
                            if k not in ("id", "run_id")} for c in chans]
        out["chunks"] = sorted(
            (pos[w.channel_id], w.chunk_index, w.start_index, w.n_samples,
             _norm(w.sample_rate_hz), bytes(w.data))
            for w in conn.execute(select(W).where(W.c.channel_id.in_(list(pos)))))
        for name, table in t.items():
            if name in ("run", "channel") or "run_id" not in table.c:
                continue
            rows = []
            for row in conn.execute(select(table).where(table.c.run_id == run_id)):
                d = {}
                for k, v in row._mapping.items():
                    if k in ("id", "run_id"):
                        continue
                    if k == "channel_id":
                        v = pos[v]
                    if k == "findings_json" and isinstance(v, dict):
                        v = dict(v, run={**v["run"], "id": None})  # the id is per database
                    d[k] = bytes(v) if isinstance(v, (bytes, memoryview)) else _norm(v)
                rows.append(tuple(sorted(d.items())))
            out[name] = sorted(rows)
        out["content_sha256"] = run_content_hash(conn, run_id)
    return out


def runs_by_content(db) -> dict[str, int]:
    t = orm.Base.metadata.tables
    with db.read() as conn:
        ids = conn.execute(select(t["run"].c.id).order_by(t["run"].c.id)).scalars().all()
        return {run_content_hash(conn, i): i for i in ids}


def run_count(db) -> int:
    t = orm.Base.metadata.tables
    with db.read() as conn:
        return len(conn.execute(select(t["run"].c.id)).all())
