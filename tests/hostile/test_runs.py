"""Hostile runs: each "Why" bullet of the safe-runs issue on data loss, identifiers outside the run, network
statements and tracebacks, reproduced against the notebook runner and the command line.

Most tests drive ``run_analysis`` with tiny stand-in notebooks (``stages=`` and ``notebooks_dir=``); the
kill tests run the real cohort stage on the first few hundred patients of the committed demo cohort in a
subprocess whose system temporary folder (TMPDIR) is private to the test, so that every file a run leaves
outside the run folder can be scanned for the input patient ids.
"""

from __future__ import annotations

import json
import os
import re
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path
from types import SimpleNamespace

import nbformat
import pytest
from nbformat.v4 import new_code_cell, new_notebook

from riskbench.demo.subset import write_subset
from riskbench.errors import RiskbenchError
from riskbench.validation.errors import ValidationInputError
from riskbench.validation.parallel import ExecutionConfig, check_scheduler, check_workers, run_replicates
from riskbench.workflow.cli import describe_failure, main
from riskbench.workflow.config import ConfigError, load_config
from riskbench.workflow.run_folder import (
    MARKER,
    NotARunFolder,
    RunFolderExists,
    RunLocationError,
    RunLocked,
    RunPaths,
)
from riskbench.workflow.runner import StageFailed, StageInputError, run_analysis

ROOT = Path(__file__).resolve().parents[2]
DEMO_DATA = ROOT / "demo_data" / "clean"
PYTHON = sys.executable


# --------------------------------------------------------------------------------------------------
# Fixtures: a small demo project and stand-in notebooks


def demo_project(folder: Path, n_patients: int) -> tuple[Path, list[str]]:
    """The first ``n_patients`` demo patients as CSV files in ``folder`` with configs/demo.toml reading them;
    returns the configuration path and the patient ids."""
    if not (DEMO_DATA / "patients.csv").is_file():
        pytest.skip("the committed demo cohort (demo_data/clean) is not in this checkout")
    ids = write_subset(DEMO_DATA, folder, n_patients)
    config = folder / "analysis.toml"
    config.write_text((ROOT / "configs" / "demo.toml").read_text().replace("../demo_data/clean/", ""))
    return config, ids


def notebook(code: str) -> nbformat.NotebookNode:
    params = new_code_cell('config_path = ""\nrun_dir = ""')
    params.metadata["tags"] = ["parameters"]
    return new_notebook(cells=[params, new_code_cell(code)])


WRITE = (
    "from pathlib import Path\n"
    "(Path(run_dir) / 'tables').mkdir(exist_ok=True)\n"
    "(Path(run_dir) / 'tables' / 'one.csv').write_text('a,b\\n1,2\\n')\n"
)
SLOW = (
    "import os, tempfile, time\nfrom pathlib import Path\n"
    "Path(run_dir, 'environment.json').write_text(__import__('json').dumps(\n"
    "    {'tmp': tempfile.gettempdir(), 'joblib': os.environ.get('JOBLIB_TEMP_FOLDER')}))\n"
    "with open(Path(tempfile.gettempdir()) / 'spill.txt', 'w') as f:\n"
    "    f.write(open(Path(config_path).parent / 'patients.csv').read())  # a stage spilling raw rows\n"
    "time.sleep({seconds})\n"
)


