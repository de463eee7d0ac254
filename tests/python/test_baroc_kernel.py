"""The real Baroc kernel driven by jupyter_client as a notebook would, and
every notebook in notebooks-demo/ executed by nbclient with assertions on
what they show."""

from __future__ import annotations

import base64
import json
import re
import shutil
import subprocess
import time
from pathlib import Path
from queue import Empty

import nbformat
import pytest
from jupyter_client.manager import start_new_kernel
from nbclient import NotebookClient

from kernel_env import REPOSITORY, baroc_binary


@pytest.fixture(scope="module")
def case_dir(tmp_path_factory):
    """A folder with the demo case at baroc-demo/ and the notebooks at
    notebooks-demo/, laid out as in the repository."""
    root = tmp_path_factory.mktemp("notebooks")
    subprocess.run([str(baroc_binary()), "demo", "--output", str(root / "baroc-demo")], check=True, capture_output=True)
    shutil.copytree(REPOSITORY / "notebooks-demo", root / "notebooks-demo")
    return root


@pytest.fixture()
def kernel(case_dir):
    km, kc = start_new_kernel(kernel_name="baroc", startup_timeout=60, cwd=str(case_dir / "notebooks-demo"))
    yield kc
    kc.stop_channels()
    km.shutdown_kernel(now=True)


def run(kc, code, timeout=60):
    """Executes code; returns (reply content, iopub messages of this request)."""
    msg_id = kc.execute(code)
    reply = kc.get_shell_msg(timeout=timeout)
    while reply["parent_header"].get("msg_id") != msg_id:
        reply = kc.get_shell_msg(timeout=timeout)
    messages = []
    while True:
        msg = kc.get_iopub_msg(timeout=timeout)
        if msg["parent_header"].get("msg_id") != msg_id:
            continue
        messages.append(msg)
        if msg["msg_type"] == "status" and msg["content"]["execution_state"] == "idle":
            break
    return reply["content"], messages


def test_a_map_cell_shows_pictures(kernel):
    reply, messages = run(kernel, 'open "../baroc-demo/marrowind-wave-2026-10-14.nc"\nmap(thickness(1000 hPa to 500 hPa), thermal_wind(1000 hPa to 500 hPa))')
    assert reply["status"] == "ok"
    results = [m for m in messages if m["msg_type"] == "execute_result"]
    assert len(results) == 1
    data = results[0]["content"]["data"]
    png = base64.b64decode(data["image/png"])
    assert png.startswith(b"\x89PNG\r\n\x1a\n") and len(png) > 20_000
    assert data["image/svg+xml"].lstrip().startswith("<svg") or "<svg" in data["image/svg+xml"][:300]
    assert "thickness" in data["text/plain"]


def test_errors_carry_the_caret_and_the_count(kernel):
    run(kernel, 'open "../baroc-demo/marrowind-wave-2026-10-14.nc"')
    reply, messages = run(kernel, "thickness(1000 hPa to 500 hPa) + wind.eastward at 500 hPa")
    assert reply["status"] == "error" and isinstance(reply["execution_count"], int)
    error = [m for m in messages if m["msg_type"] == "error"][0]["content"]
    traceback = "\n".join(error["traceback"])
    assert "cannot add" in traceback and "^" in traceback and "units of different dimensions" in traceback
    reply, messages = run(kernel, "temperatur at 500 hPa")
    traceback = "\n".join([m for m in messages if m["msg_type"] == "error"][0]["content"]["traceback"])
    assert "did you mean `temperature`?" in traceback


def test_state_persists_and_a_failed_cell_changes_nothing(kernel):
    run(kernel, "let layer = 1000 hPa to 700 hPa")
    reply, _ = run(kernel, "let layer = 850 hPa to 500 hPa\nlet broken = 5 K + 3 m/s")
    assert reply["status"] == "error"
    reply, messages = run(kernel, "layer")
    result = [m for m in messages if m["msg_type"] == "execute_result"][0]["content"]["data"]["text/plain"]
    assert "1000-700 hPa" in result


