"""The compare page's callback compares the probe shown first, then the whole comparison
in the background: the probe's numbers are the whole comparison's (the bootstrap's seed
goes by run, not by probe), and the other probes' fold is built when opened.

Database: the demo (rundash.workflows.demo.build_demo), as tests/dashboard/test_compare_page.py.
"""

from __future__ import annotations

from rundash.dashboard import ids
from rundash.dashboard.cache import ResultCache
from rundash.dashboard.pages import compare as cp
from tests.dashboard.test_callbacks import _find, _text
from tests.dashboard.test_compare_page import PROBE, demo_full, ups  # noqa: F401  (fixtures)


def test_probe_first_then_the_whole(demo_full, ups):  # noqa: F811
    db, _ = demo_full
    c = ResultCache(db)
    trend, table, status = cp.comparison_view(db, list(ups), PROBE, cache=c, probe_first=True)
    assert [k[0] for k in c._entries if str(k[0]).startswith("comparison")] == \
        ["comparison-probe"]  # the whole comparison is not computed for the first draw
    text = _text(table)
    assert f"run {ups[1]} against run {ups[0]} on {PROBE}:" in text
    assert "Other probes (compared when opened)" in text
    assert _find(table, ids.COMPARE_OTHERS_BODY).children == []
    assert "Compared 2 runs" in status
    whole = cp.comparison_of(db, list(ups), cache=c)
    # the probe's rows, trend and estimates are the whole comparison's, to the bit
    first = cp.comparison_of(db, list(ups), cache=ResultCache(db), probe=PROBE)
    assert cp.table_rows(first, PROBE) == cp.table_rows(whole, PROBE)
    assert [[e for e in r["estimates"] if e["probe"] == PROBE] for r in whole["runs"]] == \
        [r["estimates"] for r in first["runs"]]
    assert trend.to_dict()["data"] == cp.comparison_view(db, list(ups), PROBE,
                                                         cache=c)[0].to_dict()["data"]
    # the fold opened: every other probe's row
    built = cp.other_probes_table(db, list(ups), PROBE, cache=c, filled=False)
    others = [r for r in cp.table_rows(whole) if r["probe"] != PROBE]
    assert others and all(r["runs"] in _text(built) for r in others)
    assert len(built.children[1].children) == len(others) + sum(bool(r["notes"]) for r in others)
    # with the whole comparison cached the callback's view is the whole one
    _, table, _ = cp.comparison_view(db, list(ups), PROBE, cache=c, probe_first=True)
    assert f"on {PROBE}:" not in _text(table) and "compared when opened" not in _text(table)
    assert cp.comparison_of(db, list(ups), cache=c, probe=PROBE) is whole


def test_background_computes_the_whole_once(demo_full, ups):  # noqa: F811
    db, _ = demo_full
    c = ResultCache(db)
    bg = cp.Background()
    bg.start(db, list(ups), c)
    bg.start(db, list(reversed(ups)), c)  # the same runs: no second job
    bg.wait(list(ups))
    assert [k[0] for k in c._entries if k[0] == "comparison"] == ["comparison"]
    assert c.misses == sum(1 for k in c._entries)  # nothing loaded twice
    bg.start(db, [ups[0], 9999], c)  # an error stays in the thread; the page shows it
    bg.wait([ups[0], 9999])
