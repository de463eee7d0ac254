"""Data on hybrid sigma-pressure model levels, read through `baroc run`:
a CF NetCDF file written with netCDF4-python (formula_terms a, b, ps, p0)
and a GRIB2 file written with the ecCodes Python bindings (fixed surface
105 with the pv coefficients), compared with numpy computations of the same
formulas: pressure on the levels (CF conventions appendix D; for GRIB2 the
half-level A and B, the full level their mean), ln-p interpolation, the
exact hypsometric heights of an isothermal atmosphere (field guide), NaN
below ground, the standard-lapse-rate option, and coefficients that do not
match the levels."""

import re

import numpy as np
import netCDF4
import eccodes as ec

from conftest import run

RD = 8.31432 / 0.0289644  # R*/M0, U.S. Standard Atmosphere 1976 constants
G0 = 9.80665  # standard gravity (CGPM 1901)
T0 = 250.0  # isothermal atmosphere (K)
P_SEA = 101_325.0  # sea-level pressure of the invented case (Pa)
GAMMA = 0.0065  # tropospheric lapse rate, U.S. Standard Atmosphere 1976

LATS = np.array([40.0, 42.5, 45.0, 47.5, 50.0])
LONS = np.array([0.0, 2.5, 5.0, 7.5, 10.0, 12.5])
LEVELS = 30


def surface():
    """Surface height (m): sea in the west, a plateau rising to 2.5 km in
    the east; surface pressure of the isothermal atmosphere there
    (hypsometric equation, field guide): ps = P_SEA exp(-g0 zs / (Rd T0))."""
    zs = np.zeros((LATS.size, LONS.size))
    zs[:, 3:] = np.array([800.0, 1800.0, 2500.0])
    ps = P_SEA * np.exp(-G0 * zs / (RD * T0))
    return zs, ps


def coefficients():
    """a (dimensionless, with p0 = 1000 hPa) and b of the model levels, top
    first; the lowest level is the surface itself (a 0, b 1)."""
    s = np.linspace(0.0, 1.0, LEVELS)
    b = s**2
    a = 0.05 * (1.0 - s) + 0.05 * s * (1.0 - s)
    a[-1], b[-1] = 0.0, 1.0
    return a, b


def u_of(p):
    """A wind linear in ln p: ln-p interpolation reproduces it exactly, at
    the pressures the coefficients give."""
    return 5.0 + 8.0 * np.log(100_000.0 / p)


def write_cf(path, b_count=LEVELS):
    zs, ps = surface()
    a, b = coefficients()
    p0 = 100_000.0
    p = a[:, None, None] * p0 + b[:, None, None] * ps[None]  # CF appendix D
    with netCDF4.Dataset(path, "w") as ds:
        ds.createDimension("time", 1)
        ds.createDimension("lev", LEVELS)
        ds.createDimension("nb", b_count)
        ds.createDimension("lat", LATS.size)
        ds.createDimension("lon", LONS.size)
        t = ds.createVariable("time", "f8", ("time",))
        t.units = "hours since 2031-03-02 00:00:00"
        t[:] = [0.0]
        lev = ds.createVariable("lev", "f8", ("lev",))
        lev.standard_name = "atmosphere_hybrid_sigma_pressure_coordinate"
        lev.formula_terms = "a: hyam b: hybm ps: ps p0: p0"
        lev.positive = "down"
        lev[:] = a + b
        v = ds.createVariable("hyam", "f8", ("lev",))
        v[:] = a
        v = ds.createVariable("hybm", "f8", ("nb",))
        v[:] = b[:b_count]
        v = ds.createVariable("p0", "f8", ())
        v.units = "Pa"
        v.assignValue(p0)
        v = ds.createVariable("lat", "f8", ("lat",))
        v.units = "degrees_north"
        v[:] = LATS
        v = ds.createVariable("lon", "f8", ("lon",))
        v.units = "degrees_east"
        v[:] = LONS
        v = ds.createVariable("ps", "f4", ("time", "lat", "lon"))
        v.standard_name = "surface_air_pressure"
        v.units = "Pa"
        v[0] = ps
        v = ds.createVariable("phis", "f4", ("lat", "lon"))
        v.standard_name = "surface_geopotential"
        v.units = "m2 s-2"
        v[:] = G0 * zs
        v = ds.createVariable("ta", "f4", ("time", "lev", "lat", "lon"))
        v.standard_name = "air_temperature"
        v.units = "K"
        v[0] = np.full(p.shape, T0)
        for name, standard_name, values in (("ua", "eastward_wind", u_of(p)), ("va", "northward_wind", 0.5 * u_of(p))):
            v = ds.createVariable(name, "f4", ("time", "lev", "lat", "lon"))
            v.standard_name = standard_name
            v.units = "m s-1"
            v[0] = values
    return zs, ps, p


