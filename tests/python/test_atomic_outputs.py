"""Outputs are written whole or not at all: a run killed with SIGKILL in the
middle of writing (a plain run, a shard, a step-by-step run) leaves nothing
at the output path, and two runs writing the same path at once leave one
of the two files whole, never a mix. Files are read back with
netCDF4-python. The input is a global half-degree grid written here with
netCDF4-python, large enough that writing takes a visible while."""

import os
import signal
import subprocess
import threading
import time

import netCDF4
import numpy as np
import pytest

LEVELS = np.array([1000, 925, 850, 700, 600, 500, 400, 300, 250, 200, 150, 100], "f8")


@pytest.fixture(scope="module")
def large_case(tmp_path_factory):
    """Eight six-hourly steps of temperature on 12 levels, 361 x 720 points
    (about 100 MB of float32), with CF coordinates."""
    path = tmp_path_factory.mktemp("large") / "large.nc"
    nt, ny, nx = 8, 361, 720
    with netCDF4.Dataset(path, "w") as ds:
        ds.createDimension("time", nt)
        ds.createDimension("level", len(LEVELS))
        ds.createDimension("latitude", ny)
        ds.createDimension("longitude", nx)
        t = ds.createVariable("time", "f8", ("time",))
        t.units, t.calendar, t.standard_name = "hours since 2031-01-01 00:00:00", "standard", "time"
        t[:] = np.arange(nt) * 6.0
        level = ds.createVariable("level", "f8", ("level",))
        level.units, level.standard_name, level.positive = "hPa", "air_pressure", "down"
        level[:] = LEVELS
        lat = ds.createVariable("latitude", "f8", ("latitude",))
        lat.units, lat.standard_name = "degrees_north", "latitude"
        lat[:] = np.linspace(90, -90, ny)
        lon = ds.createVariable("longitude", "f8", ("longitude",))
        lon.units, lon.standard_name = "degrees_east", "longitude"
        lon[:] = np.arange(nx) * 0.5
        v = ds.createVariable("t", "f4", ("time", "level", "latitude", "longitude"))
        v.units, v.standard_name = "K", "air_temperature"
        base = 250.0 + 30.0 * np.cos(np.radians(lat[:]))[:, None] + 2.0 * np.sin(np.radians(lon[:]))[None, :]
        lapse = 45.0 * np.log(LEVELS / 1000.0)[:, None, None]
        for k in range(nt):
            v[k] = (base[None] + lapse + k).astype("f4")
    return path


def partials(directory):
    return [p for p in os.listdir(directory) if p.startswith(".baroc-") and p.endswith(".partial")]


def has_open(pid, path):
    """Whether process `pid` holds `path` open (Linux /proc)."""
    try:
        descriptors = os.listdir(f"/proc/{pid}/fd")
    except OSError:
        return False
    for d in descriptors:
        try:
            if os.readlink(f"/proc/{pid}/fd/{d}") == str(path):
                return True
        except OSError:
            pass
    return False


