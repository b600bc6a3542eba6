"""Stage progress: the runner relays the kernel's progress file to its terminal, and an executed notebook
shows progress as one output, with nothing on its standard error."""

import io
import shutil
import tempfile

import nbformat

from riskbench.progress import FileSink, Progress, ProgressState
from riskbench.workflow.progress import ProgressRelay, progress_file, stage_progress


def _write(path, states):
    with open(path, "a", encoding="utf-8") as handle:
        for state in states:
            handle.write(state.to_json() + "\n")


def test_relay_shows_new_lines_with_the_stage_and_skips_what_is_not_progress(tmp_path):
    path = tmp_path / "progress.jsonl"
    _write(path, [ProgressState("earlier stage", 2, 2, 1.0)])  # already there: not this stage's
    stream = io.StringIO()
    relay = ProgressRelay(path, "validation", stream, interactive=False, interval_s=0.0)
    _write(path, [ProgressState("bootstrap optimism", 0, 4, 0.0)])
    with open(path, "a", encoding="utf-8") as handle:
        handle.write("not json\n" + ProgressState("bootstrap optimism", 2, 4, 10.0).to_json()[:12])  # half a line
    relay.poll()
    assert stream.getvalue().splitlines() == [
        "stage validation: bootstrap optimism: 0 of 4 replicates, 0.0 s elapsed, estimating the time left"
    ]
    with open(path, "a", encoding="utf-8") as handle:
        handle.write(ProgressState("bootstrap optimism", 2, 4, 10.0).to_json()[12:] + "\n")
    _write(path, [ProgressState("bootstrap optimism", 4, 4, 21.0)])
    relay.poll()
    assert stream.getvalue().splitlines()[1:] == [
        "stage validation: bootstrap optimism: 2 of 4 replicates, 10 s elapsed, about 10 s left",
        "stage validation: bootstrap optimism: 4 of 4 replicates in 21 s",
    ]


def test_relay_in_a_thread_ends_an_unfinished_line(tmp_path):
    """A stage that stops in the middle of a part still leaves a whole line on the terminal."""
    path = tmp_path / "progress.jsonl"
    stream = io.StringIO()
    with (
        ProgressRelay(path, "comparison", stream, interactive=True, poll_s=0.01),
        Progress("paired bootstrap", 10, [FileSink(path, interval_s=0.0)]) as progress,
    ):
        progress.advance(3)
        progress.close = lambda: None  # the kernel died before telling the end
    text = stream.getvalue()
    assert text.endswith("\n") and "stage comparison: paired bootstrap: 3 of 10 replicates" in text
    assert "10 of 10" not in text


def test_no_relay_for_a_silent_run(tmp_path):
    assert not isinstance(stage_progress(tmp_path, "cohort", show=False), ProgressRelay)


NOTEBOOK_CELLS = [
    "from riskbench.workflow import stages  # what every stage notebook imports",
    "import time\n\n"
    "from riskbench.validation.parallel import ExecutionConfig, run_replicates\n\n\n"
    "def slow_square(shared, index, seed):\n"
    "    time.sleep(0.2)\n"
    "    return index * index\n\n\n"
    "squares = run_replicates(slow_square, None, 1, 5, ExecutionConfig(), description='demo replicates')\n"
    "squares",
]


def test_executed_notebook_shows_progress_as_one_output_and_has_no_stderr(tmp_path):
    """A notebook run the way the runner runs stages (papermill, the riskbench kernel on local sockets):
    the replicates' progress is one display output updated in place, ending at "5 of 5", and no cell writes
    to standard error (no progress-bar warning, no progress noise); the runner's relay saw the same
    progress through the kernel's progress file."""
    import papermill as pm

    from riskbench.workflow.kernel import ensure_kernel, local_socket_kernel_manager
    from riskbench.workflow.runner import _stop_kernels  # private on purpose: the runner's own clean-up

    notebook = nbformat.v4.new_notebook(cells=[nbformat.v4.new_code_cell(c) for c in NOTEBOOK_CELLS])
    notebook.metadata["kernelspec"] = {"name": "python3", "display_name": "Python 3", "language": "python"}
    source, executed = tmp_path / "stage.ipynb", tmp_path / "executed.ipynb"
    nbformat.write(notebook, str(source))
    temp = tmp_path / ".tmp"
    temp.mkdir(mode=0o700)
    sockets = tempfile.mkdtemp(prefix="rbk-", dir="/tmp")
    stream = io.StringIO()
    try:
        with ProgressRelay(progress_file(temp), "demo", stream, interactive=False, interval_s=0.0, poll_s=0.05):
            pm.execute_notebook(
                str(source),
                str(executed),
                kernel_name=ensure_kernel(),
                progress_bar=False,
                log_output=False,
                cwd=str(tmp_path),
                kernel_manager_class=local_socket_kernel_manager(sockets, str(temp)),
            )
    finally:
        _stop_kernels(sockets)
        shutil.rmtree(sockets, ignore_errors=True)
    cells = [c for c in nbformat.read(str(executed), as_version=4).cells if c.cell_type == "code"]
    outputs = [o for c in cells for o in c.get("outputs", [])]
    assert [o for o in outputs if o.get("name") == "stderr" or o.get("output_type") == "error"] == []
    shown = [o["data"]["text/plain"] for o in outputs if o.get("output_type") == "display_data"]
    assert len(shown) == 1 and shown[0].startswith("demo replicates: 5 of 5 replicates in ")
    assert "[0, 1, 4, 9, 16]" in str(outputs[-1]["data"]["text/plain"])
    relayed = stream.getvalue().splitlines()
    assert relayed[0].startswith("stage demo: demo replicates: 0 of 5 replicates")
    assert relayed[-1].startswith("stage demo: demo replicates: 5 of 5 replicates in ")
    # No check that the progress file is still there: a kernel told to stop removes its temporary folder
    # (progress file included), and whether papermill's shutdown or the runner's clean-up gets there first is
    # a race. The relayed lines above could only have come through that file.
