import os
import subprocess
import sys
from pathlib import Path

import pytest

BIN = Path(sys.executable).parent


def command(name: str) -> list[str]:
    """How a user runs ``tile-out`` / ``tilewright``: the installed script, else its module."""
    script = BIN / name
    if script.exists():
        return [str(script)]
    return [sys.executable, "-m", {"tile-out": "tilewright.cli.tile_out", "tilewright": "tilewright.cli.main"}[name]]


def run(argv: list[str], cwd, timeout=900) -> subprocess.CompletedProcess:
    env = {**os.environ, "MPLBACKEND": "Agg"}
    return subprocess.run(argv, cwd=cwd, env=env, capture_output=True, text=True, timeout=timeout)


@pytest.fixture(scope="session")
def demo_workspace(tmp_path_factory):
    """A folder where ``make demo`` has been run: ``demo-out/`` (slides, metadata, tiles, audit).

    ``make demo`` runs ``tilewright demo demo-out``; this runs the same command with two slides a
    site (the smallest cohort that still has a pen-marked and a blank slide), once a session.
    """
    where = tmp_path_factory.mktemp("newcomer")
    done = run(command("tilewright") + ["demo", "demo-out", "--per-site", "2"], where)
    return where, done
