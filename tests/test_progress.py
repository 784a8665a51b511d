"""The one progress helper: a tqdm bar on a terminal, a line at every quarter elsewhere, silent when off."""

import io

from fusion._progress import Progress


class _Terminal(io.StringIO):
    def isatty(self):
        return True


def test_bar_on_a_terminal_with_lines_above_it():
    term = _Terminal()
    with Progress(8, desc="lock-in", unit="frames", stream=term) as bar:
        assert bar.is_bar
        bar.note("R0 done")
        for k in range(8):
            bar.update()
    text = term.getvalue()
    assert "R0 done\n" in text
    assert "lock-in: 100%" in text and "8/8" in text and "\r" in text     # redrawn in place


def test_plain_lines_at_every_quarter_away_from_a_terminal():
    log = io.StringIO()
    with Progress(10, desc="correlation", unit="points", stream=log) as bar:
        assert not bar.is_bar
        for done in range(1, 11):
            bar.advance_to(done)
    assert log.getvalue().splitlines() == ["correlation: 25 % (3/10 points)", "correlation: 50 % (5/10 points)",
                                           "correlation: 75 % (8/10 points)", "correlation: 100 % (10/10 points)"]


def test_silent_when_off():
    term, log = _Terminal(), io.StringIO()
    for stream in (term, log):
        with Progress(4, desc="campaign", unit="runs", enabled=False, stream=stream) as bar:
            bar.note("R0 done")
            bar.update(4)
    assert term.getvalue() == "" and log.getvalue() == ""


def test_no_quarter_lines_when_the_caller_writes_its_own():
    log = io.StringIO()
    with Progress(2, desc="campaign", unit="runs", stream=log, lines=False) as bar:
        bar.update(2)
        bar.note("R1 done")
    assert log.getvalue() == "R1 done\n"
