"""jupyter_kernel_test's conformance suite against the development kernel.

The samples below are in the toy language of the development binary
(integers, names, print/eprint, display). When the Baroc session replaces
it, switch each sample to Baroc code with the same meaning.
"""

from __future__ import annotations

import unittest

import jupyter_kernel_test


class BarocKernelConformance(jupyter_kernel_test.KernelTests):
    kernel_name = "baroc"
    language_name = "baroc"
    file_extension = ".baroc"

    code_hello_world = "print hello, world"
    code_stderr = "eprint hello, stderr"

    completion_samples = [
        {"text": "pri", "matches": {"print"}},
        {"text": "dis", "matches": {"display"}},
    ]

    complete_code_samples = ["1+2", "print hi", "x = (1+2)*3"]
    incomplete_code_samples = ["(1+2", "1+"]
    invalid_code_samples = ["1+2)", "{"]

    code_generate_error = "1/0"

    code_execute_result = [
        {"code": "1+2", "result": "3"},
        {"code": "6*7", "result": "42"},
        {"code": "2-5", "result": "-3"},
    ]

    code_display_data = [
        {"code": "display", "mime": "image/png"},
        {"code": "display", "mime": "text/html"},
    ]

    # Matches "6*7" of code_execute_result (glob over the whole input).
    code_history_pattern = "6?7"
    supported_history_operations = ("tail", "range", "search")

    code_inspect_sample = "print"


if __name__ == "__main__":
    unittest.main()