def read_result(path, names):
    with netCDF4.Dataset(path) as ds:
        return {n: np.ma.filled(ds[n][:].astype("f8"), np.nan).reshape(LATS.size, LONS.size) for n in names}


def run_script(baroc, tmp_path, data, lines, *flags):
    script = tmp_path / "model.baroc"
    script.write_text("".join(f"let {name} = {expression}\n" for name, expression in lines.items()))
    out = tmp_path / "model-result.nc"
    run(baroc, "run", script, "-o", out, *flags, data)
    return read_result(out, lines)


# What the GRIB2 isothermal cases ask for: the lowest full level lies above
# the surface (the mean of the last two half levels), so the thickness
# starts at 950 hPa.
ISOTHERMAL_GRIB2_EXPRESSIONS = {
    "z500": "geopotential at 500 hPa",
    "thick": "thickness(950 hPa to 500 hPa) with route geopotential",
    "u850": "eastward_wind at 850 hPa",
}


def check_isothermal_case(got, zs, ps, p_lowest, bottom=100_000.0):
    """The checks shared by the NetCDF and GRIB2 files (`thick` is the
    thickness from `bottom` to 500 hPa)."""
    h = RD * T0 / G0
    # Exact hypsometric heights of the isothermal atmosphere (field guide):
    # Z(500 hPa) = Rd T0 / g0 ln(P_SEA / 500 hPa) everywhere (above ground).
    z500 = got["z500"] / G0
    np.testing.assert_allclose(z500, h * np.log(P_SEA / 50_000.0), atol=0.5)
    # Thickness bottom to 500 hPa = Rd T0 / g0 ln(bottom / 500 hPa) (ln 2
    # from 1000 hPa) where the bottom is above the lowest model level; NaN
    # elsewhere (never extrapolated silently).
    above = p_lowest >= bottom
    assert above.any() and (~above).any()
    np.testing.assert_allclose(got["thick"][above], h * np.log(bottom / 50_000.0), atol=0.5)
    assert np.isnan(got["thick"][~above]).all()
    # ln-p interpolation of a wind linear in ln p, at the pressures the
    # coefficients give: exact where 850 hPa is above the lowest level.
    inside = p_lowest >= 85_000.0
    np.testing.assert_allclose(got["u850"][inside], u_of(85_000.0), atol=2e-3)
    assert np.isnan(got["u850"][~inside]).all(), "below ground must be missing"
    assert (~inside).any()


def test_cf_hybrid_file_through_the_language(baroc, tmp_path):
    path = tmp_path / "hybrid.nc"
    zs, ps, p = write_cf(path)
    got = run_script(
        baroc,
        tmp_path,
        path,
        {
            "z500": "geopotential at 500 hPa",
            "thick": "thickness(1000 hPa to 500 hPa) with route geopotential",
            "u850": "eastward_wind at 850 hPa",
            "t_any": "temperature at 640 hPa",
        },
    )
    check_isothermal_case(got, zs, ps, p[-1])
    # A pressure outside the standard set is interpolated too.
    np.testing.assert_allclose(got["t_any"], T0, atol=1e-3)
    # What the data describe: variables on pressure levels, and the
    # geopotential computed by the hydrostatic integral.
    described = run(baroc, "inspect", path).stdout
    assert "hydrostatic_geopotential [geopotential]" in described, described
    assert re.search(r"^  ta \[temperature\].*pressure \d+", described, re.M), described


