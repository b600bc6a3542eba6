"""Progress reports (riskbench.progress): counts, elapsed time and the estimate of the time left."""

import io
import json

import pytest
from hypothesis import given
from hypothesis import strategies as st

from riskbench.progress import (
    PROGRESS_FILE_ENV,
    FileSink,
    Progress,
    ProgressState,
    TerminalSink,
    default_sinks,
    format_seconds,
)
from riskbench.validation.parallel import ExecutionConfig, run_replicates


class Clock:
    """A clock the test moves by hand (seconds)."""

    def __init__(self) -> None:
        self.now = 100.0

    def __call__(self) -> float:
        return self.now


def test_time_left_is_mean_cost_of_done_units_times_units_left():
    """4 of 10 done after 8 s: 2 s each, 6 left, about 12 s left (arithmetic)."""
    state = ProgressState("bootstrap optimism", 4, 10, 8.0)
    assert state.remaining_s == pytest.approx(12.0)
    assert state.line() == "bootstrap optimism: 4 of 10 replicates, 8.0 s elapsed, about 12 s left"


def test_no_estimate_before_the_first_unit_and_a_plain_total_at_the_end():
    start = ProgressState("folds", 0, 5, 3.0, "folds")
    assert start.line() == "folds: 0 of 5 folds, 3.0 s elapsed, estimating the time left"
    assert ProgressState("folds", 5, 5, 75.0, "folds").line() == "folds: 5 of 5 folds in 1 min 15 s"


@pytest.mark.parametrize(
    ("seconds", "text"),
    [(0.44, "0.4 s"), (12.4, "12 s"), (185, "3 min 05 s"), (7620, "2 h 07 min"), (float("nan"), "unknown time")],
)
def test_durations_for_people(seconds, text):
    assert format_seconds(seconds) == text


@given(done=st.integers(0, 500), extra=st.integers(0, 500), elapsed=st.floats(0, 1e6))
def test_state_survives_its_json_line(done, extra, elapsed):
    """Invariant: what the kernel writes is what the runner reads."""
    state = ProgressState("paired bootstrap", done, done + extra, elapsed)
    assert ProgressState.from_json(state.to_json()) == state


def test_terminal_line_is_rewritten_in_place_and_ended_once():
    stream, clock = io.StringIO(), Clock()
    sink = TerminalSink(stream, interactive=True)
    with Progress("splits", 3, [sink], clock=clock) as progress:
        for _ in range(3):
            clock.now += 2.0
            progress.advance()
    text = stream.getvalue()
    assert text.count("\r") == 4 and text.endswith("\n") and text.count("\n") == 1
    assert text.split("\r")[-1].rstrip() == "splits: 3 of 3 replicates in 6.0 s"  # blanks cover a longer line
    assert "1 of 3 replicates, 2.0 s elapsed, about 4.0 s left" in text


def test_log_file_gets_a_line_per_interval_and_the_final_one():
    stream, clock = io.StringIO(), Clock()
    sink = TerminalSink(stream, interactive=False, interval_s=30.0, clock=clock)
    with Progress("bootstrap", 10, [sink], clock=clock) as progress:
        for _ in range(10):
            clock.now += 10.0
            progress.advance()
    lines = stream.getvalue().splitlines()
    assert "\r" not in stream.getvalue()
    assert lines[0] == "bootstrap: 0 of 10 replicates, 0.0 s elapsed, estimating the time left"
    assert lines[-1] == "bootstrap: 10 of 10 replicates in 1 min 40 s"
    assert len(lines) == 5  # at 0, 30, 60 and 90 s, and the end


def test_work_stopped_early_says_how_far_it_got():
    stream, clock = io.StringIO(), Clock()
    with (
        pytest.raises(RuntimeError),
        Progress("bootstrap", 4, [TerminalSink(stream, interactive=False)], clock=clock) as progress,
    ):
        clock.now += 5.0
        progress.advance()
        raise RuntimeError
    assert stream.getvalue().splitlines()[-1] == "bootstrap: 1 of 4 replicates, 5.0 s elapsed, about 15 s left"


def _square(shared, index, _seed):
    return index * index


def test_replicates_report_to_the_progress_file(tmp_path, monkeypatch):
    """run_replicates counts every replicate, also when they run in grouped tasks on two processes."""
    path = tmp_path / "progress.jsonl"
    monkeypatch.setenv(PROGRESS_FILE_ENV, str(path))
    config = ExecutionConfig(n_jobs=2, replicates_per_task=3)
    assert run_replicates(_square, None, 1, 8, config, description="paired bootstrap") == [i * i for i in range(8)]
    states = [ProgressState.from_json(line) for line in path.read_text().splitlines()]
    assert states[0].done == 0 and states[-1].done == 8 and states[-1].label == "paired bootstrap"
    assert [s.done for s in states] == sorted(s.done for s in states)


def test_silence_when_asked(monkeypatch, tmp_path):
    monkeypatch.setenv(PROGRESS_FILE_ENV, str(tmp_path / "p.jsonl"))
    assert default_sinks(False) == []
    assert [type(s) for s in default_sinks(None)] == [FileSink]  # stderr is not a terminal under pytest
    assert {type(s) for s in default_sinks(True)} == {FileSink, TerminalSink}


def test_an_unwritable_progress_file_does_not_stop_the_work(tmp_path):
    sink = FileSink(tmp_path / "gone" / "p.jsonl")
    with Progress("x", 1, [sink]) as progress:
        progress.advance()
    assert not (tmp_path / "gone").exists()
    json.dumps(progress.state.to_json())
