"""Hostile files and paths at the edges of the data path: every failure
exits with status 1, says in plain words what is wrong with the file or
path the user gave (golden texts below), and leaves no output behind, not
even the temporary file. Input files are written here with netCDF4-python;
damaged copies are made by the tests."""

import os
import pathlib
import shutil

import netCDF4
import numpy as np
import pytest

from conftest import run

LEVELS_HPA = [1000.0, 850.0, 500.0]
PROGRAM = "let warm = temperature at 500 hPa"


def horizontal(ds):
    """lat(lat) in degrees_north and lon(lon) in degrees_east (CF 4.1, 4.2)."""
    ds.createDimension("lat", 5)
    ds.createDimension("lon", 6)
    lat = ds.createVariable("lat", "f8", ("lat",))
    lat.units, lat.standard_name = "degrees_north", "latitude"
    lat[:] = np.linspace(40.0, 60.0, 5)
    lon = ds.createVariable("lon", "f8", ("lon",))
    lon.units, lon.standard_name = "degrees_east", "longitude"
    lon[:] = np.linspace(-30.0, 0.0, 6)


def temperature_on(ds, vertical):
    t = ds.createVariable("ta", "f4", (vertical, "lat", "lon"))
    t.units, t.standard_name = "K", "air_temperature"
    t[:] = (280.0 - 10.0 * np.arange(len(ds.dimensions[vertical])))[:, None, None] * np.ones((5, 6))


def pressure_file(path, fmt="NETCDF4", times=None):
    """Temperature on pressure levels; with `times`, a time axis of that
    many steps (hours since 2031-01-01, CF 4.4)."""
    with netCDF4.Dataset(path, "w", format=fmt) as ds:
        horizontal(ds)
        ds.createDimension("plev", len(LEVELS_HPA))
        p = ds.createVariable("plev", "f8", ("plev",))
        p.units, p.standard_name, p.positive = "hPa", "air_pressure", "down"
        p[:] = LEVELS_HPA
        if times is None:
            temperature_on(ds, "plev")
        else:
            ds.createDimension("time", times)
            t = ds.createVariable("time", "f8", ("time",))
            t.units, t.standard_name = "hours since 2031-01-01 00:00:00", "time"
            t[:] = np.arange(times) * 6.0
            v = ds.createVariable("ta", "f4", ("time", "plev", "lat", "lon"))
            v.units, v.standard_name = "K", "air_temperature"
            v[:] = 250.0
    return path


def height_file(path):
    """The vertical coordinate is `height` as CF writes height above ground
    (standard_name height, units m, positive up, no axis: CF 4.3)."""
    with netCDF4.Dataset(path, "w") as ds:
        horizontal(ds)
        ds.createDimension("height", 3)
        z = ds.createVariable("height", "f8", ("height",))
        z.units, z.positive, z.standard_name = "m", "up", "height"
        z[:] = [100.0, 500.0, 1500.0]
        temperature_on(ds, "height")
    return path


def sigma_file(path):
    """Sigma levels: CF appendix D, atmosphere_sigma_coordinate with
    formula_terms sigma, ps and ptop; a 2-D surface pressure beside."""
    with netCDF4.Dataset(path, "w") as ds:
        horizontal(ds)
        ds.createDimension("sigma", 3)
        s = ds.createVariable("sigma", "f8", ("sigma",))
        s.standard_name, s.positive, s.units = "atmosphere_sigma_coordinate", "down", "1"
        s.formula_terms = "sigma: sigma ps: ps ptop: ptop"
        s[:] = [0.95, 0.6, 0.3]
        ptop = ds.createVariable("ptop", "f8")
        ptop.units = "Pa"
        ptop.assignValue(1000.0)
        ps = ds.createVariable("ps", "f4", ("lat", "lon"))
        ps.units, ps.standard_name = "Pa", "surface_air_pressure"
        ps[:] = 100000.0
        temperature_on(ds, "sigma")
    return path


def leftovers(directory):
    """Files a failed run must not leave: outputs and temporaries."""
    return sorted(p.name for p in pathlib.Path(directory).iterdir() if p.suffix in (".nc", ".html", ".partial") and not p.name.startswith("input"))


def refused(baroc, *args, cwd=None):
    done = run(baroc, *args, check=False, cwd=cwd)
    assert done.returncode == 1, (done.returncode, done.stdout, done.stderr)
    assert "panicked" not in done.stderr
    return done.stderr


# 1. Vertical coordinates other than pressure are named as what they are.


