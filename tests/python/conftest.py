"""Install the development kernel once for the whole run (before any test
class is set up: jupyter_kernel_test starts its kernel in setUpClass)."""

from __future__ import annotations

import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

from kernel_env import TemporaryJupyter  # noqa: E402

_jupyter: TemporaryJupyter | None = None


def pytest_configure(config) -> None:
    global _jupyter
    _jupyter = TemporaryJupyter()
    config.baroc_jupyter = _jupyter


def pytest_unconfigure(config) -> None:
    if _jupyter is not None:
        _jupyter.close()
