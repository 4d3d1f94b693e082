"""The command line answers --version and --help (CONTRACT.md §2)."""

import subprocess
import sys

import sweep


def test_version_flag_prints_package_version():
    out = subprocess.run(
        [sys.executable, "-m", "sweep.cli", "--version"], capture_output=True, text=True
    )
    assert out.returncode == 0
    assert out.stdout.strip() == f"luxsweep {sweep.__version__}"


def test_help_lists_program_name():
    out = subprocess.run(
        [sys.executable, "-m", "sweep.cli", "--help"], capture_output=True, text=True
    )
    assert out.returncode == 0
    assert "luxsweep" in out.stdout
