"""The CLI's progress face (rundash.progress.Bar): a tqdm bar on a terminal, one line per
stage start and end elsewhere (a log file or CI keeps readable lines, not a glued bar)."""

import io

from rundash.progress import Bar


class _Terminal(io.StringIO):
    def isatty(self):
        return True


def test_not_a_terminal_prints_one_line_per_stage_start_and_end():
    out = io.StringIO()
    bar = Bar(out)
    for i in range(11):
        bar(i / 10, "reading")
    bar(0.5, "saving")
    bar.close()
    lines = out.getvalue().splitlines()
    assert [ln.split(" done")[0] for ln in lines] == ["reading ...", "reading",
                                                      "saving ...", "saving"]
    assert "\r" not in out.getvalue()
    assert lines[1].startswith("reading done in ") and lines[1].endswith(" s")


def test_terminal_draws_one_bar_per_stage_ending_at_100_percent():
    out = _Terminal()
    bar = Bar(out)
    for i in range(11):
        bar(i / 10, "reading")
    bar(1.0, "saving")
    bar.close()
    text = out.getvalue()
    finished = [seg for seg in text.split("\r") if "100.0 %" in seg]
    assert any(seg.startswith("reading") for seg in finished)
    assert any(seg.startswith("saving") for seg in finished)
    assert text.count("\n") == 2           # each stage's bar left on its own line


def test_closing_twice_and_out_of_range_fractions_are_harmless():
    out = io.StringIO()
    bar = Bar(out)
    bar(-0.5, "tach")
    bar(7.0, "tach")
    bar.close()
    bar.close()
    assert out.getvalue().count("tach") == 2