@pytest.fixture(scope="module")
def project(tmp_path_factory) -> dict:
    base = tmp_path_factory.mktemp("runs")
    config, ids = demo_project(base / "study", 120)
    books = base / "books"
    books.mkdir()
    nbformat.write(notebook(WRITE), str(books / "one.ipynb"))
    nbformat.write(notebook(SLOW.replace("{seconds}", "30")), str(books / "slow.ipynb"))
    # a message that quotes a source id and a raw row, as a library error deep inside a stage may do
    nbformat.write(
        notebook(
            "from pathlib import Path\n"
            "from riskbench.cohort.errors import CohortInputError\n"
            "row = (Path(config_path).parent / 'patients.csv').read_text().splitlines()[1]\n"
            "raise CohortInputError(f'patients.csv: patient id {row.split(\",\")[0]} is repeated on '\n"
            "                       f'lines 3 and 9; columns present: {row}')"
        ),
        str(books / "user_error.ipynb"),
    )
    nbformat.write(notebook("raise KeyError('no such column: volume')"), str(books / "bug.ipynb"))
    headerless = base / "headerless_patients.csv"
    headerless.write_text("".join((config.parent / "patients.csv").read_text().splitlines(True)[1:]))
    nbformat.write(
        notebook(
            "from riskbench.workflow.config import load_config\nfrom riskbench.cohort import build_cohort\n"
            "c = load_config(config_path)\n"
            f"build_cohort({str(headerless)!r}, c.sources.measurements, c.sources.outcomes, c.cohort, "
            "temp_folder=run_dir + '/.tmp')"
        ),
        str(books / "headerless.ipynb"),
    )
    cohort_book = ROOT / "notebooks" / "01_cohort.ipynb"
    (books / "01_cohort.ipynb").write_bytes(cohort_book.read_bytes())
    return {"base": base, "config": config, "ids": ids, "books": books}


def run(project: dict, out: Path, stages, **kw):
    return run_analysis(project["config"], out, notebooks_dir=project["books"], stages=stages, log=None, **kw)


def snapshot(folder: Path) -> dict[str, bytes]:
    return {str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()}


def files_with_ids(folder: Path, ids: list[str]) -> list[str]:
    """Files under ``folder`` whose bytes contain any of the patient ids."""
    pattern = re.compile("|".join(re.escape(i) for i in ids).encode())
    hits = []
    for path in folder.rglob("*"):
        try:
            if path.is_file() and not path.is_symlink() and pattern.search(path.read_bytes()):
                hits.append(str(path))
        except OSError:
            continue
    return hits


# --------------------------------------------------------------------------------------------------
# Data loss: --overwrite, leftovers, inputs inside the run folder


def test_overwrite_refuses_a_study_folder_and_leaves_it_intact(project, tmp_path):
    study = tmp_path / "study"
    study.mkdir()
    (study / "patients.csv").write_text("patient_id\nP1\n")
    (study / "notes.txt").write_text("protocol v3, do not lose\n")
    (study / "sub").mkdir()
    (study / "sub" / "draft.docx").write_bytes(b"\x00draft")
    before = snapshot(study)
    with pytest.raises(NotARunFolder, match=r"--overwrite refused: .*no \.riskbench-run marker"):
        run(project, study, [("one", "one.ipynb")], overwrite=True)
    assert snapshot(study) == before
    assert not list(tmp_path.glob(".study.*")) and not (tmp_path / "study.failed").exists()
    # and through the command line: exit 2, one line
    assert main(["run-analysis", str(project["config"]), "--out", str(study), "--overwrite"]) == 2
    assert snapshot(study) == before


def test_overwrite_replaces_a_marked_run_and_refuses_inputs_inside_the_run(project, tmp_path):
    out = tmp_path / "run"
    run(project, out, [("one", "one.ipynb")])
    assert (out / MARKER).is_file() and json.loads((out / MARKER).read_text().splitlines()[1])["status"] == "complete"
    with pytest.raises(RunFolderExists, match="--overwrite"):
        run(project, out, [("one", "one.ipynb")])
    run(project, out, [("one", "one.ipynb")], overwrite=True)
    # a configuration whose inputs live inside the run folder would lose them
    in_run, _ = demo_project(out / "inputs", 60)
    inside = tmp_path / "inside.toml"
    inside.write_text(in_run.read_text().replace('path = "', f'path = "{in_run.parent}/'))
    with pytest.raises(NotARunFolder, match="lies inside"):
        run_analysis(
            inside, out, notebooks_dir=project["books"], stages=[("one", "one.ipynb")], log=None, overwrite=True
        )
    assert (out / "inputs" / "patients.csv").is_file()


