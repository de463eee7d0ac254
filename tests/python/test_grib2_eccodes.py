"""GRIB2 input checked against the ecCodes Python bindings (the reference
decoder): files written by ecCodes from its own samples, in several
packings, read by Baroc (`baroc run` writing NetCDF, read back with
netCDF4) and compared value by value and message by message; files written
by Baroc's own writer read by ecCodes; bad input refused with a clear
message; and an outside file run through a recipe unchanged."""

import datetime as dt
import re
import subprocess
from pathlib import Path

import eccodes as ec
import netCDF4
import numpy as np
import pytest

from conftest import ROOT, run

RD = 8.31432 / 0.0289644  # R*/M0, U.S. Standard Atmosphere 1976 constants
G0 = 9.80665  # standard gravity (CGPM 1901)
OMEGA = 7.292115e-5  # WGS 84 / IERS
A = 6_371_000.0  # IUGG mean radius, as Baroc's constants

MISSING = 9999.0


def latlon_message(sample, lats, lons, values, *, packing="grid_simple", bits=16, scan_south_first=False, scan_west=False, packing_keys=None, **keys):
    """An ecCodes message on a regular lat-lon grid. `values` is [lat, lon]
    in the order of `lats` and `lons` (north first, west to east); the
    message scans as asked. NaN values become bitmap-missing."""
    h = ec.codes_grib_new_from_samples(sample)
    lat_order = lats[::-1] if scan_south_first else lats
    lon_order = lons[::-1] if scan_west else lons
    grid = {
        "Ni": len(lons),
        "Nj": len(lats),
        "iScansNegatively": int(scan_west),
        "jScansPositively": int(scan_south_first),
        "latitudeOfFirstGridPointInDegrees": float(lat_order[0]),
        "latitudeOfLastGridPointInDegrees": float(lat_order[-1]),
        "longitudeOfFirstGridPointInDegrees": float(lon_order[0] % 360),
        "longitudeOfLastGridPointInDegrees": float(lon_order[-1] % 360),
        "iDirectionIncrementInDegrees": abs(float(lons[1] - lons[0])),
        "jDirectionIncrementInDegrees": abs(float(lats[1] - lats[0])),
    }
    for key, value in grid.items():
        ec.codes_set(h, key, value)
    for key, value in keys.items():
        if isinstance(value, (list, np.ndarray)):
            ec.codes_set_array(h, key, list(value))
        else:
            ec.codes_set(h, key, value)
    ec.codes_set(h, "bitsPerValue", bits)
    data = values
    if scan_south_first:
        data = data[::-1, :]
    if scan_west:
        data = data[:, ::-1]
    data = np.asarray(data, dtype="f8")
    if np.isnan(data).any():
        ec.codes_set(h, "bitmapPresent", 1)
        ec.codes_set(h, "missingValue", MISSING)
        data = np.where(np.isnan(data), MISSING, data)
    ec.codes_set_values(h, data.ravel())
    # Repacked after the values are in (ecCodes' PNG packing fails when
    # set on an empty message).
    if packing != "grid_simple":
        ec.codes_set(h, "packingType", packing)
    # Keys that exist only in the packing's template (CCSDS block size,
    # order of spatial differencing): set, then the values packed again.
    if packing_keys:
        for key, value in packing_keys.items():
            ec.codes_set(h, key, value)
        ec.codes_set_values(h, data.ravel())
    return h


def write_messages(path, handles):
    with open(path, "wb") as f:
        for h in handles:
            ec.codes_write(h, f)
            ec.codes_release(h)


def eccodes_fields(path):
    """Every message of a file as decoded by ecCodes: its keys, and its
    values keyed by (latitude, longitude in 0..360), missing as NaN."""
    out = []
    with open(path, "rb") as f:
        while (h := ec.codes_grib_new_from_file(f)) is not None:
            values = ec.codes_get_values(h).astype("f8")
            if ec.codes_get(h, "bitmapPresent"):
                values[values == ec.codes_get(h, "missingValue")] = np.nan
            lats = ec.codes_get_array(h, "latitudes")
            lons = ec.codes_get_array(h, "longitudes") % 360
            keys = {
                k: ec.codes_get(h, k, ktype=(str if k in ("shortName", "packingType") else int))
                for k in [
                    "shortName",
                    "discipline",
                    "parameterCategory",
                    "parameterNumber",
                    "typeOfFirstFixedSurface",
                    "level",
                    "validityDate",
                    "validityTime",
                    "packingType",
                    "binaryScaleFactor",
                    "decimalScaleFactor",
                ]
            }
            keys["values"] = {(round(float(a), 6), round(float(o), 6)): v for a, o, v in zip(lats, lons, values)}
            out.append(keys)
            ec.codes_release(h)
    return out


def baroc_fields(baroc, tmp_path, data_files, bindings):
    """Runs a script of `let name = expression` lines and returns the
    NetCDF result: {name: (values[time, lat, lon], lats, lons, times)}."""
    script = tmp_path / "read.baroc"
    script.write_text("".join(f"let {name} = {expression}\n" for name, expression in bindings.items()))
    out = tmp_path / "read.nc"
    run(baroc, "run", script, "-o", out, *data_files)
    result = {}
    with netCDF4.Dataset(out) as ds:
        lats = ds["latitude"][:].astype("f8")
        lons = ds["longitude"][:].astype("f8") % 360
        times = netCDF4.num2date(ds["time"][:], ds["time"].units, only_use_cftime_datetimes=False, only_use_python_datetimes=True)
        for name in bindings:
            values = ds[name][:]
            values = np.ma.filled(values.astype("f8"), np.nan)
            result[name] = (values, lats, lons, list(times))
    return result


def compare(baroc_values, lats, lons, reference, atol):
    """Baroc's [lat, lon] slice against a dict keyed by (lat, lon)."""
    checked = 0
    for j, lat in enumerate(lats):
        for i, lon in enumerate(lons):
            want = reference[(round(float(lat), 6), round(float(lon), 6))]
            got = baroc_values[j, i]
            if np.isnan(want):
                assert np.isnan(got), f"{lat},{lon}: missing in ecCodes, {got} in Baroc"
            else:
                # Baroc keeps f32: a few units in the last place on top.
                assert abs(got - want) <= atol + 5e-7 * abs(want), f"{lat},{lon}: Baroc {got}, ecCodes {want}"
            checked += 1
    assert checked == len(reference)