@pytest.mark.parametrize(
    "make, expected",
    [
        (
            height_file,
            "error: {path}: the vertical coordinate `height` is height above ground, not pressure: Baroc needs pressure levels "
            "(or hybrid sigma-pressure model levels with their coefficients, standard_name atmosphere_hybrid_sigma_pressure_coordinate); variables on it: ta\n",
        ),
        (
            sigma_file,
            "error: {path}: the vertical coordinate `sigma` is on sigma levels (atmosphere_sigma_coordinate), not pressure: Baroc needs pressure levels "
            "(or hybrid sigma-pressure model levels with their coefficients, standard_name atmosphere_hybrid_sigma_pressure_coordinate); variables on it: ta\n",
        ),
    ],
    ids=["height", "sigma"],
)
def test_a_vertical_coordinate_other_than_pressure_is_named(baroc, tmp_path, make, expected):
    path = make(tmp_path / "input.nc")
    stderr = refused(baroc, "inspect", path)
    assert stderr == expected.format(path=path)
    assert "longitude" not in stderr
    out = tmp_path / "out.nc"
    assert refused(baroc, "run", "-e", PROGRAM, "-o", out, path) == expected.format(path=path)
    assert leftovers(tmp_path) == []


# 2 and 3. A run fails whole, and names the folder the user gave.


def test_a_run_whose_report_cannot_be_written_writes_nothing(baroc, tmp_path):
    data = pressure_file(tmp_path / "input.nc")
    missing = tmp_path / "missing" / "r.html"
    stderr = refused(baroc, "run", "-e", PROGRAM, "-o", tmp_path / "ok.nc", "--report", missing, data)
    assert stderr == f"error: cannot write the report {missing}: the folder {missing.parent} does not exist\n"
    assert leftovers(tmp_path) == []
    # The same run with a folder that exists writes both.
    done = run(baroc, "run", "-e", PROGRAM, "-o", tmp_path / "ok.nc", "--report", tmp_path / "r.html", data)
    assert done.stdout == f"wrote warm to {tmp_path / 'ok.nc'}\nwrote the report to {tmp_path / 'r.html'}\n"
    assert leftovers(tmp_path) == ["ok.nc", "r.html"]


def test_an_output_in_a_missing_folder_is_refused_before_computing(baroc, tmp_path):
    data = pressure_file(tmp_path / "input.nc")
    target = tmp_path / "nodir" / "x.nc"
    stderr = refused(baroc, "run", "-e", PROGRAM, "-o", target, data)
    assert stderr == f"error: cannot write the NetCDF output {target}: the folder {target.parent} does not exist\n"
    for internal in (".partial", ".baroc-", "os error"):
        assert internal not in stderr
    # Relative paths are named as given, from where the user stands.
    stderr = refused(baroc, "run", "-e", PROGRAM, "-o", "nodir/x.nc", data, cwd=tmp_path)
    assert stderr == "error: cannot write the NetCDF output nodir/x.nc: the folder nodir does not exist\n"
    # A file where a folder should be, and a folder where the file should be.
    stderr = refused(baroc, "run", "-e", PROGRAM, "-o", data / "x.nc", data)
    assert stderr == f"error: cannot write the NetCDF output {data / 'x.nc'}: {data} is not a folder\n"
    stderr = refused(baroc, "run", "-e", PROGRAM, "-o", tmp_path, data)
    assert stderr == f"error: cannot write the NetCDF output {tmp_path}: {tmp_path} is a folder; give a file name inside it\n"
    # Two outputs on one path would overwrite each other.
    stderr = refused(baroc, "run", "-e", PROGRAM, "-o", tmp_path / "same", "--report", tmp_path / "same", data)
    assert stderr == f"error: the NetCDF output and the report are both {tmp_path / 'same'}: give each its own file\n"
    assert leftovers(tmp_path) == []


@pytest.mark.skipif(os.geteuid() == 0, reason="root writes into any folder, whatever its mode")
def test_a_folder_that_is_not_writable_is_named(baroc, tmp_path):
    data = pressure_file(tmp_path / "input.nc")
    locked = tmp_path / "locked"
    locked.mkdir(mode=0o555)
    try:
        stderr = refused(baroc, "run", "-e", PROGRAM, "-o", locked / "x.nc", data)
        assert stderr == f"error: cannot write the NetCDF output {locked / 'x.nc'}: the folder {locked} is not writable\n"
        assert list(locked.iterdir()) == []
    finally:
        locked.chmod(0o755)