def test_symlinked_run_folder_and_unmarked_leftovers_are_refused(project, tmp_path):
    target = tmp_path / "elsewhere"
    target.mkdir()
    (target / "keep.txt").write_text("keep")
    (tmp_path / "link").symlink_to(target)
    with pytest.raises(NotARunFolder, match="symbolic link"):
        run(project, tmp_path / "link", [("one", "one.ipynb")], overwrite=True)
    assert (target / "keep.txt").read_text() == "keep"
    # a folder named like our leftovers but not made by a run
    (tmp_path / ".run.partial").mkdir()
    (tmp_path / ".run.partial" / "mine.txt").write_text("mine")
    with pytest.raises(NotARunFolder, match=r"\.run\.partial is in the way"):
        run(project, tmp_path / "run", [("one", "one.ipynb")])
    assert (tmp_path / ".run.partial" / "mine.txt").read_text() == "mine"


def test_a_run_made_before_the_marker_is_still_replaced(project, tmp_path):
    old = tmp_path / "run"
    (old / "tables").mkdir(parents=True)
    (old / "manifest.json").write_text(json.dumps({"riskbench_run": 1, "status": "complete"}))
    run(project, old, [("one", "one.ipynb")], overwrite=True)
    assert (old / MARKER).is_file()


# --------------------------------------------------------------------------------------------------
# The lock


def _driver(
    project: dict, out: Path, stages: list[tuple[str, str]], tmpdir: Path, overwrite: bool = False
) -> subprocess.Popen:
    """A run in another process (stand-in notebooks), started with its own system temporary folder."""
    code = (
        "import sys\nfrom riskbench.workflow.runner import run_analysis\nfrom riskbench.workflow.cli import "
        "describe_failure\ntry:\n    run_analysis(sys.argv[1], sys.argv[2], notebooks_dir=sys.argv[3], "
        f"stages={stages!r}, overwrite={overwrite}, log=print)\nexcept KeyboardInterrupt as exc:\n"
        "    status, line = describe_failure(exc, 'run-analysis')\n    print(line, file=sys.stderr)\n"
        "    sys.exit(status)\n"
    )
    tmpdir.mkdir(parents=True, exist_ok=True)
    env = {**os.environ, "TMPDIR": str(tmpdir)}
    return subprocess.Popen(
        [PYTHON, "-c", code, str(project["config"]), str(out), str(project["books"])],
        env=env,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        # a run started in the background of a shell inherits SIGINT ignored (and then rightly ignores Ctrl-C);
        # the driver stands for a run in a terminal, so it gets the default handling whatever started the tests
        preexec_fn=_default_sigint,
    )


def _default_sigint() -> None:
    signal.signal(signal.SIGINT, signal.default_int_handler)


def _wait_for(condition, timeout: float = 60.0, what: str = "") -> None:
    deadline = time.monotonic() + timeout
    while not condition():
        if time.monotonic() > deadline:
            raise AssertionError(f"timed out waiting for {what}")
        time.sleep(0.02)


def test_second_run_into_the_same_folder_is_refused_while_the_first_runs(project, tmp_path):
    out = tmp_path / "run"
    first = _driver(project, out, [("slow", "slow.ipynb")], tmp_path / "t")
    try:
        paths = RunPaths(out)
        _wait_for(lambda: (paths.staging / "environment.json").is_file(), what="the first run's stage")
        with pytest.raises(RunLocked, match=rf"another run \(process {first.pid}, started .*\) is writing"):
            run(project, out, [("one", "one.ipynb")], overwrite=True)
        assert (paths.staging / "environment.json").is_file()  # the first run's staging folder is untouched
    finally:
        first.send_signal(signal.SIGTERM)
        first.wait(60)