def test_cf_hybrid_lapse_rate_option_extrapolates_and_is_recorded(baroc, tmp_path):
    path = tmp_path / "hybrid.nc"
    zs, ps, p = write_cf(path)
    script = tmp_path / "lapse.baroc"
    script.write_text("let t900 = temperature at 900 hPa\n")
    out = tmp_path / "lapse.nc"
    run(baroc, "run", script, "-o", out, "--below-ground", "standard-lapse-rate", path)
    with netCDF4.Dataset(out) as ds:
        t900 = np.ma.filled(ds["t900"][:].astype("f8"), np.nan).reshape(LATS.size, LONS.size)
        recorded = " ".join(str(ds.getncattr(k)) for k in ds.ncattrs()) + " ".join(
            str(ds["t900"].getncattr(k)) for k in ds["t900"].ncattrs()
        )
    # Below the lowest level: T = T_L (p / p_L)^(Rd gamma / g0) (U.S.
    # Standard Atmosphere 1976 lapse rate); above it: T0.
    p_lowest = p[-1]
    want = np.where(p_lowest >= 90_000.0, T0, T0 * (90_000.0 / p_lowest) ** (RD * GAMMA / G0))
    np.testing.assert_allclose(t900, want, atol=2e-3)
    assert "standard lapse rate" in recorded, recorded


def test_cf_coefficients_not_matching_the_levels_name_the_file(baroc, tmp_path):
    path = tmp_path / "bad-hybrid.nc"
    write_cf(path, b_count=LEVELS - 2)
    done = run(baroc, "run", "-e", "let x = temperature at 500 hPa", "-o", tmp_path / "x.nc", path, check=False)
    assert done.returncode != 0 and "panicked" not in done.stderr
    assert "bad-hybrid.nc" in done.stderr and "28" in done.stderr and "30" in done.stderr, done.stderr


def grib_message(values, *, short_name, surface_type, level=0, pv=None):
    h = ec.codes_grib_new_from_samples("regular_ll_pl_grib2")
    keys = {
        "Ni": LONS.size,
        "Nj": LATS.size,
        "iScansNegatively": 0,
        "jScansPositively": 1,
        "latitudeOfFirstGridPointInDegrees": float(LATS[0]),
        "latitudeOfLastGridPointInDegrees": float(LATS[-1]),
        "longitudeOfFirstGridPointInDegrees": float(LONS[0]),
        "longitudeOfLastGridPointInDegrees": float(LONS[-1]),
        "iDirectionIncrementInDegrees": 2.5,
        "jDirectionIncrementInDegrees": 2.5,
        "dataDate": 20310302,
        "dataTime": 0,
        "shortName": short_name,
        "typeOfFirstFixedSurface": surface_type,
        "level": level,
    }
    for key, value in keys.items():
        ec.codes_set(h, key, value)
    if pv is not None:
        ec.codes_set(h, "PVPresent", 1)
        ec.codes_set_array(h, "pv", list(pv))
    ec.codes_set(h, "bitsPerValue", 24)
    ec.codes_set_values(h, np.asarray(values, dtype="f8").ravel())
    return h


def grib_half_levels():
    """A and B of LEVELS + 1 half levels, top first (A in Pa)."""
    s = np.linspace(0.0, 1.0, LEVELS + 1)
    b = s**2
    a = 5000.0 * (1.0 - s) + 5000.0 * s * (1.0 - s)
    a[-1], b[-1] = 0.0, 1.0
    return a, b


