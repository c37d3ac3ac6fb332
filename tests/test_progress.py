"""Progress on long runs: a bar on a terminal, nothing at all otherwise."""

from edgetally.cli.progress import Progress


def test_bar_draws_when_enabled(capsys):
    with Progress(3, "work", enabled=True) as bar:
        bar.note("first")
        bar.step()
        bar.step(2)
    err = capsys.readouterr().err
    assert "work" in err and "first" in err


def test_silent_when_not_a_terminal(capsys):
    # under pytest stderr is captured, not a terminal: the default is off
    with Progress(3, "work") as bar:
        assert not bar.enabled
        bar.note("x")
        bar.step(3)
    assert capsys.readouterr().err == ""