def test_merge_audit_and_each_time_runs_check_their_outputs_first(baroc, tmp_path):
    data = pressure_file(tmp_path / "input.nc", times=2)
    part = tmp_path / "part-1.nc"
    run(baroc, "run", "-e", PROGRAM, "--shard", "1/1", "-o", part, data)
    missing = tmp_path / "nodir"
    stderr = refused(baroc, "merge", missing / "m.nc", part)
    assert stderr == f"error: cannot write the merged file {missing / 'm.nc'}: the folder {missing} does not exist\n"
    stderr = refused(baroc, "audit", "--report", missing / "a.html", data)
    assert stderr == f"error: cannot write the audit report {missing / 'a.html'}: the folder {missing} does not exist\n"
    stderr = refused(baroc, "run", "-e", PROGRAM, "--each-time", "-o", missing / "x.nc", "--report", tmp_path / "r.html", data)
    assert stderr == f"error: cannot write the NetCDF output {missing / 'x.nc'}: the folder {missing} does not exist\n"
    stderr = refused(baroc, "run", "-e", PROGRAM, "--memory-limit", "1GiB", "-o", missing / "x.nc", data)
    assert stderr == f"error: cannot write the NetCDF output {missing / 'x.nc'}: the folder {missing} does not exist\n"
    assert leftovers(tmp_path) == ["part-1.nc"]


def test_demo_into_a_file_path_is_refused_and_leaves_nothing(baroc, tmp_path):
    blocker = tmp_path / "blocker"
    blocker.write_text("a file, not a folder")
    stderr = refused(baroc, "demo", "--output", blocker)
    assert stderr == f"error: cannot create the folder {blocker}: it is a file, not a folder\n"
    stderr = refused(baroc, "demo", "--output", tmp_path / "demo", "--time-step", "99")
    assert stderr.startswith("error: time step 99 is out of range")
    assert not (tmp_path / "demo").exists() or list((tmp_path / "demo").iterdir()) == []


# 4. Damaged and foreign files: what the user can act on, the library's
# message on a second line.


def cut(source, destination, keep):
    data = pathlib.Path(source).read_bytes()
    pathlib.Path(destination).write_bytes(data[:keep(len(data))])
    return destination


