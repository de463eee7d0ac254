"""notebooks-demo/05-evcxr-rust.ipynb run for real: the evcxr Rust kernel
(built by scripts/test-evcxr from the Rust registry) executes it under
nbclient, and what its cells show is checked. Run by scripts/test-evcxr,
not by scripts/test-all (see that script for why)."""

from __future__ import annotations

import base64
import json
import os
import re
import subprocess
from pathlib import Path

import nbformat
import pytest
from nbclient import NotebookClient

from kernel_env import REPOSITORY, baroc_binary

NOTEBOOK = REPOSITORY / "notebooks-demo" / "05-evcxr-rust.ipynb"


@pytest.fixture(scope="module")
def rust_kernel():
    """The evcxr kernel installed as `rust` in the tests' private Jupyter
    path (conftest.py points JUPYTER_PATH there)."""
    binary = os.environ.get("BAROC_EVCXR_JUPYTER")
    if not binary or not Path(binary).exists():
        pytest.fail("BAROC_EVCXR_JUPYTER must name an evcxr_jupyter binary: run scripts/test-evcxr")
    folder = Path(os.environ["JUPYTER_PATH"].split(os.pathsep)[0]) / "kernels" / "rust"
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "kernel.json").write_text(
        json.dumps({"argv": [binary, "--control_file", "{connection_file}"], "display_name": "Rust", "language": "rust"})
    )
    return "rust"


def test_the_evcxr_notebook_shows_a_map_and_the_thickness(rust_kernel):
    # The notebook opens ../baroc-demo/ from notebooks-demo/ and depends on
    # the crate at .., so it runs in place in the repository.
    subprocess.run([str(baroc_binary()), "demo", "--output", str(REPOSITORY / "baroc-demo")], check=True, capture_output=True)
    notebook = nbformat.read(NOTEBOOK, as_version=4)
    # The first cell builds Baroc and its dependencies inside evcxr.
    NotebookClient(notebook, kernel_name=rust_kernel, timeout=3600, resources={"metadata": {"path": str(NOTEBOOK.parent)}}).execute()
    code = [c for c in notebook.cells if c.cell_type == "code"]
    for cell in code:
        errors = [o for o in cell.get("outputs", []) if o.get("output_type") == "error"]
        assert not errors, f"cell {cell.source!r} failed: {errors}"
    pictures = [
        base64.b64decode(o["data"]["image/png"])
        for cell in code
        for o in cell.get("outputs", [])
        if "image/png" in o.get("data", {})
    ]
    assert pictures, "no cell showed a PNG"
    assert all(p.startswith(b"\x89PNG\r\n\x1a\n") and len(p) > 10_000 for p in pictures)
    # The 1000-500 hPa thickness at the site, in metres: the rough range of
    # that thickness in mid-latitude air (common practice: ~5100-5700 m).
    shown = " ".join(
        o.get("data", {}).get("text/plain", "") + o.get("text", "")
        for cell in code
        if "at point" in cell.source
        for o in cell.get("outputs", [])
    )
    numbers = [float(x) for x in re.findall(r"\d{4}(?:\.\d+)?", shown)]
    assert any(5100 <= n <= 5700 for n in numbers), shown
