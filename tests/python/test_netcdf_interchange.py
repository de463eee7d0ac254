"""What Baroc writes, read back with netCDF4-python and xarray; and files of
the layouts real sources use, written with netCDF4-python, read by Baroc.
Physics cross-checks recompute Baroc's results independently in numpy."""

import json

import netCDF4
import numpy as np
import xarray as xr

from conftest import run, table_json

RD = 8.31432 / 0.0289644  # R*/M0, U.S. Standard Atmosphere 1976 constants
G0 = 9.80665  # standard gravity (CGPM 1901)
OMEGA = 7.292115e-5  # WGS 84 / IERS
A = 6_371_000.0  # IUGG mean radius


def test_thermal_wind_output_reads_back_in_xarray(baroc, demo_case, tmp_path):
    out = tmp_path / "thermal.nc"
    run(baroc, "run", "-e", "thermal_wind(1000 hPa to 500 hPa)", "-o", out, demo_case)
    ds = xr.open_dataset(out)
    u = ds["result_eastward"]
    assert u.attrs["units"] == "m s-1"
    assert "thermal wind" in u.attrs["long_name"]
    assert u.dims == ("time", "latitude", "longitude")
    assert ds["latitude"].attrs["units"] == "degrees_north"
    # CF time decoded by xarray to the demo's first analysis time.
    assert str(ds["time"].values[0]).startswith("2026-10-14T00:00")
    assert "baroc" in ds.attrs["history"] and ds.attrs["baroc_script"] == "thermal_wind(1000 hPa to 500 hPa)"
    assert "not a warning service" in ds.attrs["comment"]
    # No standard name is invented for a diagnostic that has none.
    assert "standard_name" not in u.attrs
    assert np.isfinite(u.values).mean() > 0.99


def test_thickness_and_thermal_wind_match_an_independent_numpy_computation(baroc, demo_case, tmp_path):
    # Reference: read the demo with xarray (which masks by CF rules on its
    # own), integrate Tv = T (1 + 0.608 q) in ln p by the
    # trapezoid rule, and take the thermal wind with numpy.gradient.
    ds = xr.open_dataset(demo_case)
    t = ds["temperature"].sel(pressure=[1000.0, 925.0, 850.0, 700.0, 600.0, 500.0]).values.astype("f8")
    q = ds["specific_humidity"].sel(pressure=[1000.0, 925.0, 850.0, 700.0, 600.0, 500.0]).values.astype("f8")
    p = np.array([1000.0, 925.0, 850.0, 700.0, 600.0, 500.0]) * 100.0
    tv = t * (1.0 + 0.608 * q)
    lnp = np.log(p)
    dz = np.zeros(tv.shape[:1] + tv.shape[2:])
    for k in range(len(p) - 1):
        dz += RD / G0 * 0.5 * (tv[:, k] + tv[:, k + 1]) * (lnp[k] - lnp[k + 1])
    out = tmp_path / "layer.nc"
    script = tmp_path / "layer.baroc"
    # The reference integrates by the trapezoid, so Baroc is asked for the
    # same rule (its default is the higher-order quadratic in ln p).
    script.write_text("let dz = thickness(1000 hPa to 500 hPa) with integration trapezoid\nlet vt = thermal_wind(1000 hPa to 500 hPa) with integration trapezoid\n")
    run(baroc, "run", script, "-o", out, demo_case)
    got = xr.open_dataset(out)
    np.testing.assert_allclose(got["dz"].values, dz, rtol=0, atol=0.02)
    lat = ds["latitude"].values.astype("f8")
    lon = ds["longitude"].values.astype("f8")
    f = 2 * OMEGA * np.sin(np.radians(lat))[None, :, None]
    ddy = np.gradient(dz, np.radians(lat), axis=1, edge_order=2) / A
    ddx = np.gradient(dz, np.radians(lon), axis=2, edge_order=2) / (A * np.cos(np.radians(lat)))[None, :, None]
    np.testing.assert_allclose(got["vt_eastward"].values, -G0 / f * ddy, rtol=0, atol=0.02)
    np.testing.assert_allclose(got["vt_northward"].values, G0 / f * ddx, rtol=0, atol=0.02)