def test_stale_lock_is_taken_over_with_a_message_and_a_foreign_host_lock_refuses(project, tmp_path):
    out = tmp_path / "run"
    gone = subprocess.Popen([PYTHON, "-c", "pass"])
    gone.wait()
    lock = RunPaths(out).lock
    lock.write_text(json.dumps({"pid": gone.pid, "host": socket.gethostname(), "started_utc": "2026-01-01T00:00:00"}))
    said: list[str] = []
    run_analysis(project["config"], out, notebooks_dir=project["books"], stages=[("one", "one.ipynb")], log=said.append)
    assert any(f"taking over the stale lock of process {gone.pid}" in s for s in said)
    assert not lock.exists()  # released at the end
    lock.write_text(json.dumps({"pid": 1, "host": "another-host", "started_utc": "2026-01-01T00:00:00"}))
    with pytest.raises(RunLocked, match=r"locked by process 1 on host 'another-host'.*delete"):
        run(project, out, [("one", "one.ipynb")], overwrite=True)


# --------------------------------------------------------------------------------------------------
# Unwritable locations and internal errors: one line, the right exit status


def _unwritable_parent(tmp_path: Path) -> Path:
    parent = tmp_path / "read_only"
    parent.mkdir()
    parent.chmod(0o555)
    if not _mkdir_refused(parent):  # running as root: permissions do not stop us; /sys refuses new folders
        if not (Path("/sys").is_dir() and _mkdir_refused(Path("/sys"))):
            pytest.skip("no read-only location available to this user")
        return Path("/sys") / "riskbench_test_parent"
    return parent


def _mkdir_refused(folder: Path) -> bool:
    try:
        (folder / "riskbench_probe").mkdir()
    except OSError:
        return True
    (folder / "riskbench_probe").rmdir()
    return False


def test_read_only_parent_is_one_line_exit_2(project, tmp_path, capsys):
    parent = _unwritable_parent(tmp_path)
    with pytest.raises(RunLocationError, match=r"cannot write the run folder at .*: (permission denied|read-only)"):
        run(project, parent / "run", [("one", "one.ipynb")])
    capsys.readouterr()
    assert main(["run-analysis", str(project["config"]), "--out", str(parent / "run")]) == 2
    err = capsys.readouterr().err.strip()
    assert err.count("\n") == 0 and "cannot write the run folder" in err and "choose an --out" in err


def test_exit_status_2_for_data_problems_1_for_internal_errors_and_debug_shows_the_traceback(
    project, tmp_path, capsys, monkeypatch
):
    with pytest.raises(StageInputError) as user:
        run(project, tmp_path / "a", [("cohort", "user_error.ipynb")])
    assert isinstance(user.value, RiskbenchError)
    assert describe_failure(user.value, "run-analysis")[0] == 2
    with pytest.raises(StageFailed) as bug:
        run(project, tmp_path / "b", [("models", "bug.ipynb")])
    assert not isinstance(bug.value, RiskbenchError)
    status, line = describe_failure(bug.value, "run-analysis")
    assert status == 1 and "\n" not in line and "rerun with --debug" in line and "stage models failed" in line
    assert "KeyError" in bug.value.details and "\x1b[" not in bug.value.details  # shown with --debug only

    def boom(*_a, **_k):
        raise ZeroDivisionError("float division by zero")

    monkeypatch.setattr("riskbench.workflow.runner.run_analysis", boom)
    assert main(["run-analysis", str(project["config"]), "--out", str(tmp_path / "c")]) == 1
    err = capsys.readouterr().err.strip()
    assert err == (
        "riskbench run-analysis: internal error: ZeroDivisionError: float division by zero; rerun with "
        "--debug for the traceback and report it"
    )
    assert main(["run-analysis", str(project["config"]), "--out", str(tmp_path / "c"), "--debug"]) == 1
    err = capsys.readouterr().err
    assert "Traceback (most recent call last)" in err and "def boom" not in err and "in boom" in err
    # a plain ValueError from deep inside a library is an internal error, not a user error
    assert describe_failure(ValueError("array must not contain infs or NaNs"), "run-analysis")[0] == 1
    assert describe_failure(ConfigError("[validation] folds = 1"), "check-config")[0] == 2
    several = ConfigError("a.toml: 2 problems:\n  [validation] folds = 1 ...\n  [report] title = 3 ...")
    assert describe_failure(several, "run-analysis") == (
        2,
        "riskbench run-analysis: error: a.toml: 2 problems:\n  [validation] folds = 1 ...\n  [report] title = 3 ...",
    )
    assert describe_failure(KeyboardInterrupt(), "run-analysis") == (
        130,
        "riskbench run-analysis: stopped by Ctrl-C; its temporary files and unfinished folder were removed, "
        "an earlier run folder is unchanged",
    )


