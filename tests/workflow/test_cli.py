"""The command line answers --help and --version without touching any data."""

import subprocess
import sys

import pytest

from riskbench import __version__
from riskbench.workflow.cli import main


def test_version_flag_prints_the_package_version(capsys):
    with pytest.raises(SystemExit) as stop:  # argparse's version action exits; the test must see that it did
        main(["--version"])
    assert stop.value.code == 0
    assert __version__ in capsys.readouterr().out


def test_exit_status_of_a_user_error_and_of_success(tmp_path, capsys):
    """A configuration problem is exit status 2 with one line naming the file; no subcommand prints the help, 0."""
    missing = tmp_path / "nowhere.toml"
    assert main(["check-config", str(missing)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "nowhere.toml" in err[0] and "internal error" not in err[0]
    assert main([]) == 0  # no subcommand: the help, status 0


def test_help_lists_subcommands():
    out = subprocess.run(
        [sys.executable, "-m", "riskbench", "--help"], capture_output=True, text=True, check=True
    ).stdout
    assert "research software" in out.lower() or "not a medical device" in out.lower()
