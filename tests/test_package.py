"""The package installs and its command answers."""
import subprocess
import sys


def test_cli_help_runs():
    out = subprocess.run([sys.executable, "-m", "sensemble.cli", "--help"], capture_output=True, text=True)
    assert out.returncode == 0
    assert "demo" in out.stdout
