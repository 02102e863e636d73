"""Progress bars: drawn on a terminal only, never with --quiet, never in CI logs."""

from __future__ import annotations

import io
from pathlib import Path

from conftest import BOOT, ProcessCall, write_case

from runner.pipeline import learn, prepare
from runner.progress import Progress, Reporter, bar_text


class Terminal(io.StringIO):
    """A text stream that says it is a terminal (what stderr is in an interactive shell)."""

    def isatty(self) -> bool:
        return True


def test_bar_text_shape() -> None:
    text = bar_text("bootstrap x", 5, 20, 75.0, width=10)
    assert text == "bootstrap x  |==>       |  5/20   25%  1:15"
    assert "|==========|  20/20  100%" in bar_text("b", 20, 20, 0.0, width=10)
    assert "0/0" in bar_text("b", 0, 0, 0.0)


def test_drawn_on_a_terminal_and_cleared_at_the_end() -> None:
    stream = Terminal()
    with Reporter(stream=stream).bar("work", 3) as bar:
        for _ in range(3):
            bar.advance()
    out = stream.getvalue()
    assert "work  |" in out and "3/3" in out
    assert out.endswith("\r")  # the line is blanked when the bar closes


def test_silent_when_not_a_terminal_or_quiet() -> None:
    for reporter in (Reporter(stream=io.StringIO()), Reporter(quiet=True, stream=Terminal())):
        assert not reporter.active
        bar = reporter.bar("work", 2)
        bar.advance(2)
        bar.close()
        assert reporter.stream is not None and reporter.stream.getvalue() == ""
    silent = Progress("x", 1, io.StringIO(), enabled=False)
    silent.advance()
    assert silent.done == 1


def test_bootstrap_shows_a_bar_on_a_terminal(tmp_path: Path) -> None:
    spec = write_case(tmp_path)
    spec.write_text(spec.read_text() + BOOT)
    stream = Terminal()
    learn(prepare(spec), reporter=Reporter(stream=stream))
    assert "bootstrap small-line" in stream.getvalue() and "6/6" in stream.getvalue()


def test_command_line_stderr_stays_clean_when_not_a_terminal(tmp_path: Path,
                                                             cli_process: ProcessCall) -> None:
    # a separate process: its whole stderr, Python's own warnings included
    spec = write_case(tmp_path)
    spec.write_text(spec.read_text() + BOOT)
    done = cli_process("run", str(spec), "--workers", "1", "--results", "r", cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    assert done.stderr == ""


def test_restarts_and_exact_search_show_bars_on_a_terminal(tmp_path: Path) -> None:
    spec = write_case(tmp_path)
    for search, words in (("search:\n  method: hill-climb\n  restarts: 2\n", "3/3"),
                          ("search:\n  method: exact\n", "8/8")):
        spec.write_text(spec.read_text().split("search:")[0] + search)
        stream = Terminal()
        learn(prepare(spec), reporter=Reporter(stream=stream))
        label = "restarts" if "restarts" in search else "exact"
        assert f"{label} small-line" in stream.getvalue() and words in stream.getvalue()