# --------------------------------------------------------------------------------------------------
# Identifiers: nothing in saved messages, nothing outside the run after SIGINT/SIGTERM


def test_failed_folder_holds_no_source_ids_but_keeps_line_numbers(project, tmp_path):
    ids = project["ids"]
    with pytest.raises(StageInputError) as err:
        run(project, tmp_path / "dup", [("cohort", "user_error.ipynb")])
    assert "P000001" in str(err.value)  # the terminal may show more
    failed = tmp_path / "dup.failed"
    assert files_with_ids(failed, ids) == []
    manifest = json.loads((failed / "manifest.json").read_text())
    assert manifest["status"] == "failed"
    assert manifest["failure"].startswith("stage cohort failed in cell 3: CohortInputError: patients.csv: patient id")
    assert "lines 3 and 9" in manifest["failure"]
    kept = nbformat.read(str(failed / "notebooks" / "user_error.ipynb"), as_version=4)
    errors = [o for c in kept.cells for o in c.get("outputs", []) if o.get("output_type") == "error"]
    assert errors and errors[0]["ename"] == "CohortInputError" and "lines 3 and 9" in errors[0]["evalue"]

    # a headerless patients file: the real reader's message quotes the first data row
    with pytest.raises(StageInputError) as err:
        run(project, tmp_path / "headerless", [("cohort", "headerless.ipynb")])
    assert "patient_id" in str(err.value)
    failed = tmp_path / "headerless.failed"
    assert files_with_ids(failed, ids) == []
    assert "1954-10-10" not in (failed / "manifest.json").read_text()
    saved = json.loads((failed / "manifest.json").read_text())["failure"]
    assert "required column 'patient_id' is missing" in saved
    assert not (failed / ".tmp").exists()


def _kill_when(proc: subprocess.Popen, ready, sig: int, what: str) -> tuple[int, str]:
    try:
        _wait_for(lambda: ready() or proc.poll() is not None, timeout=120, what=what)
        assert proc.poll() is None, f"the run ended before {what}: {proc.communicate()}"
        proc.send_signal(sig)
        _out, err = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
    return proc.returncode, err


def _no_kernel_left(marker: str) -> bool:
    for cmdline in Path("/proc").glob("[0-9]*/cmdline"):
        try:
            if marker in cmdline.read_bytes().decode(errors="replace"):
                return False
        except OSError:
            continue
    return True


@pytest.fixture(scope="module")
def kill_project(tmp_path_factory) -> dict:
    base = tmp_path_factory.mktemp("kill")
    config, ids = demo_project(base / "study", 400)
    return {"base": base, "config": config, "ids": ids}


def _in_stage(paths: RunPaths, stage: str):
    """When a real stage is under way: the cohort stage while its DuckDB spill folder (raw ids) exists, a
    later stage once papermill has started writing its executed notebook."""
    if stage == "cohort":
        return lambda: any((paths.staging / ".tmp").glob("riskbench_duckdb_*"))
    return lambda: (paths.staging / "notebooks" / f"{stage}.ipynb").is_file()