def test_a_truncated_netcdf4_file_is_called_truncated(baroc, tmp_path):
    whole = pressure_file(tmp_path / "input-whole.nc")
    size = whole.stat().st_size
    broken = cut(whole, tmp_path / "input-cut.nc", lambda n: n // 2)
    stderr = refused(baroc, "run", "-e", PROGRAM, "-o", tmp_path / "out.nc", broken)
    # The HDF5 superblock's end-of-file address is the whole file's size
    # (HDF5 file format specification, superblock; netCDF-C writes no user
    # block, so the base address is 0).
    assert stderr.splitlines()[0] == (
        f"error: cannot open {broken}: the file looks truncated ({size // 2} bytes, but its NetCDF-4/HDF5 header says it holds {size}; "
        "a NetCDF-4/HDF5 file cannot be read past its end): copy or download it again"
    )
    assert stderr.splitlines()[1].startswith("  (the netCDF library said: netcdf error(")
    assert leftovers(tmp_path) == []


@pytest.mark.parametrize("fmt", ["NETCDF3_CLASSIC", "NETCDF3_64BIT_OFFSET", "NETCDF3_64BIT_DATA"])
def test_a_truncated_classic_file_is_refused_not_read_as_zeros(baroc, tmp_path, fmt):
    whole = pressure_file(tmp_path / "input-whole.nc", fmt=fmt, times=3)
    size = whole.stat().st_size
    # The whole file is read as it is (the header's extent is the size).
    run(baroc, "inspect", whole)
    broken = cut(whole, tmp_path / "input-cut.nc", lambda n: n - 100)
    stderr = refused(baroc, "run", "-e", PROGRAM, "-o", tmp_path / "out.nc", broken)
    assert stderr == (
        f"error: cannot open {broken}: the file looks truncated ({size - 100} bytes, but its NetCDF classic header says it holds {size}; "
        "Baroc will not read the missing part as zeros): copy or download it again\n"
    )
    assert leftovers(tmp_path) == []


def test_garbage_after_a_classic_header_start_is_located(baroc, tmp_path):
    whole = pressure_file(tmp_path / "input-whole.nc", fmt="NETCDF3_CLASSIC")
    head = whole.read_bytes()[:44]
    broken = tmp_path / "input-garbage.nc"
    # After the dimension list's first name, bytes that are no header.
    broken.write_bytes(head + bytes(range(200, 256)) * 40)
    stderr = refused(baroc, "inspect", broken)
    first, second = stderr.splitlines()
    assert first.startswith(f"error: cannot open {broken}: the file starts as NetCDF classic, but its header is damaged at byte ")
    assert second.startswith("  (the netCDF library said: netcdf error(")


@pytest.mark.parametrize(
    "content, explanation",
    [
        (b"%PDF-1.4\n%\xe2\xe3\xcf\xd3\n", "this is not a NetCDF or GRIB2 file: it looks like a PDF document (it starts with `%PDF-1.4\\x0A%\\xE2\\xE3\\xCF\\xD3\\x0A`)"),
        (b"\x1f\x8b\x08\x00\x00\x00\x00\x00\x00\x03", "this is not a NetCDF or GRIB2 file: it looks like a gzip-compressed file: decompress it first (gunzip) (it starts with `\\x1F\\x8B\\x08\\x00\\x00\\x00\\x00\\x00\\x00\\x03`)"),
        (b"netcdf case {\ndimensions:\n", "this is not a NetCDF or GRIB2 file: it looks like NetCDF in text form (CDL): make a binary NetCDF file of it with ncgen (it starts with `netcdf case {\\x0Adi`\u2026)"),
        (b"temperature,pressure\n280,1000\n", "this is not a NetCDF or GRIB2 file (it starts with `temperature,pres`\u2026)"),
        (b"", "the file is empty (0 bytes)"),
    ],
    ids=["pdf", "gzip", "cdl", "csv", "empty"],
)
def test_a_foreign_file_is_named_by_its_first_bytes(baroc, tmp_path, content, explanation):
    path = tmp_path / "input.nc"
    path.write_bytes(content)
    stderr = refused(baroc, "run", "-e", PROGRAM, "-o", tmp_path / "out.nc", path)
    first, second = stderr.splitlines()
    assert first == f"error: cannot open {path}: {explanation}"
    assert second.startswith("  (the netCDF library said: netcdf error(")
    assert leftovers(tmp_path) == []


def test_a_missing_file_and_a_folder_are_named(baroc, tmp_path):
    assert refused(baroc, "inspect", tmp_path / "nothing.nc") == f"error: cannot open {tmp_path / 'nothing.nc'}: there is no such file\n"
    assert refused(baroc, "inspect", tmp_path) == f"error: cannot open {tmp_path}: it is a folder, not a file\n"


# 5. An error on a very long line shows a window of it.


def test_an_error_on_a_very_long_line_is_shown_as_a_window(baroc, tmp_path):
    data = pressure_file(tmp_path / "input.nc")
    terms = ["temperature"] * 150
    terms[120] = "tempreture"
    program = "let total = " + " + ".join(terms)
    stderr = refused(baroc, "run", "-e", program, "-o", tmp_path / "out.nc", data)
    column = program.index("tempreture") + 1
    lines = stderr.splitlines()
    assert lines[0] == "error: unknown name `tempreture`"
    assert lines[1] == f" --> line 1, column {column}"
    assert max(len(line) for line in lines[:5]) <= 120, stderr
    source, carets = lines[3], lines[4]
    assert source.startswith("1 | \u2026") and source.endswith("\u2026")
    start = carets.index("^")
    assert source[start:start + len("tempreture")] == "tempreture"
    assert carets[start:].startswith("^" * len("tempreture") + " ")
    assert leftovers(tmp_path) == []


# 6. Wording.


def test_speed_of_a_thermal_wind_is_named_after_the_vector(baroc, demo_case):
    done = run(baroc, "run", "-e", "speed(thermal_wind(1000 hPa to 500 hPa))", demo_case)
    assert "thermal_wind_1000_500hPa_speed" in done.stdout, done.stdout
    assert "eastward" not in done.stdout.split("\n")[0]
    done = run(baroc, "run", "-e", "direction(thermal_wind(1000 hPa to 500 hPa))", demo_case)
    assert "thermal_wind_1000_500hPa_direction" in done.stdout, done.stdout


def test_inspect_counts_one_step_and_leaves_no_double_space(baroc, tmp_path):
    path = pressure_file(tmp_path / "input.nc", times=1)
    described = run(baroc, "inspect", path).stdout
    assert "times: 1 step, 2031-01-01T00:00:00 to 2031-01-01T00:00:00" in described, described
    assert "  ta [temperature]: (K); time 1, pressure 3, latitude 5, longitude 6" in described, described
    assert ":  (" not in described