def write_grib(path, pv=None, levels=range(1, LEVELS + 1)):
    zs, ps = surface()
    a, b = grib_half_levels()
    if pv is None:
        pv = np.concatenate([a, b])
    handles = []
    full = {}
    for n in levels:
        # Full level n between half levels n-1 and n: the mean of their
        # pressures (ECMWF IFS documentation, Part III, section 2.2).
        p = 0.5 * (a[n - 1] + a[n]) + 0.5 * (b[n - 1] + b[n]) * ps
        full[n] = p
        handles.append(grib_message(np.full(ps.shape, T0), short_name="t", surface_type=105, level=n, pv=pv))
        handles.append(grib_message(u_of(p), short_name="u", surface_type=105, level=n, pv=pv))
        handles.append(grib_message(0.5 * u_of(p), short_name="v", surface_type=105, level=n, pv=pv))
    handles.append(grib_message(ps, short_name="sp", surface_type=1))
    handles.append(grib_message(G0 * zs, short_name="z", surface_type=1))
    with open(path, "wb") as f:
        for h in handles:
            ec.codes_write(h, f)
            ec.codes_release(h)
    return zs, ps, full


def test_grib2_hybrid_file_through_the_language(baroc, tmp_path):
    path = tmp_path / "hybrid.grib2"
    zs, ps, full = write_grib(path)
    # ecCodes reads back what was written: hybrid levels with pv.
    with open(path, "rb") as f:
        h = ec.codes_grib_new_from_file(f)
        assert ec.codes_get_long(h, "typeOfFirstFixedSurface") == 105 and ec.codes_get_long(h, "PVPresent") == 1
        assert ec.codes_get_size(h, "pv") == 2 * (LEVELS + 1)
        ec.codes_release(h)
    got = run_script(
        baroc,
        tmp_path,
        path,
        ISOTHERMAL_GRIB2_EXPRESSIONS,
    )
    # The lowest full level lies above the surface (the mean of the last
    # two half levels), so 1000 hPa is nowhere in range: 950 hPa is.
    check_isothermal_case(got, zs, ps, full[LEVELS], bottom=95_000.0)


def test_grib2_coefficients_not_matching_the_levels_name_the_file(baroc, tmp_path):
    path = tmp_path / "bad-hybrid.grib2"
    a, b = grib_half_levels()
    # Coefficients of 10 half levels for a file with model levels up to 30.
    write_grib(path, pv=np.concatenate([a[:10], b[:10]]))
    done = run(baroc, "run", "-e", "let x = temperature at 500 hPa", "-o", tmp_path / "x.nc", path, check=False)
    assert done.returncode != 0 and "panicked" not in done.stderr
    assert "bad-hybrid.grib2" in done.stderr and "model levels 1 to 9" in done.stderr, done.stderr


def test_grib2_without_surface_geopotential_says_what_is_missing(baroc, tmp_path):
    path = tmp_path / "no-orography.grib2"
    zs, ps = surface()
    a, b = grib_half_levels()
    pv = np.concatenate([a, b])
    handles = [grib_message(np.full(ps.shape, T0), short_name="t", surface_type=105, level=n, pv=pv) for n in range(1, LEVELS + 1)]
    handles.append(grib_message(ps, short_name="sp", surface_type=1))
    with open(path, "wb") as f:
        for h in handles:
            ec.codes_write(h, f)
            ec.codes_release(h)
    done = run(baroc, "run", "-e", "let x = geopotential at 500 hPa", "-o", tmp_path / "x.nc", path, check=False)
    assert done.returncode != 0 and "panicked" not in done.stderr
    assert "surface_geopotential" in done.stderr and "no-orography.grib2" in done.stderr, done.stderr


