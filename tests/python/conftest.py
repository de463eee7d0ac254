"""Shared set-up: the Baroc kernel installed once into a temporary Jupyter
path for the whole run (before any test class is set up:
jupyter_kernel_test starts its kernel in setUpClass), the baroc binary, and
the demo case, made once per run."""

from __future__ import annotations

import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

from kernel_env import TemporaryJupyter  # noqa: E402

import json
import os
import pathlib
import subprocess

import pytest

ROOT = pathlib.Path(__file__).resolve().parents[2]


@pytest.fixture(scope="session")
def baroc():
    """Path of the release binary that scripts/test-all builds."""
    path = pathlib.Path(os.environ.get("BAROC_BIN", ROOT / "target" / "release" / "baroc"))
    if not path.exists():
        pytest.fail(f"{path} is missing: run scripts/test-all (it builds the binary first)")
    return str(path)


def run(baroc, *args, check=True, cwd=None):
    """Runs baroc, returning the completed process (text mode)."""
    done = subprocess.run([baroc, *map(str, args)], capture_output=True, text=True, cwd=cwd)
    if check and done.returncode != 0:
        raise AssertionError(f"baroc {' '.join(map(str, args))} failed ({done.returncode}):\n{done.stderr}")
    return done


def table_json(baroc, expression, point, *files):
    done = run(baroc, "table", "-e", expression, "--at", point, "--format", "json", *files)
    return json.loads(done.stdout)


@pytest.fixture(scope="session")
def demo_case(baroc, tmp_path_factory):
    """The demo case file, written by `baroc demo`."""
    directory = tmp_path_factory.mktemp("demo")
    run(baroc, "demo", "--output", directory)
    return directory / "marrowind-wave-2026-10-14.nc"


_jupyter: TemporaryJupyter | None = None


def pytest_configure(config) -> None:
    global _jupyter
    _jupyter = TemporaryJupyter()
    config.baroc_jupyter = _jupyter


def pytest_unconfigure(config) -> None:
    if _jupyter is not None:
        _jupyter.close()