def kill_while_writing(command, directory):
    """Starts `command`, waits until its temporary output appears beside the
    output path (writing has begun), kills it with SIGKILL, and returns its
    exit status."""
    process = subprocess.Popen(command, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    deadline = time.monotonic() + 120
    try:
        while not partials(directory):
            if process.poll() is not None or time.monotonic() > deadline:
                pytest.fail(f"the run ended (status {process.returncode}) before it began writing; make the output larger")
            time.sleep(0.002)
        process.send_signal(signal.SIGKILL)
        return process.wait(timeout=30)
    finally:
        if process.poll() is None:
            process.kill()


@pytest.mark.parametrize(
    "extra",
    [[], ["--shard", "2/2"], ["--each-time"]],
    ids=["run", "shard", "each-time"],
)
def test_a_run_killed_while_writing_leaves_nothing_at_the_output_path(baroc, large_case, tmp_path, extra):
    out = tmp_path / "out.nc"
    status = kill_while_writing([baroc, "run", "-e", "let warm = temperature * 1", *extra, "-o", str(out), str(large_case)], tmp_path)
    assert status == -signal.SIGKILL, "the run was killed, not finished"
    assert not out.exists()
    # A kill cannot clean up after itself: the temporary file is left under
    # its hidden name, never under the output's.
    assert partials(tmp_path)


def test_an_each_time_run_killed_while_computing_leaves_nothing(baroc, large_case, tmp_path):
    out = tmp_path / "out.nc"
    process = subprocess.Popen([baroc, "run", "-e", "let warm = temperature * 1", "--each-time", "-o", str(out), str(large_case)], stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    # Killed as soon as it has the input open (it is then reading or
    # computing its first steps), not after a fixed sleep, which a quick
    # machine outruns.
    deadline = time.monotonic() + 60
    while not has_open(process.pid, large_case):
        if process.poll() is not None or time.monotonic() > deadline:
            pytest.fail(f"the run ended (status {process.returncode}) before it opened its input")
        time.sleep(0.001)
    process.send_signal(signal.SIGKILL)
    assert process.wait(timeout=30) == -signal.SIGKILL
    assert not out.exists()


def test_a_killed_run_leaves_an_older_output_untouched(baroc, large_case, tmp_path):
    out = tmp_path / "out.nc"
    subprocess.run([baroc, "run", "-e", "let warm = temperature at 500 hPa", "-o", str(out), str(large_case)], check=True, capture_output=True)
    before = out.read_bytes()
    kill_while_writing([baroc, "run", "-e", "let warm = temperature * 1", "-o", str(out), str(large_case)], tmp_path)
    assert out.read_bytes() == before


def test_two_runs_writing_one_path_at_once_leave_one_whole_file(baroc, large_case, tmp_path):
    out = tmp_path / "out.nc"
    # Two different programs: one writes `warm` (temperature + 1 K), the
    # other `cold` (temperature - 1 K), both of every level and time.
    programs = {"warm": "let warm = temperature + 1 K", "cold": "let cold = temperature - 1 K"}
    with netCDF4.Dataset(large_case) as ds:
        temperature = ds["t"][:].astype("f4")
    for round_ in range(3):
        if out.exists():
            out.unlink()
        results = {}

        def go(name):
            results[name] = subprocess.run([baroc, "run", "-e", programs[name], "-o", str(out), str(large_case)], capture_output=True, text=True)

        threads = [threading.Thread(target=go, args=(n,)) for n in programs]
        for t in threads:
            t.start()
        for t in threads:
            t.join()
        assert all(r.returncode == 0 for r in results.values()), {n: r.stderr for n, r in results.items()}
        with netCDF4.Dataset(out) as ds:
            names = [n for n in ds.variables if n in programs]
            assert len(names) == 1, f"round {round_}: one program's file, not a mix: {names}"
            name = names[0]
            assert ds.getncattr("baroc_script") == programs[name]
            expected = temperature + (1.0 if name == "warm" else -1.0)
            np.testing.assert_array_equal(ds[name][:], expected.astype("f4"))
        assert not partials(tmp_path)


def test_an_output_written_past_the_page_cache_reads_as_an_ordinary_write(baroc, large_case, tmp_path):
    """The default write (built in memory, written with O_DIRECT where the
    file system takes it) and the ordinary write (BAROC_DIRECT_WRITE=0) give
    files netCDF4-python reads alike: same variables in the same order, same
    attributes but for the run's time in `history`, same values; and the
    file opens for appending (netCDF-C refuses netCDF-4 files that lack HDF5
    link creation order)."""
    outputs = {}
    for mode in ["1", "0"]:
        out = tmp_path / f"out-{mode}.nc"
        env = dict(os.environ, BAROC_DIRECT_WRITE=mode)
        subprocess.run([baroc, "run", "-e", "let warm = temperature at 500 hPa + 1 K", "-o", str(out), str(large_case)], check=True, capture_output=True, env=env)
        outputs[mode] = out
    with netCDF4.Dataset(outputs["1"]) as a, netCDF4.Dataset(outputs["0"]) as b:
        assert a.data_model == b.data_model == "NETCDF4"
        assert list(a.variables) == list(b.variables)
        assert {k: v for k, v in a.__dict__.items() if k != "history"} == {k: v for k, v in b.__dict__.items() if k != "history"}
        for name in a.variables:
            assert a[name].ncattrs() == b[name].ncattrs()
            np.testing.assert_array_equal(np.ma.getdata(a[name][:]), np.ma.getdata(b[name][:]))
        assert a["warm"].shape == (8, 361, 720)
    with netCDF4.Dataset(outputs["1"], "a") as ds:
        ds.comment_added = "appended later"
    with netCDF4.Dataset(outputs["1"]) as ds:
        assert ds.comment_added == "appended later"
