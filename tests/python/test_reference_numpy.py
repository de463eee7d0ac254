"""Baroc's finite differences against numpy.gradient (edge_order=2), the
reference the field guide names for the Cartesian part, on files written
with netCDF4-python."""

import netCDF4
import numpy as np

from conftest import run

A = 6_371_000.0  # Earth's mean radius, as Baroc uses (IUGG mean radius, rounded)


def write_field(path, lat, lon, values, name="f", units="m"):
    with netCDF4.Dataset(path, "w", format="NETCDF4") as ds:
        ds.createDimension("lat", len(lat))
        ds.createDimension("lon", len(lon))
        v = ds.createVariable("lat", "f8", ("lat",))
        v.units = "degrees_north"
        v[:] = lat
        v = ds.createVariable("lon", "f8", ("lon",))
        v.units = "degrees_east"
        v[:] = lon
        f = ds.createVariable(name, "f4", ("lat", "lon"))
        f.units = units
        f[:] = values


def read(path, *names):
    with netCDF4.Dataset(path) as ds:
        return [np.array(ds[n][:], dtype="f8").squeeze() for n in names]


def test_gradient_matches_numpy_on_a_non_uniform_regional_grid(baroc, tmp_path):
    # Irregular latitude spacing exercises the non-uniform three-point weights.
    lat = np.array([20.0, 21.3, 23.1, 24.0, 26.5, 27.2, 29.9, 31.0, 33.7, 35.0, 37.5, 40.1])
    lon = np.linspace(-40.0, 10.0, 26)
    la, lo = np.meshgrid(np.radians(lat), np.radians(lon), indexing="ij")
    f = 5500.0 + 80.0 * np.sin(3 * lo) * np.cos(2 * la) + 300.0 * np.sin(la)
    source = tmp_path / "field.nc"
    write_field(source, lat, lon, f.astype("f4"))
    out = tmp_path / "gradient.nc"
    run(baroc, "run", "-e", "gradient(f)", "-o", out, source)
    dx, dy = read(out, "result_eastward", "result_northward")
    f32 = f.astype("f4").astype("f8")
    ref_dy = np.gradient(f32, np.radians(lat), axis=0, edge_order=2) / A
    ref_dx = np.gradient(f32, np.radians(lon), axis=1, edge_order=2) / (A * np.cos(np.radians(lat)))[:, None]
    np.testing.assert_allclose(dy, ref_dy, rtol=2e-5, atol=1e-9)
    np.testing.assert_allclose(dx, ref_dx, rtol=2e-5, atol=1e-9)


def test_global_grid_is_periodic_across_the_seam(baroc, tmp_path):
    lat = np.linspace(-80.0, 80.0, 33)
    lon = np.arange(0.0, 360.0, 5.0)
    la, lo = np.meshgrid(np.radians(lat), np.radians(lon), indexing="ij")
    f = (np.sin(2 * lo) * np.cos(la) * 100.0).astype("f4")
    source = tmp_path / "global.nc"
    write_field(source, lat, lon, f)
    out = tmp_path / "gradient.nc"
    run(baroc, "run", "-e", "gradient(f)", "-o", out, source)
    (dx,) = read(out, "result_eastward")
    # numpy on a wrapped copy: pad one column each side, differentiate, cut.
    f64 = f.astype("f8")
    padded = np.concatenate([f64[:, -1:], f64, f64[:, :1]], axis=1)
    lon_padded = np.radians(np.concatenate([[lon[-1] - 360.0], lon, [lon[0] + 360.0]]))
    ref = np.gradient(padded, lon_padded, axis=1)[:, 1:-1] / (A * np.cos(np.radians(lat)))[:, None]
    np.testing.assert_allclose(dx, ref, rtol=2e-5, atol=1e-10)
    # The seam columns equal what the analytic derivative gives, like the interior.
    exact = 200.0 * np.cos(2 * lo) / A
    assert np.max(np.abs(dx[:, [0, -1]] - exact[:, [0, -1]])) < 0.02 * np.max(np.abs(exact))


def test_vorticity_matches_the_spherical_formula_built_from_numpy(baroc, tmp_path):
    # zeta = (1/(a cos lat)) (dv/dlon - d(u cos lat)/dlat)   (field guide)
    lat = np.linspace(25.0, 70.0, 31)
    lon = np.linspace(-60.0, 0.0, 41)
    la, lo = np.meshgrid(np.radians(lat), np.radians(lon), indexing="ij")
    u = (20.0 * np.cos(la) + 5.0 * np.sin(4 * lo)).astype("f4")
    v = (8.0 * np.sin(3 * lo) * np.cos(la)).astype("f4")
    source = tmp_path / "wind.nc"
    with netCDF4.Dataset(source, "w") as ds:
        ds.createDimension("lat", len(lat))
        ds.createDimension("lon", len(lon))
        ds.createVariable("lat", "f8", ("lat",))[:] = lat
        ds["lat"].units = "degrees_north"
        ds.createVariable("lon", "f8", ("lon",))[:] = lon
        ds["lon"].units = "degrees_east"
        for name, std, data in (("ua", "eastward_wind", u), ("va", "northward_wind", v)):
            var = ds.createVariable(name, "f4", ("lat", "lon"))
            var.units = "m s-1"
            var.standard_name = std
            var[:] = data
    out = tmp_path / "vorticity.nc"
    run(baroc, "run", "-e", "vorticity(wind)", "-o", out, source)
    (zeta,) = read(out, "result")
    cos = np.cos(np.radians(lat))[:, None]
    u64, v64 = u.astype("f8"), v.astype("f8")
    ref = (np.gradient(v64, np.radians(lon), axis=1, edge_order=2) - np.gradient(u64 * cos, np.radians(lat), axis=0, edge_order=2)) / (A * cos)
    np.testing.assert_allclose(zeta, ref, rtol=1e-4, atol=1e-10)
