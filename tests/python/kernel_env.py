"""Build the development kernel and install its kernelspec where only
these tests look, so the suites never touch the user's Jupyter setup."""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import tempfile
from pathlib import Path

REPOSITORY = Path(__file__).resolve().parents[2]
KERNEL_NAME = "baroc"
# The protocol test double (src/bin/baroc-kernel-dev.rs) installs under this name.
DOUBLE = "baroc-protocol-double"


def dev_kernel_binary() -> Path:
    """The development kernel: $BAROC_KERNEL_DEV if set, else a release
    build of the `baroc-kernel-dev` binary of this repository."""
    given = os.environ.get("BAROC_KERNEL_DEV")
    if given:
        return Path(given)
    subprocess.run(
        ["cargo", "build", "--release", "--quiet", "--bin", "baroc-kernel-dev"],
        cwd=REPOSITORY,
        check=True,
    )
    metadata = subprocess.run(
        ["cargo", "metadata", "--format-version", "1", "--no-deps"],
        cwd=REPOSITORY,
        check=True,
        capture_output=True,
    )
    target = Path(json.loads(metadata.stdout)["target_directory"])
    return target / "release" / "baroc-kernel-dev"


def baroc_binary() -> Path:
    """The baroc binary: $BAROC_BIN (set by scripts/test-all), else the
    release build of this repository."""
    given = os.environ.get("BAROC_BIN")
    if given:
        return Path(given)
    subprocess.run(["cargo", "build", "--release", "--quiet", "--bin", "baroc"], cwd=REPOSITORY, check=True)
    metadata = subprocess.run(["cargo", "metadata", "--format-version", "1", "--no-deps"], cwd=REPOSITORY, check=True, capture_output=True)
    return Path(json.loads(metadata.stdout)["target_directory"]) / "release" / "baroc"


class TemporaryJupyter:
    """A private Jupyter data tree with the kernelspec installed through the
    binary's own `install --prefix`, and the environment pointed at it."""

    def __init__(self) -> None:
        self.binary = dev_kernel_binary()
        self.root = Path(tempfile.mkdtemp(prefix="baroc-jupyter-"))
        self.saved = {
            name: os.environ.get(name) for name in ("JUPYTER_PATH", "JUPYTER_DATA_DIR", "JUPYTER_RUNTIME_DIR")
        }
        subprocess.run([str(self.binary), "install", "--prefix", str(self.root)], check=True, capture_output=True)
        # The real kernel, as users install it, beside the protocol double.
        subprocess.run([str(baroc_binary()), "kernel", "install", "--prefix", str(self.root)], check=True, capture_output=True)
        os.environ["JUPYTER_PATH"] = str(self.root / "share" / "jupyter")
        os.environ["JUPYTER_DATA_DIR"] = str(self.root / "data")
        os.environ["JUPYTER_RUNTIME_DIR"] = str(self.root / "runtime")

    def close(self) -> None:
        for name, value in self.saved.items():
            if value is None:
                os.environ.pop(name, None)
            else:
                os.environ[name] = value
        shutil.rmtree(self.root, ignore_errors=True)