def test_demo_file_is_plain_cf(demo_case):
    # CF conventions 1.8: every coordinate labelled with standard_name and
    # axis (sections 4.1-4.4), udunits unit strings, a land-sea mask with the
    # CF standard name land_binary_mask (1 on land, 0 at sea).
    with netCDF4.Dataset(demo_case) as ds:
        for name, standard, axis in [("time", "time", "T"), ("pressure", "air_pressure", "Z"), ("latitude", "latitude", "Y"), ("longitude", "longitude", "X")]:
            assert ds[name].standard_name == standard and ds[name].axis == axis, name
        assert ds["pressure"].units == "hPa" and ds["pressure"].positive == "down"
        assert list(ds["pressure"][:3]) == [1000.0, 925.0, 850.0]
        assert ds["eastward_wind"].units == "m s-1" and ds["geopotential"].units == "m2 s-2"
        assert ds["specific_humidity"].units == "kg kg-1"
        for name in ["temperature", "eastward_wind", "northward_wind", "geopotential", "specific_humidity", "surface_pressure", "land_sea_mask"]:
            assert "**" not in ds[name].units and len(name) > 2, name
        q = ds["specific_humidity"][:]
        assert np.ma.is_masked(q) and q[:, -1].mask.all()  # not reported at 200 hPa
        assert ds["time"].units == "hours since 2026-10-14 00:00:00"
        times = netCDF4.num2date(ds["time"][:], ds["time"].units, ds["time"].calendar)
        assert str(times[0]) == "2026-10-14 00:00:00" and str(times[-1]) == "2026-10-15 00:00:00"
        mask = ds["land_sea_mask"]
        assert mask.standard_name == "land_binary_mask" and mask.dimensions == ("latitude", "longitude")
        values = mask[:]
        assert set(np.unique(values)) == {0.0, 1.0}
        # Some land and mostly sea: a basin with a coast, not a blank.
        assert 0.05 < values.mean() < 0.5


def _archive_layout_file(path):
    """The layout of a widely distributed reanalysis archive's files: short
    names (t, z, u, v, q, sp), Fortran-style unit strings (m s**-1,
    m**2 s**-2), hours since 1900, coordinates without standard_name or
    axis, levels in millibar, latitude north to south, geopotential packed
    into shorts. Values are analytic so the reading can be checked."""
    lat = np.linspace(60.0, 30.0, 13)  # north to south
    lon = np.arange(-60.0, 0.1, 5.0)
    levels = np.array([1000.0, 850.0, 700.0, 500.0, 300.0])
    la, lo = np.meshgrid(lat, lon, indexing="ij")
    shape = (2, len(levels), len(lat), len(lon))
    temperature = np.empty(shape)
    geopotential = np.empty(shape)
    for k, p in enumerate(levels):
        temperature[:, k] = 280.0 - 30.0 * np.log(1000.0 / p) - 0.4 * (la - 45.0)
        geopotential[:, k] = G0 * (100.0 + 7000.0 * np.log(1000.0 / p) + 2.0 * lo)
    with netCDF4.Dataset(path, "w", format="NETCDF3_64BIT_OFFSET") as ds:
        ds.createDimension("time", None)
        ds.createDimension("level", len(levels))
        ds.createDimension("latitude", len(lat))
        ds.createDimension("longitude", len(lon))
        v = ds.createVariable("time", "i4", ("time",))
        v.units = "hours since 1900-01-01 00:00:0.0"
        v.calendar = "gregorian"
        # 2026-10-14 00:00 and 06:00 as hours since 1900-01-01 (netCDF4.date2num).
        v[:] = netCDF4.date2num([__import__("datetime").datetime(2026, 10, 14, 0), __import__("datetime").datetime(2026, 10, 14, 6)], v.units, v.calendar)
        v = ds.createVariable("level", "i4", ("level",))
        v.units = "millibar"
        v.long_name = "pressure_level"
        v[:] = levels.astype("i4")
        v = ds.createVariable("latitude", "f4", ("latitude",))
        v.units = "degrees_north"
        v[:] = lat
        v = ds.createVariable("longitude", "f4", ("longitude",))
        v.units = "degrees_east"
        v[:] = lon
        dims = ("time", "level", "latitude", "longitude")
        var = ds.createVariable("t", "f4", dims, fill_value=-32767.0)
        var.units, var.long_name, var.standard_name = "K", "Temperature", "air_temperature"
        var[:] = temperature
        var = ds.createVariable("z", "i2", dims, fill_value=-32767)
        var.scale_factor = 2.0
        var.add_offset = 40000.0
        var.units, var.long_name, var.standard_name = "m**2 s**-2", "Geopotential", "geopotential"
        var.set_auto_maskandscale(True)
        var[:] = geopotential
        for name, standard in [("u", "eastward_wind"), ("v", "northward_wind")]:
            var = ds.createVariable(name, "f4", dims)
            var.units, var.standard_name = "m s**-1", standard
            var[:] = np.full(shape, 10.0 if name == "u" else -5.0)
        var = ds.createVariable("q", "f4", dims)
        var.units, var.standard_name = "kg kg**-1", "specific_humidity"
        var[:] = np.full(shape, 0.004)
        var = ds.createVariable("sp", "f4", ("time", "latitude", "longitude"))
        var.units, var.standard_name = "Pa", "surface_air_pressure"
        var[:] = np.full((2, len(lat), len(lon)), 101000.0)
    return temperature, geopotential