def write_grib_with_log_surface_pressure(path, surface_type):
    """The hybrid file of `write_grib`, its surface pressure given only as
    its natural logarithm, as ECMWF writes it: shortName lnsp (WMO code
    table 4.2: discipline 0, category 3, number 25, "natural logarithm of
    pressure in Pa") on hybrid level 1 (or on the ground)."""
    zs, ps = surface()
    a, b = grib_half_levels()
    pv = np.concatenate([a, b])
    handles = []
    full = {}
    for n in range(1, LEVELS + 1):
        p = 0.5 * (a[n - 1] + a[n]) + 0.5 * (b[n - 1] + b[n]) * ps
        full[n] = p
        handles.append(grib_message(np.full(ps.shape, T0), short_name="t", surface_type=105, level=n, pv=pv))
        handles.append(grib_message(u_of(p), short_name="u", surface_type=105, level=n, pv=pv))
        handles.append(grib_message(0.5 * u_of(p), short_name="v", surface_type=105, level=n, pv=pv))
    on_level_one = surface_type == 105
    handles.append(
        grib_message(np.log(ps), short_name="lnsp", surface_type=surface_type, level=1 if on_level_one else 0, pv=pv if on_level_one else None)
    )
    handles.append(grib_message(G0 * zs, short_name="z", surface_type=1))
    with open(path, "wb") as f:
        for h in handles:
            ec.codes_write(h, f)
            ec.codes_release(h)
    return zs, ps, full


def test_grib2_log_of_surface_pressure_serves_as_surface_pressure(baroc, tmp_path):
    for surface_type in (105, 1):
        path = tmp_path / f"lnsp-{surface_type}.grib2"
        zs, ps, full = write_grib_with_log_surface_pressure(path, surface_type)
        # ecCodes itself files the field under code table 4.2 (0, 3, 25).
        with open(path, "rb") as f:
            while True:
                h = ec.codes_grib_new_from_file(f)
                if h is None:
                    raise AssertionError("no lnsp message")
                parameter = (ec.codes_get_long(h, "discipline"), ec.codes_get_long(h, "parameterCategory"), ec.codes_get_long(h, "parameterNumber"))
                found = parameter == (0, 3, 25)
                if found:
                    assert ec.codes_get_long(h, "typeOfFirstFixedSurface") == surface_type
                    if surface_type == 105:
                        # ecCodes names it lnsp on model level 1.
                        assert ec.codes_get(h, "shortName") == "lnsp" and ec.codes_get_long(h, "level") == 1
                ec.codes_release(h)
                if found:
                    break
        got = run_script(
            baroc,
            tmp_path,
            path,
            ISOTHERMAL_GRIB2_EXPRESSIONS,
        )
        # ps = exp(lnsp): the same isothermal checks as with sp itself.
        check_isothermal_case(got, zs, ps, full[LEVELS], bottom=95_000.0)
        described = run(baroc, "inspect", path).stdout
        assert "lnsp" in described and "u_hybrid" in described, described


def lapse_rate_script(tmp_path, setting):
    script = tmp_path / "setting.baroc"
    script.write_text(f"{setting}let t900 = temperature at 900 hPa\n")
    return script


def read_t900(out):
    with netCDF4.Dataset(out) as ds:
        t900 = np.ma.filled(ds["t900"][:].astype("f8"), np.nan).reshape(LATS.size, LONS.size)
        # The run's provenance records the choice, as for --below-ground.
        recorded = str(ds.getncattr("model_levels_to_pressure"))
    return t900, recorded