@pytest.mark.parametrize("stage", ["cohort", "02_models"])
def test_sigterm_during_a_real_stage_leaves_no_id_outside_the_inputs(kill_project, tmp_path, stage):
    systemp = tmp_path / "t"
    systemp.mkdir()
    out = tmp_path / "run"
    paths = RunPaths(out)
    proc = subprocess.Popen(
        [PYTHON, "-m", "riskbench", "run-analysis", str(kill_project["config"]), "--out", str(out)],
        env={**os.environ, "TMPDIR": str(systemp)},
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    status, err = _kill_when(proc, _in_stage(paths, stage), signal.SIGTERM, f"stage {stage}")
    assert status == 128 + signal.SIGTERM
    assert err.strip().splitlines()[-1].startswith("riskbench run-analysis: stopped by SIGTERM")
    assert "Traceback" not in err
    _wait_for(lambda: _no_kernel_left(str(paths.staging)), timeout=20, what="the kernel to end")
    assert not paths.staging.exists() and not paths.lock.exists() and not out.exists()
    assert files_with_ids(systemp, kill_project["ids"]) == []
    assert files_with_ids(tmp_path, kill_project["ids"]) == []


def test_sigint_in_a_later_stage_removes_temporary_files_and_keeps_the_earlier_run(project, tmp_path):
    out = tmp_path / "run"
    run(project, out, [("one", "one.ipynb")])
    before = snapshot(out)
    systemp = tmp_path / "t"
    paths = RunPaths(out)
    # the driver runs "one" then the slow stage, which spills raw patient rows into its temporary folder
    stages = [("one", "one.ipynb"), ("slow", "slow.ipynb")]
    env_file = paths.staging / "environment.json"
    for sig in (signal.SIGINT, signal.SIGTERM):
        proc = _driver(project, out, stages, systemp, overwrite=True)
        status, err = _kill_when(
            proc, lambda: env_file.is_file() and any((paths.staging / ".tmp").glob("spill*")), sig, "the slow stage"
        )
        assert status == 128 + sig, err
        assert err.strip().splitlines()[-1].startswith("riskbench run-analysis: stopped by "), err
        _wait_for(lambda: _no_kernel_left(str(paths.staging)), timeout=20, what="the kernel to end")
        assert snapshot(out) == before  # the good run is untouched
        assert not paths.staging.exists() and not paths.lock.exists()
        assert files_with_ids(systemp, project["ids"]) == []
        assert [p for p in tmp_path.rglob("*") if "spill" in p.name] == []


def test_after_sigkill_of_the_runner_the_kernel_removes_its_temporary_files_and_the_next_run_cleans_up(
    project, tmp_path
):
    """SIGKILL cannot be caught: the kernel's watchdog notices its runner is gone, removes the temporary
    folder (raw rows) and ends; the next run into the same folder removes the marked leftover."""
    out = tmp_path / "run"
    paths = RunPaths(out)
    proc = _driver(project, out, [("slow", "slow.ipynb")], tmp_path / "t")
    status, _ = _kill_when(proc, lambda: any((paths.staging / ".tmp").glob("spill*")), signal.SIGKILL, "the spill")
    assert status == -signal.SIGKILL
    _wait_for(lambda: _no_kernel_left(str(paths.staging)), timeout=20, what="the orphaned kernel to end")
    assert not (paths.staging / ".tmp").exists()
    assert files_with_ids(tmp_path, project["ids"]) == []
    assert paths.staging.is_dir() and paths.lock.is_file()  # what SIGKILL leaves: a marked folder, a stale lock
    said: list[str] = []
    run_analysis(project["config"], out, notebooks_dir=project["books"], stages=[("one", "one.ipynb")], log=said.append)
    assert any("taking over the stale lock" in s for s in said)
    assert not paths.staging.exists() and (out / "tables" / "one.csv").is_file()


def test_stage_temporary_files_live_inside_the_staging_folder(project, tmp_path):
    out = tmp_path / "run"
    slow_fast = project["books"] / "slow_fast.ipynb"
    nbformat.write(notebook(SLOW.replace("{seconds}", "0")), str(slow_fast))
    systemp = tmp_path / "t"
    proc = _driver(project, out, [("slow", "slow_fast.ipynb")], systemp)
    proc.communicate(timeout=120)
    assert proc.returncode == 0
    where = json.loads((out / "environment.json").read_text())
    staging = RunPaths(out).staging
    assert where == {"tmp": str(staging / ".tmp"), "joblib": str(staging / ".tmp")}
    assert not (out / ".tmp").exists() and files_with_ids(systemp, project["ids"]) == []


# --------------------------------------------------------------------------------------------------
# Network: no TCP port for the kernel; Dask only when configured, remote only with opt-in and TLS


LISTENERS = (
    "import os\nfrom pathlib import Path\n"
    "inodes = {os.readlink(f'/proc/self/fd/{fd}') for fd in os.listdir('/proc/self/fd')\n"
    "          if os.path.exists(f'/proc/self/fd/{fd}')}\n"
    "listening = []\n"
    "for table in ('tcp', 'tcp6', 'udp', 'udp6'):\n"
    "    for row in Path(f'/proc/net/{table}').read_text().splitlines()[1:]:\n"
    "        fields = row.split()\n"
    "        if f'socket:[{fields[9]}]' in inodes:\n"
    "            listening.append((table, fields[1], fields[3]))\n"
    "Path(run_dir, 'sockets.json').write_text(__import__('json').dumps(listening))\n"
)


@pytest.mark.skipif(not Path("/proc/net/tcp").is_file(), reason="needs Linux /proc/net")
def test_the_kernel_holds_no_tcp_or_udp_socket(project, tmp_path):
    books = project["books"]
    nbformat.write(notebook(LISTENERS), str(books / "sockets.ipynb"))
    out = tmp_path / "run"
    run(project, out, [("sockets", "sockets.ipynb")])
    assert json.loads((out / "sockets.json").read_text()) == []
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["network"]["data_left_machine"] is False
    assert manifest["network"]["statement"].startswith("no: every step ran on this machine")


def plan(**kw) -> SimpleNamespace:
    base = {
        "workers": 1,
        "scheduler_address": None,
        "allow_remote_scheduler": False,
        "tls_ca_file": None,
        "tls_client_cert_file": None,
        "tls_client_key_file": None,
    }
    return SimpleNamespace(**{**base, **kw})


@pytest.fixture()
def tls_files(tmp_path) -> dict[str, str]:
    files = {}
    for key in ("tls_ca_file", "tls_client_cert_file", "tls_client_key_file"):
        path = tmp_path / f"{key}.pem"
        path.write_text("-----BEGIN CERTIFICATE-----\n")
        files[key] = str(path)
    return files


def test_remote_scheduler_needs_the_opt_in_and_tls(tls_files):
    assert check_scheduler(plan()) == []
    assert check_scheduler(plan(scheduler_address="tcp://127.0.0.1:8786")) == []
    assert check_scheduler(plan(scheduler_address="localhost:8786")) == []
    remote = check_scheduler(plan(scheduler_address="tcp://10.0.0.5:8786"))
    assert any("not on this machine" in p and "allow_remote_scheduler = true" in p for p in remote)
    assert any("write tls://10.0.0.5:8786" in p for p in remote)
    assert any("tls_ca_file, tls_client_cert_file, tls_client_key_file not set" in p for p in remote)
    opted_in_plain = check_scheduler(
        plan(scheduler_address="tcp://10.0.0.5:8786", allow_remote_scheduler=True, **tls_files)
    )
    assert opted_in_plain == [
        "[execution] scheduler_address = 'tcp://10.0.0.5:8786': a scheduler on another "
        "machine must be reached over TLS; write tls://10.0.0.5:8786"
    ]
    assert (
        check_scheduler(plan(scheduler_address="tls://10.0.0.5:8786", allow_remote_scheduler=True, **tls_files)) == []
    )
    missing = check_scheduler(
        plan(
            scheduler_address="tls://10.0.0.5:8786",
            allow_remote_scheduler=True,
            **{**tls_files, "tls_client_key_file": "/nonexistent/key.pem"},
        )
    )
    assert missing == [
        "[execution] tls_client_key_file = '/nonexistent/key.pem' is not a readable file; give the path of the PEM file"
    ]
    assert "is not a Dask address" in check_scheduler(plan(scheduler_address="tcp://host:port"))[0]
    assert "uses ucx://" in check_scheduler(plan(scheduler_address="ucx://10.0.0.5:8786"))[0]
    # a loopback scheduler with workers elsewhere is refused too, before any data is sent
    assert check_workers(["tcp://127.0.0.1:4001", "tcp://[::1]:4002"], allow_remote=False) == []
    assert "workers on other machines (10.0.0.7)" in check_workers(["tcp://10.0.0.7:4001"], allow_remote=False)[0]
    assert check_workers(["tls://10.0.0.7:4001"], allow_remote=True) == []


def _square(_shared, index, _seed):
    return index * index


def test_remote_run_is_refused_before_connecting_and_uses_encryption_when_allowed(tls_files, monkeypatch):
    distributed = pytest.importorskip("distributed")
    seen: dict = {}

    class FakeClient:
        def __init__(self, address, **kw):
            seen.update(address=address, **kw)

        def scheduler_info(self):
            return {"workers": {"tls://10.0.0.5:4001": {}}}

        def close(self):
            seen["closed"] = True

        def __enter__(self):  # the real Client is a context manager that closes itself on exit
            return self

        def __exit__(self, *exc_info):
            self.close()

    monkeypatch.setattr(distributed, "Client", FakeClient)
    with pytest.raises(ValidationInputError, match="not on this machine"):
        run_replicates(_square, None, 1, 2, ExecutionConfig(scheduler_address="tcp://10.0.0.5:8786"))
    assert seen == {}  # refused before any connection
    with pytest.raises(ValidationInputError, match="workers on other machines"):
        run_replicates(_square, None, 1, 2, ExecutionConfig(scheduler_address="tcp://127.0.0.1:8786"))
    assert seen["security"] is None and seen.get("closed")  # connected locally, refused the remote workers
    seen.clear()
    config = ExecutionConfig(scheduler_address="tls://10.0.0.5:8786", allow_remote_scheduler=True, **tls_files)
    with pytest.raises(Exception):  # noqa: B017 - the fake client cannot run tasks; the connection is what counts
        run_replicates(_square, None, 1, 2, config)
    security = seen["security"]
    assert security.require_encryption is True
    assert security.tls_ca_file == tls_files["tls_ca_file"]
    assert security.tls_client_cert == tls_files["tls_client_cert_file"]
    assert security.tls_client_key == tls_files["tls_client_key_file"]


def test_remote_scheduler_in_the_configuration_is_refused_before_anything_runs(project, tmp_path):
    config = tmp_path / "remote.toml"
    text = (
        project["config"]
        .read_text()
        .replace("[execution]\n", '[execution]\nscheduler_address = "tcp://10.0.0.5:8786"\n')
    )
    config.write_text(text.replace('path = "', f'path = "{project["config"].parent}/'))
    with pytest.raises(ConfigError, match="scheduler_address"):
        load_config(config)
    out = tmp_path / "run"
    with pytest.raises(ConfigError, match="not on this machine"):
        run_analysis(config, out, notebooks_dir=project["books"], stages=[("one", "one.ipynb")], log=None)
    assert list(tmp_path.iterdir()) == [config]