def test_the_archive_layout_still_reads(baroc, tmp_path):
    # The layout the demo file no longer uses (short names, ** unit
    # strings, hours since 1900, unlabelled coordinates, packed
    # geopotential) must still be read: values at a grid point against the
    # analytic values written (packing step 2 m2 s-2), times decoded.
    path = tmp_path / "archive-layout.nc"
    temperature, geopotential = _archive_layout_file(path)
    # 45 N is row 6 (60, 57.5, ..., 30), 20 W is column 8 (-60, -55, ...).
    rows = table_json(baroc, "temperature at 500 hPa", "45 north, 20 west", path)
    assert [r["label"][:16] for r in rows] == ["2026-10-14T00:00", "2026-10-14T06:00"]
    assert abs(rows[0]["values"][0] - temperature[0, 3, 6, 8]) < 1e-3
    rows = table_json(baroc, "geopotential at 700 hPa", "45 north, 20 west", path)
    assert abs(rows[0]["values"][0] - geopotential[0, 2, 6, 8]) <= 1.0 + 1e-6
    rows = table_json(baroc, "speed(wind at 850 hPa)", "45 north, 20 west", path)
    assert abs(rows[0]["values"][0] - np.hypot(10.0, -5.0)) < 1e-4
    # The ** spelling is understood as a unit: thickness (m) from the
    # packed geopotential, 7000 ln(1000/500) m by construction.
    rows = table_json(baroc, "thickness(1000 hPa to 500 hPa) with route geopotential", "45 north, 20 west", path)
    assert abs(rows[0]["values"][0] - 7000.0 * np.log(2.0)) < 1.0


def _layout_file(path, *, levels_hpa, level_units, level_factor, lat_south_first, lon_0_360, packed, fmt):
    lat = np.linspace(30.0, 60.0, 13)
    if not lat_south_first:
        lat = lat[::-1]
    lon = np.arange(0.0, 360.0, 15.0) if lon_0_360 else np.arange(-180.0, 180.0, 15.0)
    la, lo = np.meshgrid(lat, lon, indexing="ij")
    levels = np.array(levels_hpa, dtype="f8")
    temperature = np.empty((2, len(levels), len(lat), len(lon)))
    for k, p in enumerate(levels):
        temperature[:, k] = 288.0 - 40.0 * np.log(1000.0 / p) - 0.5 * (la - 45.0) + 3.0 * np.cos(np.radians(lo))
    with netCDF4.Dataset(path, "w", format=fmt) as ds:
        ds.createDimension("time", None)
        ds.createDimension("plev", len(levels))
        ds.createDimension("y", len(lat))
        ds.createDimension("x", len(lon))
        v = ds.createVariable("time", "f8", ("time",))
        v.units = "days since 2000-01-01"
        v.calendar = "noleap"
        v[:] = [365.0, 365.25]
        v = ds.createVariable("plev", "f8", ("plev",))
        v.units = level_units
        v.standard_name = "air_pressure"
        v[:] = levels * level_factor
        v = ds.createVariable("y", "f8", ("y",))
        v.units = "degrees_north"
        v[:] = lat
        v = ds.createVariable("x", "f8", ("x",))
        v.units = "degrees_east"
        v[:] = lon
        if packed:
            var = ds.createVariable("air", "i2", ("time", "plev", "y", "x"), fill_value=-32768)
            var.scale_factor = 0.01
            var.add_offset = 250.0
            var.set_auto_maskandscale(True)
        else:
            var = ds.createVariable("air", "f4", ("time", "plev", "y", "x"), fill_value=1e20)
        var.standard_name = "air_temperature"
        var.units = "K"
        data = np.ma.masked_array(temperature, mask=np.zeros_like(temperature, dtype=bool))
        data.mask[0, 0, 0, 0] = True  # one missing value
        var[:] = data
    return temperature