def test_below_ground_setting_in_the_program_agrees_with_the_command_line_option(baroc, tmp_path):
    path = tmp_path / "hybrid.nc"
    zs, ps, p = write_cf(path)
    p_lowest = p[-1]
    # Below the lowest level: T = T_L (p / p_L)^(Rd gamma / g0) (U.S.
    # Standard Atmosphere 1976 lapse rate); above it: T0.
    want = np.where(p_lowest >= 90_000.0, T0, T0 * (90_000.0 / p_lowest) ** (RD * GAMMA / G0))
    assert (p_lowest < 90_000.0).any()
    # The program's own setting, as a recipe or notebook writes it.
    script = lapse_rate_script(tmp_path, "setting below_ground standard_lapse_rate\n")
    out = tmp_path / "setting.nc"
    run(baroc, "run", script, "-o", out, path)
    t900, recorded = read_t900(out)
    np.testing.assert_allclose(t900, want, atol=2e-3)
    assert "standard lapse rate" in recorded, recorded
    # The same choice given both ways is accepted.
    out_both = tmp_path / "both.nc"
    run(baroc, "run", script, "-o", out_both, "--below-ground", "standard-lapse-rate", path)
    np.testing.assert_allclose(read_t900(out_both)[0], want, atol=2e-3)
    # Opposite choices are an error at the setting, naming both.
    done = run(baroc, "run", script, "-o", tmp_path / "conflict.nc", "--below-ground", "missing", path, check=False)
    assert done.returncode != 0 and "panicked" not in done.stderr
    assert "below_ground standard_lapse_rate" in done.stderr and "--below-ground missing" in done.stderr, done.stderr
    assert "^" in done.stderr, done.stderr
    assert not (tmp_path / "conflict.nc").exists()
    # Without any choice, below ground stays missing.
    plain = lapse_rate_script(tmp_path, "")
    out_plain = tmp_path / "plain.nc"
    run(baroc, "run", plain, "-o", out_plain, path)
    t900_plain, recorded_plain = read_t900(out_plain)
    assert np.isnan(t900_plain[p_lowest < 90_000.0]).all()
    assert "missing" in recorded_plain, recorded_plain
    # A mistyped choice: the caret and the valid choices.
    bad = lapse_rate_script(tmp_path, "setting below_ground extrapolate\n")
    done = run(baroc, "run", bad, "-o", tmp_path / "bad.nc", path, check=False)
    assert done.returncode != 0 and "panicked" not in done.stderr
    assert "`missing` or `standard_lapse_rate`" in done.stderr and "^^^^^^^^^^^" in done.stderr, done.stderr


def test_below_ground_setting_after_open_in_a_notebook_style_program(baroc, tmp_path):
    # A notebook opens its data itself; the setting may come after `open`
    # and applies to the dataset already open (it is read again).
    path = tmp_path / "hybrid.nc"
    zs, ps, p = write_cf(path)
    program = f'open "{path}"\nsetting below_ground standard_lapse_rate\nlet t900 = temperature at 900 hPa\n'
    out = tmp_path / "notebook.nc"
    run(baroc, "run", "-e", program, "-o", out)
    t900, recorded = read_t900(out)
    assert "standard lapse rate" in recorded, recorded
    p_lowest = p[-1]
    want = np.where(p_lowest >= 90_000.0, T0, T0 * (90_000.0 / p_lowest) ** (RD * GAMMA / G0))
    np.testing.assert_allclose(t900, want, atol=2e-3)


def test_cf_log_of_surface_pressure_serves_when_ps_is_absent(baroc, tmp_path):
    # The CF file of `write_cf`, its surface pressure replaced by the
    # natural logarithm (of the pressure in Pa) under the name ECMWF-style
    # files give it, `lnsp`: CF has no standard name for it, so the
    # formula_terms still name `ps`, which is absent.
    path = tmp_path / "hybrid-lnsp.nc"
    zs, ps, p = write_cf(path)
    with netCDF4.Dataset(path, "a") as ds:
        ds.renameVariable("ps", "lnsp")
        v = ds["lnsp"]
        v.delncattr("standard_name")
        v.units = "1"
        v.long_name = "logarithm of surface pressure"
        v[0] = np.log(ps)
    got = run_script(
        baroc,
        tmp_path,
        path,
        {
            "z500": "geopotential at 500 hPa",
            "thick": "thickness(1000 hPa to 500 hPa) with route geopotential",
            "u850": "eastward_wind at 850 hPa",
        },
    )
    # ps = exp(lnsp): the same checks as with ps itself (f4 storage of
    # ln ps, about 11.5, keeps ps to some 0.01 %).
    check_isothermal_case(got, zs, ps, p[-1])
