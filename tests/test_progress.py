"""The progress bar: counts, failures and time left when shown; silent in logs by default."""

from __future__ import annotations

from harness.commands.progress import Progress, in_notebook


def test_shows_counts_failures_and_time_left(capsys):
    bar = Progress(4, label="cells", enabled=True)
    for ok in (True, False, True, True):
        bar.step(ok)
    bar.close()
    err = capsys.readouterr().err
    assert "4/4 cells" in err and "1 failed" in err and "left" in err
    assert (bar.done, bar.failed) == (4, 1)


def test_silent_when_stderr_is_not_a_terminal(capsys):
    assert not in_notebook()
    bar = Progress(3)  # pytest's captured stderr is not a terminal
    bar.step()
    bar.close()
    assert capsys.readouterr().err == ""
