"""One vector store (revision 0004): the live monitor's vectors and the processed tracks
share ``vector_track``, told apart by ``source``. Upgrading an 0003 database moves every
live vector across unchanged, downgrading moves them back, processing replaces only its
own rows, and sync carries both (on SQLite and PostgreSQL)."""

from __future__ import annotations

import numpy as np
from alembic import command
from numpy.testing import assert_array_equal
from sqlalchemy import text

from rundash.ingest.importer import import_run
from rundash.ingest.machine_file import parse_machine_description
from rundash.storage import live_queries as lq
from rundash.storage import queries as q
from rundash.storage.engine import _script, open_database, upgrade_schema
from rundash.storage.sync import sync
from rundash.workflows.pipeline import process_run
from tests import live_synth


def _run_with_live_vectors(db, tmp_path):
    wav = tmp_path / "run.wav"
    live_synth.write_run(wav, [0, 20, 30], [600, 3000, 3000], seed=4)
    desc = parse_machine_description(live_synth.MACHINE, "machine.toml")
    run_id = import_run(db, wav, desc, description_text=live_synth.MACHINE).run_id
    process_run(db, run_id)
    with db.read() as conn:
        chans = [t.channel_id for t in q.load_tracks(conn, run_id, order=1.0,
                                                     compensated=False)]
    rng = np.random.default_rng(1)
    batches = []
    for seq in range(3):  # three batches as the recorder appends them
        rows = [(cid, 1.0, *rng.random((5, 7))) for cid in chans]
        batches.append(rows)
        with db.write() as conn:
            lq.save_vectors(conn, run_id, seq, rows)
    return run_id


def _snapshot(db, run_id):
    with db.read() as conn:
        tracks = q.load_tracks(conn, run_id)
        live = lq.load_live_tracks(conn, run_id)
    return tracks, live


def _same(a, b):
    (ta, la), (tb, lb) = a, b
    assert len(ta) == len(tb) > 0 and len(la) == len(lb) > 0
    for x, y in zip(ta + la, tb + lb):
        assert (x.channel_id, x.order) == (y.channel_id, y.order)
        for col in ("time_s", "speed_rpm", "amplitude", "phase_lag_deg", "direct"):
            assert_array_equal(getattr(x, col), getattr(y, col))


def _alembic(db, rev, how):
    cfg, _ = _script()
    with db.engine.connect() as conn:
        if db.engine.dialect.name == "sqlite":
            conn.exec_driver_sql("PRAGMA foreign_keys = OFF")
        cfg.attributes["connection"] = conn
        getattr(command, how)(cfg, rev)
        conn.commit()


def test_downgrade_and_upgrade_keep_every_vector(db_url, tmp_path):
    db = open_database(db_url, create=True)
    run_id = _run_with_live_vectors(db, tmp_path)
    before = _snapshot(db, run_id)
    n_processed = len(before[0])
    _alembic(db, "0003", "downgrade")
    with db.engine.connect() as conn:
        n_live = conn.execute(text("SELECT COUNT(*) FROM live_vector")).scalar()
        n_vt = conn.execute(text("SELECT COUNT(*) FROM vector_track")).scalar()
    assert n_live == 3 * len(before[1]) and n_vt == n_processed
    upgrade_schema(db.engine)
    with db.engine.connect() as conn:
        tables = set(conn.dialect.get_table_names(conn))
        by_source = dict(conn.execute(text(
            "SELECT source, COUNT(*) FROM vector_track GROUP BY source")).all())
    assert "live_vector" not in tables
    assert by_source == {"processed": n_processed, "live": n_live}
    _same(before, _snapshot(db, run_id))
    db.dispose()


def test_processing_again_replaces_only_the_processed_rows(db, tmp_path):
    run_id = _run_with_live_vectors(db, tmp_path)
    before = _snapshot(db, run_id)
    process_run(db, run_id)
    after = _snapshot(db, run_id)
    _same(before, after)  # the same processing gives the same tracks; live kept whole


def test_sync_carries_live_and_processed_vectors(db, tmp_path):
    run_id = _run_with_live_vectors(db, tmp_path)
    before = _snapshot(db, run_id)
    other = open_database(str(tmp_path / "copy.sqlite"), create=True)
    sync(db, other)
    with other.read() as conn:
        (copied,) = [r.id for r in q.list_runs(conn)]
    got = _snapshot(other, copied)
    assert [t.probe_name for t in got[0]] == [t.probe_name for t in before[0]]
    for x, y in zip(before[0] + before[1], got[0] + got[1]):
        assert_array_equal(x.amplitude, y.amplitude)
    # results updated again from the source: the destination's live rows are not doubled
    process_run(db, run_id)
    sync(db, other)
    assert len(_snapshot(other, copied)[1]) == len(before[1])
    with other.read() as conn:
        n = conn.execute(text("SELECT COUNT(*) FROM vector_track WHERE source = 'live'")
                         ).scalar()
    assert n == 3 * len(before[1])
    other.dispose()
