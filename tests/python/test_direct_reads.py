"""Reads of plainly stored variables bypass netCDF-C (src/io/direct_read.rs):
the values Baroc writes out must be the ones netCDF4-python reads from the
input, bit for bit, for whole variables, levels apart, a later time and
boxes; and the same run with BAROC_DIRECT_READ=0 (every read through
netCDF-C) must write the same values. The input holds one field stored
three ways with netCDF4-python: contiguous little-endian float32 (read
directly), deflate-compressed (chunked) and big-endian (both read through
netCDF-C), with missing values marked by _FillValue."""

import os
import subprocess

import netCDF4
import numpy as np
import pytest

LEVELS = np.array([1000, 850, 700, 500, 300, 200], "f8")
FILL = np.float32(1.0e20)


@pytest.fixture(scope="module")
def case(tmp_path_factory):
    path = tmp_path_factory.mktemp("direct") / "three-ways.nc"
    nt, ny, nx = 2, 91, 180
    with netCDF4.Dataset(path, "w", format="NETCDF4") as ds:
        ds.createDimension("time", nt)
        ds.createDimension("level", len(LEVELS))
        ds.createDimension("latitude", ny)
        ds.createDimension("longitude", nx)
        t = ds.createVariable("time", "f8", ("time",))
        t.units, t.calendar, t.standard_name = "hours since 2031-03-01 00:00:00", "standard", "time"
        t[:] = [0.0, 6.0]
        level = ds.createVariable("level", "f8", ("level",))
        level.units, level.standard_name, level.positive = "hPa", "air_pressure", "down"
        level[:] = LEVELS
        lat = ds.createVariable("latitude", "f8", ("latitude",))
        lat.units, lat.standard_name = "degrees_north", "latitude"
        lat[:] = np.linspace(90, -90, ny)
        lon = ds.createVariable("longitude", "f8", ("longitude",))
        lon.units, lon.standard_name = "degrees_east", "longitude"
        lon[:] = np.arange(nx) * 2.0
        rng = np.random.default_rng(7)
        values = (250.0 + 40.0 * rng.random((nt, len(LEVELS), ny, nx))).astype("f4")
        values[rng.random(values.shape) < 0.01] = FILL
        for name, dtype, options in [("plain", "<f4", {}), ("compressed", "<f4", {"zlib": True, "complevel": 4}), ("big_endian", ">f4", {"endian": "big"})]:
            v = ds.createVariable(name, dtype, ("time", "level", "latitude", "longitude"), fill_value=FILL, **options)
            v.units, v.standard_name = "K", "air_temperature"
            v[:] = values
    with netCDF4.Dataset(path) as ds:
        assert ds["plain"].chunking() == "contiguous" and ds["plain"].endian() == "little"
        assert ds["compressed"].chunking() != "contiguous"
        assert ds["big_endian"].endian() == "big"
    return path


SELECTIONS = [
    # (program text for variable NAME, numpy selection of [time, level, lat, lon])
    ("NAME", np.s_[:, :, :, :]),
    ("NAME at 500 hPa", np.s_[:, 3:4, :, :]),
    ("NAME in box(60 south to 60 north, 0 east to 358 east)", np.s_[:, :, 15:76, :]),
    ("NAME at 850 hPa in box(20 north to 50 north, 0 east to 170 east)", np.s_[:, 1:2, 20:36, 0:86]),
]


def run(baroc, tmp_path, program, source, environment=None):
    script = tmp_path / "select.baroc"
    script.write_text(program)
    out = tmp_path / "out.nc"
    if out.exists():
        out.unlink()
    env = {**os.environ, "BAROC_TIMINGS": "1", **(environment or {})}
    done = subprocess.run([baroc, "run", str(script), "-o", str(out), str(source)], capture_output=True, text=True, env=env, timeout=120)
    assert done.returncode == 0, done.stderr
    with netCDF4.Dataset(out) as ds:
        ds.set_auto_mask(False)
        data = ds["x"][:]
        fill = ds["x"].getncattr("_FillValue")
    data = np.where(data == fill, np.nan, data).astype("f4")
    direct = [line for line in done.stderr.splitlines() if "in parallel without netCDF-C" in line]
    return data, direct[0] if direct else ""


@pytest.mark.parametrize("name", ["plain", "compressed", "big_endian"])
@pytest.mark.parametrize("program,index", SELECTIONS)
def test_values_are_netcdf4_python_values(baroc, case, tmp_path, name, program, index):
    with netCDF4.Dataset(case) as ds:
        expected = ds[name][:].filled(np.nan)[index].astype("f4")
    text = "output x = " + program.replace("NAME", name) + "\n"
    got, timings = run(baroc, tmp_path, text, case)
    got = got.reshape(expected.shape)
    assert np.array_equal(got.view("u4"), expected.view("u4")) or np.array_equal(got, expected, equal_nan=True), f"{name}: {text}"
    # The path taken: direct for the plain variable only.
    count = int(timings.split(" in parallel without netCDF-C")[0].rsplit(" ", 1)[-1])
    assert (count > 0) == (name == "plain"), timings
    # And through netCDF-C: the same values.
    through, timings = run(baroc, tmp_path, text, case, {"BAROC_DIRECT_READ": "0"})
    assert " 0 in parallel without netCDF-C" in timings
    assert np.array_equal(through.reshape(expected.shape), got, equal_nan=True)
