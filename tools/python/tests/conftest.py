"""Shared fixtures: the repository, the CLI binary, demo scans.

The package under test is the installed one (``pip install tools/python``, as CI does); the
CLI is the release binary of the same checkout (``target/release/equiscan``, built here with
``cargo build --release --locked --bin equiscan`` when missing, or ``EQUISCAN_BIN``).
"""

import json
import os
import subprocess
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[3]
SCANS = REPO / "scans"


@pytest.fixture(scope="session")
def repo():
    return REPO


@pytest.fixture(scope="session")
def cli():
    """Runs the equiscan CLI; returns the CompletedProcess (text mode)."""
    exe = os.environ.get("EQUISCAN_BIN")
    if exe is None:
        exe = REPO / "target" / "release" / "equiscan"
        if not exe.exists():
            subprocess.run(
                ["cargo", "build", "--release", "--locked", "--bin", "equiscan"],
                cwd=REPO,
                check=True,
            )

    def run(*args, check=True, env=None):
        done = subprocess.run(
            [str(exe), *map(str, args)],
            capture_output=True,
            text=True,
            env={**os.environ, **(env or {})},
        )
        if check and done.returncode != 0:
            raise AssertionError(
                f"equiscan {' '.join(map(str, args))} exited {done.returncode}:\n{done.stderr}"
            )
        return done

    return run


@pytest.fixture(scope="session")
def station1():
    return SCANS / "depot_station1.laz"


@pytest.fixture(scope="session")
def station2():
    return SCANS / "depot_station2.laz"


@pytest.fixture(scope="session")
def truth():
    return SCANS / "truth.json"


def load_json(path):
    with open(path) as f:
        return json.load(f)