LAYOUTS = [
    dict(levels_hpa=[1000, 850, 700, 500, 300], level_units="hPa", level_factor=1.0, lat_south_first=True, lon_0_360=True, packed=False, fmt="NETCDF4"),
    dict(levels_hpa=[300, 500, 700, 850, 1000], level_units="Pa", level_factor=100.0, lat_south_first=False, lon_0_360=False, packed=True, fmt="NETCDF3_CLASSIC"),
    dict(levels_hpa=[1000, 850, 700, 500, 300], level_units="millibar", level_factor=1.0, lat_south_first=False, lon_0_360=True, packed=True, fmt="NETCDF4_CLASSIC"),
]


def test_layouts_of_real_sources_read_alike(baroc, tmp_path):
    # The same temperature written in three layouts (levels in hPa, Pa or
    # millibar in either order, latitude either way, longitude 0..360 or
    # -180..180, packed shorts or floats, NetCDF-4 or NetCDF-3) must give
    # the same values at a point, and the analytic value there.
    expected = 288.0 - 40.0 * np.log(1000.0 / 500.0) - 0.5 * (45.0 - 45.0) + 3.0 * np.cos(np.radians(-15.0))
    for k, layout in enumerate(LAYOUTS):
        path = tmp_path / f"layout-{k}.nc"
        _layout_file(path, **layout)
        rows = table_json(baroc, "temperature at 500 hPa", "45 north, 15 west", path)
        values = [r["values"][0] for r in rows]
        assert len(values) == 2, rows
        tolerance = 0.01 if layout["packed"] else 1e-3  # packing step 0.01 K
        assert abs(values[0] - expected) < tolerance, (layout, values)
        # noleap calendar: day 365 after 2000-01-01 is 2001-01-01.
        assert rows[0]["label"].startswith("2001-01-01T00:00:00"), rows[0]
        assert rows[1]["label"].startswith("2001-01-01T06:00:00"), rows[1]


def test_missing_values_stay_missing(baroc, tmp_path):
    path = tmp_path / "layout.nc"
    _layout_file(path, **LAYOUTS[1])
    out = tmp_path / "t.nc"
    run(baroc, "run", "-e", "temperature at 300 hPa", "-o", out, path)
    with netCDF4.Dataset(out) as ds:
        t = ds["result"][:]
        # LAYOUTS[1] stores 300 hPa first, latitude north first, longitude
        # from -180: the masked stored point is the first of the first level.
        assert np.ma.is_masked(t) and t.mask.sum() == 1
        assert t.mask[0, 0, 0]


def test_bad_input_is_refused_with_what_is_available(baroc, demo_case, tmp_path):
    done = run(baroc, "run", "-e", "temperatur at 500 hPa", demo_case, check=False)
    assert done.returncode != 0 and "did you mean `temperature`?" in done.stderr and "^" in done.stderr
    done = run(baroc, "run", "-e", "temperature at 1050 hPa", demo_case, check=False)
    assert done.returncode != 0 and "1050 hPa is below the lowest level of temperature (1000 hPa)" in done.stderr
    assert "the levels of temperature are 1000, 925, 850" in done.stderr
    done = run(baroc, "inspect", tmp_path / "nothing-here.nc", check=False)
    assert done.returncode != 0 and "cannot open" in done.stderr
    # Nothing is written when a run fails.
    out = tmp_path / "never.nc"
    done = run(baroc, "run", "-e", "thickness(1000 hPa to 1200 hPa)", "-o", out, demo_case, check=False)
    assert done.returncode != 0 and not out.exists()
    assert not list(tmp_path.glob("*.partial"))