def test_completion_and_inspection_know_the_dataset(kernel):
    run(kernel, 'open "../baroc-demo/marrowind-wave-2026-10-14.nc"')
    kernel.complete("geopot", 6)
    reply = kernel.get_shell_msg(timeout=10)["content"]
    assert {"geopotential", "geopotential_height"} & set(reply["matches"]) and reply["cursor_start"] == 0
    kernel.complete("let x = thermal_w", 17)
    reply = kernel.get_shell_msg(timeout=10)["content"]
    assert "thermal_wind" in reply["matches"]
    kernel.inspect("geopotential", 5)
    reply = kernel.get_shell_msg(timeout=10)["content"]
    text = reply["data"]["text/plain"]
    assert reply["found"] and "levels (hPa): 1000, 925" in text and "m2 s-2" in text


def test_a_long_cell_is_interrupted_and_the_session_lives_on(kernel, case_dir):
    run(kernel, 'open "../baroc-demo/marrowind-wave-2026-10-14.nc"\nlet kept = 42 K')
    long_cell = "\n".join(f"let s{k} = smooth(temperature, 900 km)" for k in range(400))
    msg_id = kernel.execute(long_cell)
    time.sleep(1.5)
    started = time.monotonic()
    kernel.shutdown  # noqa: B018 (the client object is used below)
    from jupyter_client import KernelManager  # noqa: F401
    # interrupt_request on the control channel, as the kernelspec asks.
    msg = kernel.session.msg("interrupt_request", {})
    kernel.control_channel.send(msg)
    reply = kernel.get_shell_msg(timeout=30)
    while reply["parent_header"].get("msg_id") != msg_id:
        reply = kernel.get_shell_msg(timeout=30)
    elapsed = time.monotonic() - started
    assert reply["content"]["status"] == "error" and reply["content"]["ename"] == "KeyboardInterrupt"
    assert elapsed < 1.5, f"took {elapsed:.2f} s to stop"
    reply, messages = run(kernel, "kept")
    assert reply["status"] == "ok"
    assert "42 K" in [m for m in messages if m["msg_type"] == "execute_result"][0]["content"]["data"]["text/plain"]


def _outputs(cell):
    return cell.get("outputs", [])


def _has_image(cell):
    return any("image/png" in o.get("data", {}) for o in _outputs(cell))


def _numbers(cell):
    text = " ".join(o.get("data", {}).get("text/plain", "") + o.get("text", "") for o in _outputs(cell))
    return [float(x) for x in re.findall(r"-?\d+\.\d+|-?\d+", text)]


def execute(case_dir, name):
    path = case_dir / "notebooks-demo" / name
    notebook = nbformat.read(path, as_version=4)
    NotebookClient(notebook, kernel_name="baroc", timeout=240, resources={"metadata": {"path": str(path.parent)}}).execute()
    return notebook.cells


def test_first_look_notebook(case_dir):
    cells = execute(case_dir, "01-first-look.ipynb")
    code = [c for c in cells if c.cell_type == "code"]
    assert "opened the case" in code[0]["outputs"][0]["text"]
    assert _has_image(code[1]) and _has_image(code[2])
    # 1000-500 hPa thickness at Port Tallowmere: between 5100 and 5700 m
    # (a mid-latitude autumn value, common practice).
    thickness = [x for x in _numbers(code[3]) if 4000 < x < 7000]
    assert thickness and all(5100 < x < 5700 for x in thickness), code[3]["outputs"]
    speeds = [x for x in _numbers(code[4]) if 0 <= x < 100]
    assert speeds and max(speeds) < 80
    # Two panels side by side in one picture.
    assert _has_image(code[5])
    png = base64.b64decode([o for o in code[5]["outputs"] if "image/png" in o.get("data", {})][0]["data"]["image/png"])
    width = int.from_bytes(png[16:20], "big")
    assert width >= 1000, width
    # The balance audit of the first time step: the demo's heights are the
    # hydrostatic integral of its virtual temperature (hypsometric equation,
    # field guide), so it passes, and it says it is not a warning service.
    audit = " ".join(o.get("data", {}).get("text/plain", "") + o.get("text", "") for o in code[6]["outputs"])
    assert "pass: heights and temperature agree hydrostatically" in audit, audit[-2000:]
    assert "not a warning service" in audit


