"""Block axes stored once per run (revision 0007): the processed tracks of a run share
one row of block times and speeds; each track keeps only its own vectors. Tracks written
before 0007 (their own axes) read as before, a downgrade puts the axes back into every
row, and sync carries the shared row (on SQLite and PostgreSQL)."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_array_equal
from sqlalchemy import text

from rundash.errors import StorageError
from rundash.storage import queries as q
from rundash.storage.engine import open_database, upgrade_schema
from rundash.storage.sync import sync
from tests.storage.test_vector_store import _alembic, _run_with_live_vectors, _same, _snapshot


def _lengths(db, run_id):
    with db.engine.connect() as conn:
        return conn.execute(text(
            "SELECT n, length(time_s), length(speed_rpm), length(amplitude) FROM vector_track "
            "WHERE source = 'processed' AND run_id = :r"), {"r": run_id}).all()


def test_processed_tracks_share_one_row_of_axes(db, tmp_path):
    run_id = _run_with_live_vectors(db, tmp_path)
    rows = _lengths(db, run_id)
    assert rows and all(n > 0 and lt == 0 and ls == 0 and la == 4 * n for n, lt, ls, la in rows)
    with db.read() as conn:
        t, s = q.load_block_axes(conn, run_id)
        tracks = q.load_tracks(conn, run_id)
    assert t.size == s.size == rows[0][0]
    assert np.all(np.diff(t) > 0) and np.all(s > 0)
    for tr in tracks:  # the same arrays for every track, decoded once
        assert tr.time_s is tracks[0].time_s and tr.speed_rpm is tracks[0].speed_rpm
        assert tr.amplitude.size == t.size
    assert_array_equal(tracks[0].time_s, t)


def test_tracks_with_their_own_axes_still_read(db_url, tmp_path):
    db = open_database(db_url, create=True)
    run_id = _run_with_live_vectors(db, tmp_path)
    before = _snapshot(db, run_id)
    _alembic(db, "0006", "downgrade")  # the axes go back into every processed row
    n = before[0][0].time_s.size
    assert all(lt == ls == 8 * n for _, lt, ls, _ in _lengths(db, run_id))
    upgrade_schema(db.engine)  # rows written before 0007: their own axes, no shared row
    with db.read() as conn:
        assert q.load_block_axes(conn, run_id) is None
    _same(before, _snapshot(db, run_id))
    db.dispose()


def test_missing_axes_are_one_clear_error(db, tmp_path):
    run_id = _run_with_live_vectors(db, tmp_path)
    with db.write() as conn:
        conn.execute(q.BA.delete().where(q.BA.c.run_id == run_id))
    with db.read() as conn, pytest.raises(StorageError, match=f"run {run_id}: the track of "
                                          r"channel \d+, order 1 has \d+ vectors but the run's "
                                          "block axes are missing"):
        q.load_tracks(conn, run_id)


def test_reprocessing_and_sync_keep_one_row(db, tmp_path):
    from rundash.workflows.pipeline import process_run

    run_id = _run_with_live_vectors(db, tmp_path)
    process_run(db, run_id)
    with db.engine.connect() as conn:
        assert conn.execute(text("SELECT COUNT(*) FROM block_axes")).scalar() == 1
    before = _snapshot(db, run_id)
    other = open_database(str(tmp_path / "copy.sqlite"), create=True)
    sync(db, other)
    with other.read() as conn:
        (copied,) = [r.id for r in q.list_runs(conn)]
    for x, y in zip(before[0], _snapshot(other, copied)[0]):
        assert_array_equal(x.time_s, y.time_s)
        assert_array_equal(x.speed_rpm, y.speed_rpm)
    other.dispose()


def test_a_track_off_its_axis_is_refused(db, tmp_path):
    run_id = _run_with_live_vectors(db, tmp_path)
    with db.read() as conn:
        cid = q.load_tracks(conn, run_id)[0].channel_id
    with db.write() as conn:
        axes = q.save_block_axes(conn, run_id, np.arange(5.0), np.full(5, 3000.0))
        with pytest.raises(ValueError, match="a track of 4 vectors on an axis of 5 blocks"):
            q.save_track(conn, run_id, cid, 9.0, False, axes, None, np.ones(4), np.ones(4),
                         np.ones(4))
