"""The review page's parts built directly (no browser): an unprocessed run still offers
edit and delete; the review marks add shapes and annotations, never traces."""

from __future__ import annotations

from rundash.dashboard.pages.review import layout
from rundash.figures.review_marks import mark_review
from rundash.storage import queries as q
from rundash.storage.engine import open_database
from rundash.workflows import review as wr
from tests.review.helpers import make_run


def _ids(component) -> set:
    out = set()
    stack = [component]
    while stack:
        c = stack.pop()
        if isinstance(c, (list, tuple)):
            stack.extend(c)
            continue
        if getattr(c, "id", None):
            out.add(c.id if isinstance(c.id, str) else str(c.id))
        kids = getattr(c, "children", None)
        if kids is not None and not isinstance(kids, str):
            stack.append(kids)
    return out


def test_unprocessed_run_offers_housekeeping(db_path):
    db = open_database(str(db_path), create=True)
    run = make_run(db)
    with db.write() as conn:
        q.clear_results(conn, run)
    assert "run-housekeeping" in _ids(layout(db, run))
    db.dispose()


def test_marks_are_shapes_and_annotations_only(db_path):
    import plotly.graph_objects as go

    db = open_database(str(db_path), create=True)
    run = make_run(db)
    wr.record(db, run, "annotate", reviewer="A", plot="bode", probe="NDE-X", speed_rpm=3400.0,
              text="look here")
    wr.record(db, run, "correct", reviewer="A", probe="NDE-X", speed_rpm=3500.0,
              to_speed_rpm=3550.0, af=4.0)
    fig = go.Figure(data=[go.Scatter(x=[1000, 6000], y=[1, 2], name="data")])
    out = mark_review(fig, wr.review_of(db, run), "NDE-X", plot="bode")
    assert len(out.data) == 1 and len(fig.layout.shapes) == 0  # the input is not changed
    texts = [a.text for a in out.layout.annotations]
    assert any("look here" in t for t in texts)
    assert any(t.startswith("engineer: 3,550 rpm, AF 4.00") for t in texts)
    db.dispose()


def test_run_edit_sets_the_test_kind(db_path):
    from rundash.dashboard.pages.review.housekeeping import housekeeping_card, save

    db = open_database(str(db_path), create=True)
    run = make_run(db)
    with db.read() as conn:
        info = q.get_run(conn, run)
    card = housekeeping_card(info, signed=False)
    assert "run-edit-test-kind" in _ids(card)
    msg = save(db, run, by="R. Okafor", label=info.label, cycle=info.cycle, notes=info.notes,
               kind=info.kind, started="2026-05-01T06:00:00Z", test_kind="trip-test")
    assert msg.startswith("Saved: ") and "test_kind" in msg
    assert "judged as field run, until the run is processed again" in msg
    with db.read() as conn:
        assert q.get_run(conn, run).test_kind == "trip-test"
    msg = save(db, run, by="", label=info.label, cycle=info.cycle, notes=info.notes,
               kind=info.kind, started=None, test_kind="bench")
    assert msg.startswith("Not saved: ") and "'test_kind'" in msg
    db.dispose()
