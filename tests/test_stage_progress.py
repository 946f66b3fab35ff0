"""The review's stage progress: one line per finished stage with its seconds, then the total."""

from __future__ import annotations

import io
import re
import time

import pytest
from rich.console import Console

from querygap.stage_progress import StageProgress


def _console() -> tuple[Console, io.StringIO]:
    buffer = io.StringIO()
    return Console(file=buffer, force_terminal=False, width=100), buffer


def test_each_finished_stage_is_printed_once_with_its_seconds() -> None:
    console, buffer = _console()
    with StageProgress(console, lines=True) as stages:
        stages("index")
        time.sleep(0.05)
        stages("score: 10 queries")
        stages("score: 20 queries")  # same stage: no new line
        stages("flag")
    lines = [line.split() for line in buffer.getvalue().splitlines() if line.strip()]
    assert [line[0] for line in lines] == ["index", "score", "flag", "total"]
    seconds = {line[0]: float(line[1]) for line in lines}
    assert seconds["index"] >= 0.05
    assert seconds["total"] >= seconds["index"] + seconds["score"] + seconds["flag"] - 0.1
    assert all(re.fullmatch(r"[0-9]+\.[0-9]", line[1]) and line[2] == "s" for line in lines)


def test_a_failed_review_prints_no_total() -> None:
    console, buffer = _console()
    with pytest.raises(RuntimeError), StageProgress(console, lines=True) as stages:
        stages("index")
        raise RuntimeError("boom")
    assert "total" not in buffer.getvalue()


def test_no_lines_off_a_terminal_by_default() -> None:
    console, buffer = _console()
    with StageProgress(console) as stages:
        stages("index")
    assert buffer.getvalue().strip() == ""