def test_shear_budget_notebook(case_dir):
    cells = [c for c in execute(case_dir, "02-shear-budget.ipynb") if c.cell_type == "code"]
    assert _has_image(cells[1]) and _has_image(cells[3]) and _has_image(cells[4])
    table = cells[2]["outputs"][0]["data"]
    assert "text/html" in table and "<table" in table["text/html"]
    # The two routes agree on this hydrostatic case: mean difference well
    # under a metre per second.
    mean = float(re.search(r"<td[^>]*>([-\d.eE]+)</td>", table["text/html"]).group(1))
    assert 0 <= mean < 0.3, table["text/plain"]


def test_advection_and_turning_notebook(case_dir):
    cells = [c for c in execute(case_dir, "03-advection-and-turning.ipynb") if c.cell_type == "code"]
    for k in (1, 2, 3, 4, 7):
        assert _has_image(cells[k]), k
    hodograph_text = cells[1]["outputs"][0]["data"]["text/plain"]
    assert "hodograph" in hodograph_text.lower()
    turning = [x for x in _numbers(cells[5]) if -180 <= x <= 180]
    assert turning


def test_recipe_notebook_saves_reruns_and_reports(case_dir, monkeypatch, tmp_path):
    monkeypatch.setenv("XDG_CONFIG_HOME", str(tmp_path / "config"))
    cells = [c for c in execute(case_dir, "04-recipes-and-reports.ipynb") if c.cell_type == "code"]
    assert "saved the recipe" in cells[2]["outputs"][0]["data"]["text/plain"]
    assert "lower_baroclinicity(layer)" in cells[3]["outputs"][0]["data"]["text/plain"]
    assert _has_image(cells[4])
    # Eady growth rates of a mid-latitude baroclinic zone: of order one per
    # day (textbook order of magnitude).
    html = cells[5]["outputs"][0]["data"]["text/html"]
    mean = float(re.search(r"<td[^>]*>([-\d.eE]+)</td>", html).group(1))
    assert 0.05 < mean < 3.0, html
    report = case_dir / "notebooks-demo" / "lower-baroclinicity-report.html"
    text = report.read_text()
    assert "not a warning service" in text and "data:image/png;base64" in text and "SHA-256" in text


def _column(cell):
    """The values of a one-column table over time (text/plain), None for
    missing."""
    text = cell["outputs"][0]["data"]["text/plain"]
    values = []
    for line in text.splitlines():
        if re.match(r"^\d{4}-\d\d-\d\dT", line):
            last = line.split()[-1]
            values.append(None if last == "missing" else float(last))
    return values


def test_regional_model_levels_notebook(case_dir):
    cells = [c for c in execute(case_dir, "06-regional-model-levels.ipynb") if c.cell_type == "code"]
    assert "opened the regional case" in cells[0]["outputs"][0]["text"]
    # 925-500 hPa thickness offshore: hypsometric equation (field guide),
    # (Rd / g0) ln(925 / 500) Tmean = 18.0 m/K x Tmean; a late-winter
    # layer mean of 245 to 275 K (common practice, no source) gives 4410 to
    # 4960 m.
    offshore = _column(cells[1])
    assert len(offshore) == 3 and all(x is not None and 4410 < x < 4960 for x in offshore), offshore
    # Over the Orrin Heights (ground near 850 hPa) the layer is below
    # ground at every step: missing, not extrapolated.
    assert _column(cells[2]) == [None, None, None]
    # 700-400 hPa: 16.4 m/K x a layer mean of 230 to 265 K.
    assert all(x is not None and 3770 < x < 4340 for x in _column(cells[3])), _column(cells[3])
    # The case's wind is geostrophic by construction: the model wind (read
    # grid-relative, turned, interpolated from model levels) differs from
    # the geostrophic wind of the hydrostatic geopotential by little
    # (under 2 m/s against winds of 20 to 40 m/s).
    departures = _column(cells[4])
    assert len(departures) == 3 and all(x is not None and x < 2.0 for x in departures), departures
    assert _has_image(cells[5]) and _has_image(cells[6])
    turning = _column(cells[7])
    assert turning and all(x is not None and -180 <= x <= 180 for x in turning)
    # The map of the projected grid is drawn (in the grid's own projection),
    # with the coastline of the case's land-sea mask (GRIB2 discipline 2,
    # category 0, number 0, written by Baroc's own writer).
    assert _has_image(cells[8])
    described = " ".join(o.get("data", {}).get("text/plain", "") for o in _outputs(cells[8]))
    assert "coastline from the land-sea mask" in described, described
