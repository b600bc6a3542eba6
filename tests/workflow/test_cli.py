"""The command line answers --help and --version without touching any data."""

import subprocess
import sys

from riskbench import __version__
from riskbench.workflow.cli import main


def test_version_flag_prints_the_package_version(capsys):
    try:
        main(["--version"])
    except SystemExit as stop:
        assert stop.code == 0
    assert __version__ in capsys.readouterr().out


def test_help_lists_subcommands():
    out = subprocess.run(
        [sys.executable, "-m", "riskbench", "--help"], capture_output=True, text=True, check=True
    ).stdout
    assert "research software" in out.lower() or "not a medical device" in out.lower()