def validity(keys):
    d, t = keys["validityDate"], keys["validityTime"]
    return dt.datetime(d // 10000, d // 100 % 100, d % 100, t // 100, t % 100)


LATS = np.arange(60.0, 19.9, -2.5)
LONS = np.arange(-30.0, 30.1, 2.5)


def smooth_field(lats, lons, base, amplitude, seed):
    """A smooth field with a little noise, known before packing."""
    rng = np.random.default_rng(seed)
    la, lo = np.meshgrid(np.radians(lats), np.radians(lons), indexing="ij")
    return base + amplitude * (np.cos(2 * la) * np.sin(3 * lo) + 0.1 * rng.standard_normal(la.shape))


PACKINGS = {
    # packing type in ecCodes -> isobaric level (hPa) it goes on in the test
    "grid_simple": 1000,
    "grid_complex": 925,
    "grid_complex_spatial_differencing": 850,
    "grid_ccsds": 700,
    "grid_jpeg": 600,
    "grid_png": 500,
}


def test_every_packing_decodes_as_ecCodes_does_with_missing_values_as_nan(baroc, tmp_path):
    path = tmp_path / "packings.grib2"
    handles, known = [], {}
    for k, (packing, level) in enumerate(PACKINGS.items()):
        values = smooth_field(LATS, LONS, 260.0, 25.0, k)
        values[3, 4] = np.nan  # missing points, through the bitmap
        values[-1, -1] = np.nan
        known[level] = values
        # ecCodes' PNG writer fails on these fields at 16 and 24 bits
        # ("libpng error: Failed to write PNG data"); 12 bits it writes.
        bits = 12 if packing == "grid_png" else 16
        handles.append(latlon_message("regular_ll_pl_grib2", LATS, LONS, values, packing=packing, bits=bits, level=level))
    write_messages(path, handles)
    reference = eccodes_fields(path)
    assert [r["packingType"] for r in reference] == list(PACKINGS), "ecCodes wrote each packing asked for"
    got = baroc_fields(baroc, tmp_path, [path], {f"p{level}": f"t at {level} hPa" for level in PACKINGS.values()})
    for r in reference:
        values, lats, lons, _ = got[f"p{r['level']}"]
        # Both decoders unpack the same integers; Baroc keeps f32.
        compare(values[0], lats, lons, r["values"], atol=2e-3)
        # And the known field comes back within the packing's precision:
        # one step 2^E 10^-D (WMO-No. 306, template 5.0 notes).
        step = 2.0 ** r["binaryScaleFactor"] * 10.0 ** -r["decimalScaleFactor"]
        want = known[r["level"]]
        mask = ~np.isnan(want)
        np.testing.assert_array_equal(np.isnan(values[0]), ~mask)
        assert np.nanmax(np.abs(values[0][mask] - want[mask])) <= step + 1e-3, r["packingType"]


def compare_to_f32_rounding(baroc_values, lats, lons, reference, label):
    """Baroc's f32 values against ecCodes' doubles: equal to the double
    rounded to f32, within one unit in the last place of f32 (Baroc's
    unpackers do ecCodes' arithmetic in f64 and round once)."""
    got = np.array([[baroc_values[j, i] for i in range(len(lons))] for j in range(len(lats))])
    want = np.array([[reference[(round(float(a), 6), round(float(o), 6))] for o in lons] for a in lats])
    np.testing.assert_array_equal(np.isnan(got), np.isnan(want), err_msg=f"{label}: missing points differ")
    present = ~np.isnan(want)
    want32 = want[present].astype("f4")
    ulp = np.spacing(np.abs(want32))
    worst = np.max(np.abs(got[present].astype("f4") - want32) / ulp) if present.any() else 0.0
    assert worst <= 1.0, f"{label}: Baroc differs from ecCodes by {worst} f32 units in the last place"


# A finer grid for the unpacker checks: 7381 points, enough for many CCSDS
# blocks and reference sample intervals.
FINE_LATS = np.arange(60.0, -0.1, -1.0)
FINE_LONS = np.arange(-60.0, 60.1, 1.0)


def unpacker_field(seed, *, constant=False, missing=False):
    """Smooth, noisy, with a band of equal values (runs of zero-residual
    blocks for CCSDS, width-0 groups for complex packing) crossing block and
    interval boundaries, and a patch of wide noise (blocks that do not
    compress)."""
    if constant:
        return np.full((FINE_LATS.size, FINE_LONS.size), 287.5)
    values = smooth_field(FINE_LATS, FINE_LONS, 250.0, 30.0, seed)
    values[10:16, :] = 251.0
    rng = np.random.default_rng(seed + 100)
    values[30:33, 5:90] = 250.0 + 60.0 * rng.random((3, 85))
    if missing:
        values[3, 4:40] = np.nan
        values[40:45, 100] = np.nan
        values[-1, -1] = np.nan
    return values


# (packing, bits per value, extra ecCodes keys, constant field, missing
# points): every packing Baroc unpacks itself, odd widths from 0 (constant
# fields) to 32, spatial differencing of orders 1 and 2, CCSDS block sizes
# 8 to 64 and reference sample intervals from 1 to 4000 blocks.
UNPACKER_CASES = [
    ("grid_simple", 0, {}, True, False),
    ("grid_simple", 1, {}, False, True),
    ("grid_simple", 7, {}, False, False),
    ("grid_simple", 13, {}, False, True),
    ("grid_simple", 16, {}, False, False),
    ("grid_simple", 27, {}, False, True),
    ("grid_simple", 32, {}, False, False),
    ("grid_complex", 11, {}, False, True),
    ("grid_complex", 16, {}, True, False),
    ("grid_complex", 25, {}, False, False),
    ("grid_complex_spatial_differencing", 9, {"orderOfSpatialDifferencing": 1}, False, True),
    ("grid_complex_spatial_differencing", 16, {"orderOfSpatialDifferencing": 1}, False, False),
    ("grid_complex_spatial_differencing", 16, {"orderOfSpatialDifferencing": 2}, False, True),
    ("grid_complex_spatial_differencing", 24, {"orderOfSpatialDifferencing": 2}, False, False),
    ("grid_complex_spatial_differencing", 12, {}, True, False),
    ("grid_ccsds", 0, {}, True, False),
    ("grid_ccsds", 5, {"ccsdsBlockSize": 8, "ccsdsRsi": 4}, False, True),
    ("grid_ccsds", 12, {"ccsdsBlockSize": 16, "ccsdsRsi": 1}, False, False),
    ("grid_ccsds", 16, {"ccsdsBlockSize": 32, "ccsdsRsi": 128}, False, True),
    ("grid_ccsds", 17, {"ccsdsBlockSize": 64, "ccsdsRsi": 3}, False, False),
    ("grid_ccsds", 24, {"ccsdsBlockSize": 32, "ccsdsRsi": 4000}, False, False),
    ("grid_ccsds", 29, {"ccsdsBlockSize": 16, "ccsdsRsi": 32}, False, True),
    ("grid_ccsds", 32, {"ccsdsBlockSize": 8, "ccsdsRsi": 64}, False, False),
    # Decimal scaling (10^-D formed as ecCodes forms it).
    ("grid_simple", 16, {"changeDecimalPrecision": 2}, False, True),
    ("grid_simple", 0, {"decimalScaleFactor": 3}, True, False),
    ("grid_complex", 0, {"decimalScaleFactor": 2}, True, False),
    ("grid_complex_spatial_differencing", 20, {"changeDecimalPrecision": 1}, False, True),
    ("grid_complex_spatial_differencing", 0, {"decimalScaleFactor": 2}, True, False),
    ("grid_ccsds", 0, {"decimalScaleFactor": 1}, True, False),
]


def test_own_unpackers_match_eccodes_to_f32_rounding_for_every_packing_width_and_option(baroc, tmp_path):
    """Baroc's own unpackers (src/io/grib2_unpack.rs) against the ecCodes
    Python bindings' decode of files ecCodes wrote, message by message:
    templates 5.0, 5.2, 5.3 (orders 1 and 2) and 5.42, constant fields,
    bitmaps, widths 0 to 32, CCSDS block sizes and intervals (WMO-No. 306
    templates 5.x/7.x; CCSDS 121.0-B for 5.42)."""
    path = tmp_path / "unpackers.grib2"
    handles = []
    levels = {}
    for k, (packing, bits, keys, constant, missing) in enumerate(UNPACKER_CASES):
        level = 100 + 10 * k
        levels[level] = (packing, bits, keys, constant, missing)
        values = unpacker_field(k, constant=constant, missing=missing)
        handles.append(latlon_message("regular_ll_pl_grib2", FINE_LATS, FINE_LONS, values, packing=packing, bits=max(bits, 1), level=level, packing_keys=keys))
    write_messages(path, handles)
    reference = eccodes_fields(path)
    with open(path, "rb") as f:
        written = []
        while (h := ec.codes_grib_new_from_file(f)) is not None:
            written.append({key: ec.codes_get(h, key) for key in ["packingType", "bitsPerValue", "level", "decimalScaleFactor", "binaryScaleFactor"]})
            if ec.codes_get(h, "packingType") == "grid_ccsds":
                written[-1].update({key: ec.codes_get(h, key) for key in ["ccsdsBlockSize", "ccsdsRsi"]})
            if ec.codes_get(h, "packingType") == "grid_complex_spatial_differencing":
                written[-1]["order"] = ec.codes_get(h, "orderOfSpatialDifferencing")
            ec.codes_release(h)
    # ecCodes wrote what each case asks for (a constant field at 0 bits).
    for w in written:
        packing, bits, keys, constant, _ = levels[w["level"]]
        assert w["packingType"] == packing, w
        # Complex packing: ecCodes picks the width of the group references
        # itself from the values' range.
        # So does decimal precision mode (changeDecimalPrecision).
        if (packing in ("grid_simple", "grid_ccsds") or constant) and "changeDecimalPrecision" not in keys:
            assert w["bitsPerValue"] == (0 if constant else bits), w
        if packing == "grid_ccsds":
            assert (w["ccsdsBlockSize"], w["ccsdsRsi"]) == (keys.get("ccsdsBlockSize", w["ccsdsBlockSize"]), keys.get("ccsdsRsi", w["ccsdsRsi"])), w
        if "orderOfSpatialDifferencing" in keys:
            assert w["order"] == keys["orderOfSpatialDifferencing"], w
    got = baroc_fields(baroc, tmp_path, [path], {f"p{level}": f"t at {level} hPa" for level in levels})
    for r in reference:
        values, lats, lons, _ = got[f"p{r['level']}"]
        compare_to_f32_rounding(values[0], lats, lons, r["values"], f"{levels[r['level']]}")


@pytest.mark.parametrize("bits", [4, 6, 12, 16])
def test_png_packing_at_widths_a_png_image_cannot_hold(baroc, tmp_path, bits):
    # ecCodes writes 6 or 12 bits per value as a wider PNG image than section
    # 5 says; the image's own header decides (PNG specification, IHDR).
    values = 250.0 + 50.0 * np.linspace(0.0, 1.0, LATS.size * LONS.size).reshape(LATS.size, LONS.size)
    values[2, 2] = np.nan
    path = tmp_path / "png.grib2"
    write_messages(path, [latlon_message("regular_ll_pl_grib2", LATS, LONS, values, packing="grid_png", bits=bits, level=500)])
    (reference,) = eccodes_fields(path)
    assert reference["packingType"] == "grid_png"
    got, lats, lons, _ = baroc_fields(baroc, tmp_path, [path], {"x": "t at 500 hPa"})["x"]
    compare(got[0], lats, lons, reference["values"], atol=1e-3)


@pytest.mark.parametrize("south_first,west", [(True, False), (False, True), (True, True)])
def test_scan_directions_map_onto_the_grid(baroc, tmp_path, south_first, west):
    path = tmp_path / "scan.grib2"
    values = smooth_field(LATS, LONS, 5500.0, 200.0, 7)
    write_messages(path, [latlon_message("regular_ll_pl_grib2", LATS, LONS, values, packing="grid_simple", bits=24, scan_south_first=south_first, scan_west=west, shortName="gh", level=500)])
    (reference,) = eccodes_fields(path)
    values_b, lats, lons, _ = baroc_fields(baroc, tmp_path, [path], {"h": "geopotential_height at 500 hPa"})["h"]
    compare(values_b[0], lats, lons, reference["values"], atol=0.01)
    # Columns always run west to east; rows keep the file's order.
    assert np.all(np.diff(np.unwrap(np.radians(lons))) > 0)
    assert (lats[0] < lats[-1]) == south_first


# WMO code table 4.2 (discipline 0) triples and the names and roles Baroc
# gives them; ecCodes' shortName for the same triple is checked too.
PARAMETERS = [
    # (category, number, Baroc variable, Baroc role in `inspect`)
    (0, 0, "t", "temperature"),
    (3, 5, "gh", "geopotential_height"),
    (3, 4, "z", "geopotential"),
    (2, 2, "u", "eastward_wind"),
    (2, 3, "v", "northward_wind"),
    (1, 0, "q", "specific_humidity"),
    (1, 1, "r", None),
]


def test_code_tables_levels_and_times_message_by_message(baroc, tmp_path):
    path = tmp_path / "tables.grib2"
    handles = []
    # Forecast times in three units of code table 4.4: hours, minutes, days
    # (0 h, 360 min = 6 h, 1 day = 24 h) from 2031-04-12 06:00.
    steps = [(1, 0), (0, 360), (2, 1)]
    seed = 0
    for unit, forecast in steps:
        for category, number, _, _ in PARAMETERS:
            for level in (850, 500):
                seed += 1
                values = smooth_field(LATS, LONS, 100.0 * (category + 1) + level / 100, 10.0, seed)
                handles.append(
                    latlon_message(
                        "regular_ll_pl_grib2",
                        LATS,
                        LONS,
                        values,
                        packing="grid_complex_spatial_differencing",
                        bits=20,
                        discipline=0,
                        parameterCategory=category,
                        parameterNumber=number,
                        typeOfFirstFixedSurface=100,
                        level=level,
                        dataDate=20310412,
                        dataTime=600,
                        indicatorOfUnitOfTimeRange=unit,
                        forecastTime=forecast,
                    )
                )
        seed += 1
        handles.append(
            latlon_message(
                "regular_ll_sfc_grib2",
                LATS,
                LONS,
                smooth_field(LATS, LONS, 100000.0, 1500.0, seed),
                packing="grid_ccsds",
                bits=24,
                discipline=0,
                parameterCategory=3,
                parameterNumber=0,
                typeOfFirstFixedSurface=1,
                dataDate=20310412,
                dataTime=600,
                indicatorOfUnitOfTimeRange=unit,
                forecastTime=forecast,
            )
        )
    write_messages(path, handles)
    reference = eccodes_fields(path)

    described = run(baroc, "inspect", path).stdout
    for _, _, name, role in PARAMETERS:
        assert re.search(rf"^  {name}{re.escape(f' [{role}]') if role else ''}:", described, re.M), (name, described)
    assert re.search(r"^  sp \[surface_pressure\]:", described, re.M), described
    assert "levels (hPa): 850, 500" in described
    assert "times: 3 steps, 2031-04-12T06:00:00 to 2031-04-13T06:00:00" in described

    bindings = {f"{name}{level}": f"{name} at {level} hPa" for _, _, name, _ in PARAMETERS for level in (850, 500)}
    bindings["surface"] = "sp * 1"  # a bare name is a data reference, not a result
    got = baroc_fields(baroc, tmp_path, [path], bindings)
    names = {(c, n): name for c, n, name, _ in PARAMETERS}
    for r in reference:
        if r["typeOfFirstFixedSurface"] == 1:
            assert r["shortName"] == "sp"
            key = "surface"
        else:
            assert r["typeOfFirstFixedSurface"] == 100
            name = names[(r["parameterCategory"], r["parameterNumber"])]
            # ecCodes names the same code-table entry the same way.
            assert r["shortName"] == name
            key = f"{name}{r['level']}"
        values, lats, lons, times = got[key]
        t = times.index(validity(r))
        step = 2.0 ** r["binaryScaleFactor"] * 10.0 ** -r["decimalScaleFactor"]
        compare(values[t], lats, lons, r["values"], atol=max(1e-3, step))


def test_hybrid_levels_without_surface_pressure_say_what_is_missing(baroc, tmp_path):
    # Model levels are read on pressure levels (tests/python/test_model_levels.py);
    # without a surface pressure their pressure is unknown, and the error says so.
    path = tmp_path / "hybrid.grib2"
    pv = [0.0, 2000.0, 5000.0, 1.0, 0.8, 0.5]  # a of 3 half levels, then b
    handles = [
        latlon_message(
            "regular_ll_pl_grib2",
            LATS,
            LONS,
            smooth_field(LATS, LONS, 280.0 - 5 * level, 5.0, level),
            shortName="t",
            typeOfFirstFixedSurface=105,
            level=level,
            PVPresent=1,
            pv=pv,
        )
        for level in (1, 2)
    ]
    write_messages(path, handles)
    assert [r["typeOfFirstFixedSurface"] for r in eccodes_fields(path)] == [105, 105]
    described = run(baroc, "inspect", path).stdout
    assert re.search(r"^  t_hybrid \[temperature\]: temperature on hybrid model levels", described, re.M), described
    done = run(baroc, "run", "-e", "let x = temperature at 850 hPa", "-o", tmp_path / "x.nc", path, check=False)
    assert done.returncode == 1 and "panicked" not in done.stderr
    assert "`t_hybrid` is on hybrid model levels, whose pressure needs the surface pressure `sp`" in done.stderr, done.stderr


def test_own_writer_files_read_by_eccodes_with_the_same_values(baroc, tmp_path):
    sample = Path(baroc).parent / "baroc-grib2-sample"
    subprocess.run([str(sample), str(tmp_path)], check=True)
    # The lat-lon file: the formula of src/bin/baroc-grib2-sample.rs.
    fields = eccodes_fields(tmp_path / "latlon-isobaric.grib2")
    assert len(fields) == 4
    for r in fields:
        assert (r["discipline"], r["parameterCategory"], r["parameterNumber"], r["shortName"]) == (0, 0, 0, "t")
        assert r["typeOfFirstFixedSurface"] == 100 and r["level"] in (850, 500)
        hour = (validity(r) - dt.datetime(2031, 4, 12, 6)).total_seconds() / 3600
        assert hour in (0, 6)
        step = 2.0 ** r["binaryScaleFactor"]
        for (lat, lon), value in r["values"].items():
            if (lat, lon) == (60.0, 340.0):
                assert np.isnan(value), "the first point is missing"
                continue
            lon = lon - 360 if lon > 180 else lon
            want = 250 + 0.5 * (60 - lat) + 0.25 * lon + r["level"] * 100 / 10000 + hour / 4
            assert abs(value - want) <= step, (lat, lon, value, want)
    # Baroc reads its own file back the same way.
    got = baroc_fields(baroc, tmp_path, [tmp_path / "latlon-isobaric.grib2"], {"t850": "t at 850 hPa"})["t850"]
    for r in fields:
        if r["level"] == 850:
            t = got[3].index(validity(r))
            compare(got[0][t], got[1], got[2], r["values"], atol=2e-3)

    # The Lambert conformal file with hybrid levels: template and vertical
    # coordinate keys as ecCodes reads them.
    with open(tmp_path / "lambert-hybrid.grib2", "rb") as f:
        messages = []
        while (h := ec.codes_grib_new_from_file(f)) is not None:
            messages.append(h)
    try:
        keys = {
            "gridDefinitionTemplateNumber": 30,
            "Nx": 6,
            "Ny": 5,
            "latitudeOfFirstGridPointInDegrees": 35.0,
            "longitudeOfFirstGridPointInDegrees": 350.0,
            "LaDInDegrees": 45.0,
            "LoVInDegrees": 2.0,
            "DxInMetres": 12000.0,
            "DyInMetres": 12000.0,
            "Latin1InDegrees": 40.0,
            "Latin2InDegrees": 50.0,
            "jScansPositively": 1,
        }
        for h in messages:
            for key, want in keys.items():
                assert ec.codes_get(h, key) == pytest.approx(want), key
        for k, h in enumerate(messages[:3]):
            assert ec.codes_get(h, "typeOfFirstFixedSurface", int) == 105 and ec.codes_get(h, "level") == k + 1
            np.testing.assert_allclose(ec.codes_get_array(h, "pv"), [0.0, 5000.0, 10000.0, 0.0, 1.0, 0.7, 0.3, 0.0], rtol=1e-6)
            want = 290.0 - 10.0 * (k + 1) + 0.5 * np.arange(30)
            np.testing.assert_allclose(ec.codes_get_values(h), want, atol=2.0 ** ec.codes_get(h, "binaryScaleFactor"))
        sp = messages[3]
        assert ec.codes_get(sp, "shortName") == "sp" and ec.codes_get(sp, "typeOfFirstFixedSurface", int) == 1
        np.testing.assert_allclose(ec.codes_get_values(sp), 100000.0 + 10.0 * np.arange(30), atol=2.0 ** ec.codes_get(sp, "binaryScaleFactor"))
    finally:
        for h in messages:
            ec.codes_release(h)


def grid_parameters(stderr):
    return {k: v for k, v in re.findall(r"(\w+)=(\S+)", stderr)}


def refused(baroc, tmp_path, path, *fragments):
    done = run(baroc, "inspect", path, check=False)
    assert done.returncode == 1, done.stdout
    assert "panicked" not in done.stderr
    for fragment in (str(path), *fragments):
        assert fragment in done.stderr, (fragment, done.stderr)
    return done.stderr


def baroc_projected(baroc, tmp_path, data_file, bindings):
    """Runs `let name = expression` lines on a projected grid; returns
    {name: values[y, x]} and the latitude and longitude of every point,
    from Baroc's projection coordinates and CF grid mapping in its NetCDF
    output, turned into degrees by pyproj (PROJ). Rows are y ascending."""
    from pyproj import CRS, Transformer

    script = tmp_path / "projected.baroc"
    script.write_text("".join(f"let {name} = {expression}\n" for name, expression in bindings.items()))
    out = tmp_path / "projected.nc"
    run(baroc, "run", script, "-o", out, data_file)
    with netCDF4.Dataset(out) as ds:
        y = ds["latitude"][:].astype("f8")
        x = ds["longitude"][:].astype("f8")
        # Metres for a projection, rotated degrees for a rotated pole (CF).
        assert ds["latitude"].standard_name in ("projection_y_coordinate", "grid_latitude")
        mapping = {k: ds["grid_mapping"].getncattr(k) for k in ds["grid_mapping"].ncattrs()}
        values = {name: np.ma.filled(ds[name][:].astype("f8"), np.nan).reshape(len(y), len(x)) for name in bindings}
    crs = CRS.from_cf({k: (v.tolist() if isinstance(v, np.ndarray) else v) for k, v in mapping.items()})
    # A rotated pole is a derived geographic CRS: degrees are those of its
    # base, not of its own (rotated) geodetic CRS.
    to_degrees = Transformer.from_crs(crs, crs.source_crs if crs.is_derived else crs.geodetic_crs, always_xy=True)
    xx, yy = np.meshgrid(x, y)
    lon, lat = to_degrees.transform(xx, yy)
    return values, lat, lon


def eccodes_points(path, index=0):
    """ecCodes' latitudes, longitudes and values of one message (scan order)."""
    with open(path, "rb") as f:
        handles = []
        while (h := ec.codes_grib_new_from_file(f)) is not None:
            handles.append(h)
    try:
        h = handles[index]
        return (np.array(ec.codes_get_array(h, "latitudes")), np.array(ec.codes_get_array(h, "longitudes")),
                np.array(ec.codes_get_values(h)), {k: ec.codes_get(h, k) for k in ["Nx", "Ny", "jScansPositively", "iScansNegatively"]})
    finally:
        for h in handles:
            ec.codes_release(h)


def scan_order(values, keys):
    """Baroc's [y ascending, x ascending] array in the message's scan order."""
    if not keys["jScansPositively"]:
        values = values[::-1, :]
    if keys["iScansNegatively"]:
        values = values[:, ::-1]
    return values.ravel()


def longitude_difference(a, b):
    return np.abs((np.asarray(a) - np.asarray(b) + 180.0) % 360.0 - 180.0)


# Point positions: ecCodes' geometry iterator and Baroc agree on a sphere to
# about a millimetre; 1e-6 degree (0.1 m) is a tight bound above that.
POSITION_TOLERANCE = 1e-6


def test_own_lambert_file_has_the_points_ecCodes_computes_and_earth_relative_winds(baroc, tmp_path):
    sample = Path(baroc).parent / "baroc-grib2-sample"
    subprocess.run([str(sample), str(tmp_path)], check=True)
    path = tmp_path / "lambert-isobaric.grib2"
    got, lat, lon = baroc_projected(baroc, tmp_path, path, {"z": "geopotential_height at 500 hPa", "u": "eastward_wind at 500 hPa", "v": "northward_wind at 500 hPa"})
    ref_lat, ref_lon, ref_z, keys = eccodes_points(path, 0)
    assert (keys["Nx"], keys["Ny"], keys["jScansPositively"]) == (40, 30, 1)
    np.testing.assert_allclose(scan_order(lat, keys), ref_lat, rtol=0, atol=POSITION_TOLERANCE)
    assert longitude_difference(scan_order(lon, keys), ref_lon).max() < POSITION_TOLERANCE
    # Values land on the same points: ecCodes' decode, to f32 precision.
    np.testing.assert_allclose(scan_order(got["z"], keys), ref_z, rtol=1e-6)
    # The winds are flagged grid-relative (flag table 3.3 bit 5): Baroc
    # turns them by the angle between the grid's x axis and east, which
    # on a Lambert grid is n (lon - LoV), n from Snyder (1987) eq. 15-3.
    _, _, gx, _ = eccodes_points(path, 1)
    _, _, gy, _ = eccodes_points(path, 2)
    p1, p2 = np.radians(35.0), np.radians(55.0)
    n = np.log(np.cos(p1) / np.cos(p2)) / np.log(np.tan(np.pi / 4 + p2 / 2) / np.tan(np.pi / 4 + p1 / 2))
    angle = n * np.radians(((ref_lon - (-10.0) + 180.0) % 360.0) - 180.0)
    east = gx * np.cos(angle) + gy * np.sin(angle)
    north = -gx * np.sin(angle) + gy * np.cos(angle)
    np.testing.assert_allclose(scan_order(got["u"], keys), east, atol=1e-4)
    np.testing.assert_allclose(scan_order(got["v"], keys), north, atol=1e-4)
    assert np.abs(angle).max() > 0.2, "the grid turns the wind by a fair angle somewhere"


def lambert_from_ecCodes(path, scanning):
    h = ec.codes_grib_new_from_samples("regular_ll_pl_grib2")
    ec.codes_set(h, "gridDefinitionTemplateNumber", 30)
    lambert = {
        "Nx": 20,
        "Ny": 15,
        "latitudeOfFirstGridPointInDegrees": 33.5,
        "longitudeOfFirstGridPointInDegrees": 348.25,
        "LaDInDegrees": 46.0,
        "LoVInDegrees": 3.5,
        "DxInMetres": 9000.0,
        "DyInMetres": 9000.0,
        "Latin1InDegrees": 41.0,
        "Latin2InDegrees": 51.0,
        "latitudeOfSouthernPoleInDegrees": -90.0,
        "longitudeOfSouthernPoleInDegrees": 0.0,
        "scanningMode": scanning,
    }
    for key, value in lambert.items():
        ec.codes_set(h, key, value)
    ec.codes_set_values(h, np.linspace(270, 290, 300))
    write_messages(path, [h])


# Only files scanning east and north (flag table 3.4 bits 1 and 2): for a
# projected grid scanning west or south, ecCodes' iterator still steps east
# and north from the first point,
# while Baroc follows the scan as WMO-No. 306 describes it (first point =
# first value, rows going in -y); decoders differ on this (a question open
# at the WMO GRIB2 repository, issue 55). tests/grib2_projected.rs checks
# Baroc's reading of south-scanning files against the points written.
def test_lambert_and_polar_stereographic_files_from_ecCodes_are_read_on_their_points(baroc, tmp_path):
    scanning = 0x40
    path = tmp_path / "lambert.grib2"
    lambert_from_ecCodes(path, scanning)
    level = int(eccodes_fields(path)[0]["level"])
    got, lat, lon = baroc_projected(baroc, tmp_path, path, {"t": f"t at {level} hPa"})
    ref_lat, ref_lon, ref_t, keys = eccodes_points(path)
    np.testing.assert_allclose(scan_order(lat, keys), ref_lat, rtol=0, atol=POSITION_TOLERANCE)
    assert longitude_difference(scan_order(lon, keys), ref_lon).max() < POSITION_TOLERANCE
    np.testing.assert_allclose(scan_order(got["t"], keys), ref_t, rtol=1e-6)

    # Polar stereographic (template 3.20) from ecCodes' own sample, true
    # at 60 N.
    h = ec.codes_grib_new_from_samples("polar_stereographic_pl_grib2")
    ec.codes_set(h, "LaDInDegrees", 60.0)
    ec.codes_set(h, "orientationOfTheGridInDegrees", 350.0)
    ec.codes_set(h, "scanningMode", scanning)
    ec.codes_set_values(h, np.linspace(250, 260, ec.codes_get(h, "numberOfPoints")))
    path = tmp_path / "polar.grib2"
    write_messages(path, [h])
    level = int(eccodes_fields(path)[0]["level"])
    got, lat, lon = baroc_projected(baroc, tmp_path, path, {"t": f"t at {level} hPa"})
    ref_lat, ref_lon, ref_t, keys = eccodes_points(path)
    np.testing.assert_allclose(scan_order(lat, keys), ref_lat, rtol=0, atol=POSITION_TOLERANCE)
    assert longitude_difference(scan_order(lon, keys), ref_lon).max() < POSITION_TOLERANCE
    np.testing.assert_allclose(scan_order(got["t"], keys), ref_t, rtol=1e-6)


def rotated_from_ecCodes(path, *, rotation=0.0, relative_winds=False):
    """Temperature (and, if asked, grid-relative u and v) on a rotated
    latitude-longitude grid from ecCodes' own sample: 30 x 20 points a
    half degree apart about the rotated origin, scanning north to south,
    southern pole of projection at 40 S 170 W."""
    def message(category, number, values):
        h = ec.codes_grib_new_from_samples("rotated_ll_pl_grib2")
        keys = {
            "Ni": 30,
            "Nj": 20,
            "latitudeOfFirstGridPointInDegrees": 4.75,
            "longitudeOfFirstGridPointInDegrees": 352.75,
            "latitudeOfLastGridPointInDegrees": -4.75,
            "longitudeOfLastGridPointInDegrees": 7.25,
            "iDirectionIncrementInDegrees": 0.5,
            "jDirectionIncrementInDegrees": 0.5,
            "jScansPositively": 0,
            "latitudeOfSouthernPoleInDegrees": -40.0,
            "longitudeOfSouthernPoleInDegrees": 190.0,
            "angleOfRotationInDegrees": rotation,
            "parameterCategory": category,
            "parameterNumber": number,
        }
        for key, value in keys.items():
            ec.codes_set(h, key, value)
        # Flag table 3.3 bit 5: u and v along the grid's axes.
        ec.codes_set(h, "uvRelativeToGrid", int(relative_winds))
        ec.codes_set_values(h, values)
        return h

    n = 600
    handles = [message(0, 0, np.linspace(270.0, 290.0, n))]
    if relative_winds:
        handles.append(message(2, 2, 10.0 + 5.0 * np.sin(np.arange(n) / 37.0)))
        handles.append(message(2, 3, -4.0 + 6.0 * np.cos(np.arange(n) / 23.0)))
    write_messages(path, handles)


def test_rotated_latitude_longitude_file_from_ecCodes_is_read_on_its_points_with_earth_relative_winds(baroc, tmp_path):
    from pyproj import CRS, Transformer

    path = tmp_path / "rotated.grib2"
    rotated_from_ecCodes(path, relative_winds=True)
    level = int(eccodes_fields(path)[0]["level"])
    got, lat, lon = baroc_projected(baroc, tmp_path, path, {"t": f"t at {level} hPa", "u": f"eastward_wind at {level} hPa", "v": f"northward_wind at {level} hPa"})
    # Points: ecCodes' geographic latitudes and longitudes of the rotated
    # grid against Baroc's grid turned into degrees by PROJ (pyproj) from
    # the CF rotated_latitude_longitude mapping Baroc writes.
    ref_lat, ref_lon, ref_t, _ = eccodes_points(path, 0)
    keys = {"jScansPositively": 0, "iScansNegatively": 0}
    assert lat.shape == (20, 30)
    # ecCodes' rotated-grid iterator returns degrees to about eight
    # significant digits (178.44088 where PROJ gives 178.4408761; up to
    # 8e-6 degree here, under a metre), so the bound is 1e-5 degree rather
    # than the projections' 1e-6.
    tolerance = 1e-5
    np.testing.assert_allclose(scan_order(lat, keys), ref_lat, rtol=0, atol=tolerance)
    assert longitude_difference(scan_order(lon, keys), ref_lon).max() < tolerance
    np.testing.assert_allclose(scan_order(got["t"], keys), ref_t, rtol=1e-6)
    # Winds: the grid-relative components turned by the angle between the
    # rotated grid's x axis and local east, computed here through PROJ:
    # step a small distance east from each point, take the step's rotated
    # coordinates (d lon' cos lat', d lat'), and read its direction.
    rotated = CRS.from_cf({"grid_mapping_name": "rotated_latitude_longitude", "grid_north_pole_latitude": 40.0, "grid_north_pole_longitude": 10.0})
    to_rotated = Transformer.from_crs(rotated.source_crs, rotated, always_xy=True)
    h = 1e-4
    x1, y1 = to_rotated.transform(ref_lon - h, ref_lat)
    x2, y2 = to_rotated.transform(ref_lon + h, ref_lat)
    angle = np.arctan2(y2 - y1, (((x2 - x1) + 180.0) % 360.0 - 180.0) * np.cos(np.radians((y1 + y2) / 2)))
    _, _, gx, _ = eccodes_points(path, 1)
    _, _, gy, _ = eccodes_points(path, 2)
    east = gx * np.cos(angle) + gy * np.sin(angle)
    north = -gx * np.sin(angle) + gy * np.cos(angle)
    np.testing.assert_allclose(scan_order(got["u"], keys), east, atol=2e-3)
    np.testing.assert_allclose(scan_order(got["v"], keys), north, atol=2e-3)
    assert np.abs(angle).max() > 0.1, "the rotated grid turns the wind by a fair angle somewhere"


def test_unreadable_projected_grids_are_refused_with_their_parameters_as_ecCodes_reads_them(baroc, tmp_path):
    # Polar stereographic with a latitude of true scale on the equator has
    # no valid projection; a rotated grid with a non-zero angle of rotation
    # is refused rather than read wrongly.
    rotated = tmp_path / "rotated-by-angle.grib2"
    rotated_from_ecCodes(rotated, rotation=30.0)
    for sample, template, fragment, keys in [
        ("polar_stereographic_pl_grib2", 20, "is not in the hemisphere of the projection's pole", {"Nx": "nx", "Ny": "ny", "LaDInDegrees": "true_scale_latitude", "orientationOfTheGridInDegrees": "orientation_longitude", "DxInMetres": "dx_metres", "projectionCentreFlag": "projection_centre_flag"}),
        (rotated, 1, "angle of rotation is 30 degrees", {"Ni": "ni", "Nj": "nj", "latitudeOfSouthernPoleInDegrees": "south_pole_latitude", "longitudeOfSouthernPoleInDegrees": "south_pole_longitude", "angleOfRotationInDegrees": "rotation_angle"}),
    ]:
        if isinstance(sample, Path):
            path = sample
        else:
            path = tmp_path / f"{sample}.grib2"
            write_messages(path, [ec.codes_grib_new_from_samples(sample)])
        ours = grid_parameters(refused(baroc, tmp_path, path, fragment, "message 1"))
        f = eccodes_reader(path)
        for key, ours_key in keys.items():
            assert float(ours[ours_key]) == pytest.approx(ec.codes_get(f, key)), key
        ec.codes_release(f)
    # An oblate earth is refused rather than read on a sphere.
    path = tmp_path / "oblate.grib2"
    lambert_from_ecCodes(path, 0x40)
    h = eccodes_reader(path)
    ec.codes_set(h, "shapeOfTheEarth", 5)
    write_messages(tmp_path / "oblate5.grib2", [h])
    refused(baroc, tmp_path, tmp_path / "oblate5.grib2", "earth shape 5 (code table 3.2)", "spherical")


def eccodes_reader(path):
    with open(path, "rb") as f:
        return ec.codes_grib_new_from_file(f)


def test_bad_input_is_refused_clearly_without_a_panic(baroc, tmp_path):
    # GRIB edition 1, from ecCodes' own sample.
    grib1 = tmp_path / "old.grib"
    write_messages(grib1, [ec.codes_grib_new_from_samples("GRIB1")])
    refused(baroc, tmp_path, grib1, "GRIB edition 1")
    # A Gaussian grid (template 3.40).
    gaussian = tmp_path / "gaussian.grib2"
    write_messages(gaussian, [ec.codes_grib_new_from_samples("regular_gg_pl_grib2")])
    refused(baroc, tmp_path, gaussian, "template 3.40 is not supported", "message 1")
    # An unsupported packing: IEEE floats (template 5.4), in message 2.
    ieee = tmp_path / "ieee.grib2"
    values = smooth_field(LATS, LONS, 280.0, 5.0, 1)
    write_messages(
        ieee,
        [
            latlon_message("regular_ll_pl_grib2", LATS, LONS, values, level=850),
            latlon_message("regular_ll_pl_grib2", LATS, LONS, values, packing="grid_ieee", bits=32, level=500),
        ],
    )
    refused(baroc, tmp_path, ieee, "message 2", "template 5.4 is not supported")
    # A truncated file: the last message cut short.
    whole = ieee.read_bytes()
    truncated = tmp_path / "truncated.grib2"
    truncated.write_bytes(whole[: len(whole) - 100])
    refused(baroc, tmp_path, truncated, "message 2", "truncated")
    # The same variable, time and level twice: both messages named.
    twice = tmp_path / "twice.grib2"
    write_messages(twice, [latlon_message("regular_ll_pl_grib2", LATS, LONS, values, level=850) for _ in range(2)])
    refused(baroc, tmp_path, twice, "given twice", "message 1", "message 2")
    # The same message split over two files is a duplicate as well.
    one, two = tmp_path / "one.grib2", tmp_path / "two.grib2"
    write_messages(one, [latlon_message("regular_ll_pl_grib2", LATS, LONS, values, level=850)])
    write_messages(two, [latlon_message("regular_ll_pl_grib2", LATS, LONS, values, level=850)])
    done = run(baroc, "inspect", one, two, check=False)
    assert done.returncode == 1 and str(one) in done.stderr and str(two) in done.stderr, done.stderr


def test_messages_split_across_files_combine_by_level_and_time(baroc, tmp_path):
    files = []
    for k, level in enumerate((850, 700, 500)):
        path = tmp_path / f"level{level}.grib2"
        write_messages(path, [latlon_message("regular_ll_pl_grib2", LATS, LONS, smooth_field(LATS, LONS, 270 - k * 10, 5, k), level=level)])
        files.append(path)
    described = run(baroc, "inspect", *files).stdout
    assert "levels (hPa): 850, 700, 500" in described, described


def test_an_outside_file_runs_through_the_thermal_wind_budget_recipe(baroc, tmp_path):
    """A balanced atmosphere written by ecCodes: temperature linear in ln p,
    heights from the exact hypsometric integral of it, winds geostrophic
    (numpy.gradient on the sphere, as the field guide's differences), in
    complex packing with spatial differencing and CCSDS."""
    lats = np.arange(76.0, 23.9, -1.0)
    lons = np.arange(-70.0, 20.1, 1.0)
    levels = np.array([1000, 925, 850, 700, 600, 500, 400, 300], dtype="f8")
    la, lo = np.meshgrid(np.radians(lats), np.radians(lons), indexing="ij")
    t_base = 288.0 - 30.0 * np.sin(la) ** 2 + 4.0 * np.cos(3 * lo) * np.cos(la)
    z_base = 120.0 + 60.0 * np.sin(2 * lo) * np.cos(la)
    c = 45.0  # K per unit ln p: T = t_base - c ln(1000 hPa / p)
    f = 2 * OMEGA * np.sin(la)
    handles = []
    heights = {}
    for p in levels:
        depth = np.log(1000.0 / p)
        t = t_base - c * depth
        # Exact hypsometric height of p above 1000 hPa for T linear in ln p
        # (hypsometric equation, Wallace and Hobbs 2006, eq. 3.29).
        z = z_base + RD / G0 * (t_base * depth - 0.5 * c * depth**2)
        heights[p] = z
        dzdy = np.gradient(z, np.radians(lats), axis=0, edge_order=2) / A
        dzdx = np.gradient(z, np.radians(lons), axis=1, edge_order=2) / (A * np.cos(la))
        u = -G0 / f * dzdy  # geostrophic wind (Holton 2004, eq. 3.11)
        v = G0 / f * dzdx
        common = dict(dataDate=20310412, dataTime=1200, typeOfFirstFixedSurface=100, level=int(p))
        handles.append(latlon_message("regular_ll_pl_grib2", lats, lons, t, packing="grid_complex_spatial_differencing", bits=24, shortName="t", **common))
        handles.append(latlon_message("regular_ll_pl_grib2", lats, lons, z, packing="grid_complex_spatial_differencing", bits=24, shortName="gh", **common))
        handles.append(latlon_message("regular_ll_pl_grib2", lats, lons, u, packing="grid_ccsds", bits=24, shortName="u", **common))
        handles.append(latlon_message("regular_ll_pl_grib2", lats, lons, v, packing="grid_ccsds", bits=24, shortName="v", **common))
    path = tmp_path / "outside.grib2"
    write_messages(path, handles)
    out = tmp_path / "budget.nc"
    run(baroc, "run", ROOT / "recipes" / "thermal-wind-budget.baroc", "-o", out, path)
    with netCDF4.Dataset(out) as ds:
        for name in ["layer_thickness", "thermal_eastward", "thermal_from_heights_eastward", "ageostrophic_eastward", "warming", "veering"]:
            assert name in ds.variables, (name, list(ds.variables))
        out_lats = ds["latitude"][:].astype("f8")
        out_lons = ds["longitude"][:].astype("f8")
        out_lons = np.where(out_lons > 180, out_lons - 360, out_lons)
        rows = [int(np.argmin(abs(lats - x))) for x in out_lats]
        cols = [int(np.argmin(abs(lons - x))) for x in out_lons]
        # Thickness 1000-500 hPa: the exact integral (no humidity in the
        # file, so virtual temperature is temperature).
        want = (heights[500.0] - heights[1000.0])[np.ix_(rows, cols)]
        got = np.ma.filled(ds["layer_thickness"][0].astype("f8"), np.nan)
        assert np.nanmax(np.abs(got - want)) < 2.0, np.nanmax(np.abs(got - want))
        # Balance: the analysed shear is the thermal wind, so the
        # ageostrophic shear is small against it.
        thermal = np.hypot(ds["thermal_from_heights_eastward"][0], ds["thermal_from_heights_northward"][0])
        ageo = np.hypot(ds["ageostrophic_eastward"][0], ds["ageostrophic_northward"][0])
        assert np.nanmax(ageo) < 0.05 * np.nanmax(thermal), (np.nanmax(ageo), np.nanmax(thermal))
