import os
import pathlib
import subprocess
import sys

import pytest

ROOT = pathlib.Path(__file__).resolve().parents[1]
CONFIGS = pathlib.Path(__file__).resolve().parent / "configs"


def run_cli(args, cwd, timeout=300):
    """Run the installed command as a user would, in `cwd`."""
    env = dict(os.environ, PYTHONWARNINGS="ignore")
    return subprocess.run([sys.executable, "-m", "pipeline.cli", *map(str, args)], cwd=cwd, env=env,
                          capture_output=True, text=True, timeout=timeout)


@pytest.fixture
def cli():
    return run_cli
