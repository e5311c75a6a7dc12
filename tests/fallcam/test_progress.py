"""The progress bar draws only on a terminal and never with --quiet."""

import io

import pytest

from fallcam.progress import progress_bar


class _Terminal(io.StringIO):
    def isatty(self):
        return True


@pytest.mark.parametrize(("stream_type", "quiet", "drawn"), [
    (_Terminal, False, True),
    (_Terminal, True, False),
    (io.StringIO, False, False),  # a pipe or log file
])
def test_bar_only_on_a_terminal_without_quiet(stream_type, quiet, drawn):
    stream = stream_type()
    with progress_bar("clip.mp4", quiet=quiet, stream=stream, min_interval_s=0) as bar:
        assert bar.enabled is drawn
        for n in range(0, 101, 10):
            bar(n, 100)
    text = stream.getvalue()
    assert ("clip.mp4" in text and "100/100" in text) is drawn
    assert (text == "") is (not drawn)


def test_unknown_total_and_restart_are_accepted():
    stream = _Terminal()
    with progress_bar("scan", unit="frame", stream=stream, min_interval_s=0) as bar:
        bar(5, 0)  # total unknown
        bar(50, 200)  # total learnt
        bar(10, 200)  # a second pass restarts the count
    text = stream.getvalue()
    assert "5frame" in text  # drawn without a total
    assert "/200" in text and text.rindex("0/200") > text.index("5/200")  # the restart is drawn


def test_redraws_are_throttled():
    stream = _Terminal()
    with progress_bar("long clip", stream=stream, min_interval_s=60.0) as bar:
        for n in range(1, 10001):
            bar(n, 10000)
    # the first draw and the clearing at the end, not 10000 redraws
    assert stream.getvalue().count("\r") < 10


def test_default_stream_is_stderr_looked_up_at_call_time(capsys):
    bar = progress_bar("x")
    bar(1, 2)
    bar.close()
    assert bar.enabled is False  # pytest's captured stderr is not a terminal
    assert capsys.readouterr().err == ""
