"""The dashboard's result cache: hits, keys that follow re-processing, one cache per app."""

from __future__ import annotations

from numpy.testing import assert_allclose

from rundash.dashboard.app import create_app
from rundash.dashboard.cache import ResultCache, cache_of
from rundash.dashboard.pages import review


def test_second_read_is_a_hit_and_gives_the_same_figure(demo_db):
    cache = ResultCache(demo_db.db)
    args = (demo_db.db, demo_db.run_id, "K410-DE-X", [1.0, 2.0], "compensated", "metric")
    a = review.bode_figure(*args, cache=cache).to_dict()
    misses = cache.misses
    b = review.bode_figure(*args, cache=cache).to_dict()
    assert cache.misses == misses and cache.hits > 0
    assert a == b
    plain = review.bode_figure(*args).to_dict()  # no cache: read straight from storage
    assert plain == a


def test_lru_bound_and_disabled_cache():
    loads = []
    c = ResultCache(None, maxsize=2)
    for k in (1, 2, 1, 3):  # 1 was used after 2, so 2 is the one dropped
        c._get((k,), lambda k=k: loads.append(k) or k)
    assert len(c) == 2 and loads == [1, 2, 3]
    c._get((2,), lambda: loads.append(2) or 2)
    assert loads == [1, 2, 3, 2]
    off = ResultCache(None, maxsize=0)
    off._get((1,), lambda: loads.append("x"))
    off._get((1,), lambda: loads.append("x"))
    assert loads[-2:] == ["x", "x"] and len(off) == 0


def test_processing_again_changes_the_key(tmp_path):
    from rundash.workflows.demo import sample_runs_dir
    from rundash.ingest.importer import import_run
    from rundash.ingest.machine_file import load_machine_description
    from rundash.workflows.pipeline import ProcessingParams, process_run
    from rundash.storage.engine import open_database

    folder = sample_runs_dir()
    desc, text = load_machine_description(folder / "tarnwick-k410.toml")
    db = open_database(str(tmp_path / "c.sqlite"), create=True)
    try:
        run = import_run(db, folder / "k410_2023_up.wav", desc, description_text=text,
                         label="cache test", kind="run-up").run_id
        process_run(db, run)
        cache = ResultCache(db)
        k1 = cache.context(run)["key"]
        t1 = review.vector_traces(db, run, "K410-DE-X", [1.0], True, cache=cache)[0]
        # new results (another slow-roll window), so a new created_at
        process_run(db, run, params=ProcessingParams(slow_roll_rpm=(300.0, 700.0)))
        k2 = cache.context(run)["key"]
        assert k1 != k2 and k1[0] == k2[0] == run
        t2 = review.vector_traces(db, run, "K410-DE-X", [1.0], True, cache=cache)[0]
        fresh = review.vector_traces(db, run, "K410-DE-X", [1.0], True)[0]
        assert_allclose(t2[0]["amplitude"], fresh[0]["amplitude"])  # not the stale entry
        assert t1[0]["amplitude"].shape == t2[0]["amplitude"].shape
        assert not (t1[0]["amplitude"] == t2[0]["amplitude"]).all()  # other window
    finally:
        db.dispose()


def test_one_cache_per_app(demo_db):
    a, b = create_app(demo_db.db), create_app(demo_db.db)
    assert isinstance(a.rundash_cache, ResultCache)
    assert a.rundash_cache is not b.rundash_cache
    assert cache_of(a, demo_db.db) is a.rundash_cache
