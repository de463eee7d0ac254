"""jupyter_kernel_test, the Jupyter project's kernel conformance suite,
against the real Baroc kernel with samples in the Baroc language."""

from __future__ import annotations

import subprocess
import tempfile
import unittest
from pathlib import Path

import jupyter_kernel_test

from kernel_env import baroc_binary

# The demo case, for the display sample (a map needs data).
_DEMO = Path(tempfile.mkdtemp(prefix="baroc-conformance-"))
subprocess.run([str(baroc_binary()), "demo", "--output", str(_DEMO)], check=True, capture_output=True)
_CASE = _DEMO / "marrowind-wave-2026-10-14.nc"


class BarocKernelConformance(jupyter_kernel_test.KernelTests):
    kernel_name = "baroc"
    language_name = "baroc"
    file_extension = ".baroc"

    code_hello_world = 'print("hello, world")'

    # A layer written from its top down draws the checker's warning, which a
    # notebook shows on standard error.
    code_stderr = "let upside_down = 500 hPa to 1000 hPa"

    # The messaging protocol's clear_output, asked for from the language.
    code_clear_output = "clear_output()"

    completion_samples = [
        {"text": "thick", "matches": {"thickness"}},
        {"text": "geostrophic_w", "matches": {"geostrophic_wind"}},
    ]

    complete_code_samples = ["1 + 2", "let lower = 1000 hPa to 500 hPa", "thickness(1000 hPa to 500 hPa)"]
    incomplete_code_samples = ["thickness(1000 hPa", "let lower = 1000 hPa to", "function f(x) {"]
    invalid_code_samples = ["1 + 2)", "thickness(1000 hPa))"]

    # Adding a temperature to a speed is refused before anything runs.
    code_generate_error = "5 K + 3 m/s"

    code_execute_result = [
        {"code": "1 + 2", "result": "3"},
        {"code": "500 hPa as Pa", "result": "50000 Pa"},
        {"code": "20 kt as m/s", "result": "10.2889 m/s"},
    ]

    code_display_data = [
        {"code": f'open "{_CASE}"\nmap(thickness(1000 hPa to 500 hPa))\n1', "mime": "image/png"},
        {"code": f'open "{_CASE}"\nmap(thickness(1000 hPa to 500 hPa))\n1', "mime": "image/svg+xml"},
    ]

    # Matches "1 + 2" of code_execute_result (glob over the whole input).
    code_history_pattern = "1 ? 2"
    supported_history_operations = ("tail", "range", "search")

    code_inspect_sample = "thickness"


if __name__ == "__main__":
    unittest.main()
