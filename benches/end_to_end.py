"""End-to-end speed as a user feels it: `baroc run` of the thermal-wind budget
recipe against the same work written plainly with netCDF4-python + numpy.

Generates once, under target/bench-data/, a global 0.25-degree, 37-level,
one-time-step NetCDF file of float32 temperature, geopotential and wind (the
synthetic atmosphere of benches/bounded_memory.py: about 0.6 GB), then, in
the same run:

  (a) times `baroc run recipes/thermal-wind-budget.baroc -o OUT.nc FILE`
      from process start to exit (BAROC_TIMINGS=1 makes Baroc print its own
      split: the path taken, read/unpack with the reads made, compute,
      write);
  (b) times this script's plain version of the same recipe: read the levels
      it needs, compute the seven outputs, write them to a NetCDF file,
      with the split read / compute / write printed, both in a fresh
      interpreter (from process start to exit, as Baroc is timed) and in
      this one (imports done, memory warm from earlier repeats);

prints wall and CPU seconds (medians), the end-to-end ratios (goal: Baroc
>= 5x faster), and checks that the two output files agree (tolerances
below, each with its reason).

    target/test-venv/bin/python benches/end_to_end.py [--keep] [--area global|recipe] [--spacing 0.5] [--repeats 3]

--spacing coarsens the grid (0.25 degree by default; 0.5 makes a file a
quarter the size for a quicker run on a busy machine). Baroc runs twice
per repeat: as it is (results shared within the run, src/sharing.rs) and
with BAROC_SHARING=0 (every output computed from scratch, as before
sharing), so both ratios come from the same run.

The input is deleted at the end unless --keep is given (the disk is shared).
The plain version is written the way a competent numpy user would write it
for whole arrays: the same formulas as Baroc (field guide), np.gradient with
edge_order=2 on radian latitude, a centred difference across the periodic
longitude, the hypsometric integral in ln p with the piecewise-quadratic rule
Baroc uses by default.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import time
from pathlib import Path

import netCDF4
import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

ROOT = Path(__file__).resolve().parents[1]
DATA = ROOT / "target" / "bench-data"
PATH = DATA / "global-0p25-37-levels-1-step.nc"  # set from --spacing in main()
SPACING = 0.25
RECIPE = ROOT / "recipes" / "thermal-wind-budget.baroc"

# Constants (field guide, each with its source there).
GRAVITY = 9.80665  # standard gravity, CGPM 1901
RD = 8.31432 / 0.0289644  # R*/M0, U.S. Standard Atmosphere 1976
OMEGA = 7.292115e-5  # WGS 84
RADIUS = 6_371_000.0  # IUGG mean radius, rounded
EQUATOR_BAND = 5.0  # degrees, Baroc's default mask half-width
WEAK_WIND = 2.5  # m s-1, Baroc's default turning threshold (physics::thermal_wind)
BOTTOM, TOP = 1000.0, 500.0  # hPa: the recipe's default layer
GLOBAL_AREA = "box(89.5 south to 89.5 north, 180 west to 180 east)"
RECIPE_AREA = (30.0, 68.0, -62.0, 12.0)  # south, north, west, east: the recipe's default box


def generate():
    """One time step of the synthetic atmosphere of benches/engine_numpy.py
    (temperature and heights hydrostatically consistent, with a surface
    height that varies, so the wind turns with height), geopotential g0 Z,
    and a wind that is geostrophic plus a small ageostrophic part (a cross-
    isobar flow of 10% of the geostrophic wind turned 20 degrees toward low
    heights near the ground, fading with height). Invented for the bench."""
    import engine_numpy

    DATA.mkdir(parents=True, exist_ok=True)
    latitudes, longitudes = engine_numpy.grid(SPACING)
    temperature, height = engine_numpy.synthetic_fields(latitudes, longitudes)
    levels = np.asarray(engine_numpy.LEVELS_HPA, "f8")
    sphere = Sphere(latitudes, longitudes)
    partial = PATH.with_suffix(".partial")
    print(f"generating {PATH} ...", flush=True)
    with netCDF4.Dataset(partial, "w") as ds:
        ds.set_fill_off()
        for name, size in (("time", 1), ("level", len(levels)), ("latitude", len(latitudes)), ("longitude", len(longitudes))):
            ds.createDimension(name, size)
        for name, values, attributes in (
            ("time", [0.0], {"units": "hours since 2031-01-01 00:00:00", "calendar": "standard", "standard_name": "time"}),
            ("level", levels, {"units": "hPa", "standard_name": "air_pressure", "positive": "down"}),
            ("latitude", latitudes, {"units": "degrees_north", "standard_name": "latitude"}),
            ("longitude", longitudes, {"units": "degrees_east", "standard_name": "longitude"}),
        ):
            variable = ds.createVariable(name, "f8", (name,))
            variable.setncatts(attributes)
            variable[:] = values
        names = {"t": ("air_temperature", "K"), "z": ("geopotential", "m2 s-2"), "u": ("eastward_wind", "m s-1"), "v": ("northward_wind", "m s-1")}
        variables = {}
        for name, (standard_name, units) in names.items():
            variables[name] = ds.createVariable(name, "f4", ("time", "level", "latitude", "longitude"))
            variables[name].setncatts({"standard_name": standard_name, "units": units})
        for k, p in enumerate(levels):
            geopotential = (GRAVITY * height[k].astype("f8")).astype("f4")
            u, v = sphere.balance_wind(geopotential, 1.0)
            u, v = np.nan_to_num(u), np.nan_to_num(v)
            share, angle = 0.1 * (p / 1000.0) ** 2, np.radians(20.0)
            variables["t"][0, k] = temperature[k]
            variables["z"][0, k] = geopotential
            variables["u"][0, k] = u * (1 - share) + share * (u * np.cos(angle) - v * np.sin(angle))
            variables["v"][0, k] = v * (1 - share) + share * (u * np.sin(angle) + v * np.cos(angle))
    partial.rename(PATH)


# ---------------------------------------------------------------- plain version


def quadratic_layer_weights(levels_hpa, bottom, top):
    """Weights w_k with integral_{ln top}^{ln bottom} T d(ln p) = sum w_k T_k:
    on each interval between data levels, the mean of the two parabolas in
    ln p through the interval and one neighbour each side (one at the column's
    ends), integrated exactly by 3-point Gauss-Legendre quadrature."""
    x = np.log(np.asarray(levels_hpa, "f8"))  # bottom first: decreasing
    n = len(x)
    nodes, gauss = np.array([-0.7745966692414834, 0.0, 0.7745966692414834]), np.array([5, 8, 5]) / 9.0
    weights = np.zeros(n)
    for s in range(n - 1):
        hi, lo = min(x[s], np.log(bottom)), max(x[s + 1], np.log(top))
        if hi - lo <= 1e-12:
            continue
        firsts = ([s - 1] if 1 <= s < n - 1 else []) + ([s] if s + 2 < n else [])
        for node, g in zip(nodes, gauss):
            at = 0.5 * (hi + lo) + 0.5 * (hi - lo) * node
            for first in firsts:
                xs = x[first:first + 3]
                for m in range(3):
                    others = [xs[o] for o in range(3) if o != m]
                    basis = (at - others[0]) * (at - others[1]) / ((xs[m] - others[0]) * (xs[m] - others[1]))
                    weights[first + m] += 0.5 * (hi - lo) * g * basis / len(firsts)
    return weights


class Sphere:
    """d/dx, d/dy on a latitude-longitude grid and the Coriolis factors."""

    def __init__(self, latitudes, longitudes):
        self.lat = np.deg2rad(latitudes)
        self.dlon = np.deg2rad(longitudes[1] - longitudes[0])
        cos = np.cos(self.lat)
        with np.errstate(divide="ignore"):
            self.inverse_x = np.where(np.abs(np.abs(latitudes) - 90) < 1e-6, np.nan, 1.0 / (RADIUS * cos))[:, None]
        f = 2 * OMEGA * np.sin(self.lat)
        masked = (np.abs(latitudes) < EQUATOR_BAND) | (np.abs(np.abs(latitudes) - 90) < 1e-6)
        with np.errstate(divide="ignore"):
            self.over_f = np.where(masked, np.nan, 1.0 / f)[:, None]
        self.f = f[:, None]
        self.cos = cos[:, None]

    def gradient(self, field):
        ddy = np.gradient(field, self.lat, axis=0, edge_order=2) / RADIUS
        ddx = (np.roll(field, -1, axis=1) - np.roll(field, 1, axis=1)) / (2 * self.dlon) * self.inverse_x
        return ddx, ddy

    def balance_wind(self, field, scale):
        """(u, v) = (scale/f) k x grad(field)."""
        ddx, ddy = self.gradient(field.astype("f8"))
        return (-scale * self.over_f * ddy).astype("f4"), (scale * self.over_f * ddx).astype("f4")


def plain(path, out_path, area):
    timings = {}
    started = time.perf_counter()
    with netCDF4.Dataset(path) as ds:
        levels = ds["level"][:].data
        latitudes, longitudes = ds["latitude"][:].data, ds["longitude"][:].data
        weights = quadratic_layer_weights(levels, BOTTOM, TOP)
        needed = np.nonzero(weights)[0]
        k_bottom, k_top = int(np.argmin(abs(levels - BOTTOM))), int(np.argmin(abs(levels - TOP)))
        t = ds["t"][0, needed[0]:needed[-1] + 1].data
        z_bottom, z_top = ds["z"][0, k_bottom].data, ds["z"][0, k_top].data
        u_bottom, u_top = ds["u"][0, k_bottom].data, ds["u"][0, k_top].data
        v_bottom, v_top = ds["v"][0, k_bottom].data, ds["v"][0, k_top].data
    timings["read"] = time.perf_counter() - started

    started = time.perf_counter()
    sphere = Sphere(latitudes, longitudes)
    w = weights[needed[0]:needed[-1] + 1]
    thickness = (RD / GRAVITY * np.tensordot(w, t.astype("f8"), axes=1)).astype("f4")
    thermal = sphere.balance_wind(thickness, GRAVITY)
    thickness_geo = ((z_top.astype("f8") - z_bottom) / GRAVITY).astype("f4")
    thermal_geo = sphere.balance_wind(thickness_geo, GRAVITY)
    ageostrophic = (u_top - u_bottom - thermal[0], v_top - v_bottom - thermal[1])
    gb, gt = sphere.balance_wind(z_bottom, 1.0), sphere.balance_wind(z_top, 1.0)
    mean_t = (GRAVITY * thickness_geo.astype("f8") / (RD * np.log(BOTTOM / TOP))).astype("f4")
    ddx, ddy = sphere.gradient(mean_t.astype("f8"))
    warming = (-(0.5 * (gb[0] + gt[0]) * ddx + 0.5 * (gb[1] + gt[1]) * ddy) * 86400.0).astype("f4")
    cross = gb[0].astype("f8") * gt[1] - gb[1].astype("f8") * gt[0]
    dot = gb[0].astype("f8") * gt[0] + gb[1].astype("f8") * gt[1]
    with np.errstate(invalid="ignore"):
        veering = -np.degrees(np.arctan2(cross, dot))
        weak = ~(np.hypot(gb[0], gb[1]) >= WEAK_WIND) | ~(np.hypot(gt[0], gt[1]) >= WEAK_WIND) | ~(np.hypot(gt[0] - gb[0], gt[1] - gb[1]) >= WEAK_WIND)
    veering = np.where(weak, np.nan, veering).astype("f4")
    rows, columns = select(latitudes, longitudes, area)
    fields = {
        "layer_thickness": thickness, "thermal_u": thermal[0], "thermal_v": thermal[1],
        "thermal_from_heights_u": thermal_geo[0], "thermal_from_heights_v": thermal_geo[1],
        "ageostrophic_u": ageostrophic[0], "ageostrophic_v": ageostrophic[1],
        "warming": warming, "veering": veering,
    }
    fields = {name: value[rows][:, columns] for name, value in fields.items()}
    cos = np.broadcast_to(sphere.cos[rows], fields["warming"].shape)
    valid = np.isfinite(fields["warming"])
    mean_warming = float(np.sum(fields["warming"][valid] * cos[valid]) / np.sum(cos[valid]))
    timings["compute"] = time.perf_counter() - started

    started = time.perf_counter()
    with netCDF4.Dataset(out_path, "w") as ds:
        ds.createDimension("latitude", len(rows))
        ds.createDimension("longitude", len(columns))
        ds.createVariable("latitude", "f8", ("latitude",))[:] = latitudes[rows]
        ds.createVariable("longitude", "f8", ("longitude",))[:] = longitudes[columns]
        for name, value in fields.items():
            ds.createVariable(name, "f4", ("latitude", "longitude"), fill_value=np.float32(np.nan))[:] = value
        # Baroc computes the area mean too but prints scalars rather than
        # writing them; written here so the work is the same, not compared.
        ds.mean_warming_K_per_day = mean_warming
    timings["write"] = time.perf_counter() - started
    return timings


def select(latitudes, longitudes, area):
    if area == "global":
        south, north, west, east = -89.5, 89.5, -180.0, 180.0
    else:
        south, north, west, east = RECIPE_AREA
    rows = np.nonzero((latitudes >= south - 1e-9) & (latitudes <= north + 1e-9))[0]
    if east - west >= 360.0:
        return rows, np.arange(len(longitudes))
    east_of_west = (longitudes - west) % 360.0
    columns = np.nonzero(east_of_west <= (east - west) + 1e-9)[0]
    return rows, columns[np.argsort(east_of_west[columns], kind="stable")]


# ---------------------------------------------------------------- comparison


def baroc_fields(path):
    """The seven outputs of Baroc's file, by role, as [lat, lon] arrays."""
    with netCDF4.Dataset(path) as ds:
        names = list(ds.variables)

        def pick(prefix):
            match = [n for n in names if n.startswith(prefix)]
            if len(match) != 1:
                raise SystemExit(f"cannot tell which variable of {path} is {prefix}*: {names}")
            return np.squeeze(ds[match[0]][:].filled(np.nan))

        return {
            "latitude": ds["latitude"][:].data, "longitude": ds["longitude"][:].data,
            "layer_thickness": pick("layer_thickness"),
            "thermal_u": pick("thermal_eastward"), "thermal_v": pick("thermal_northward"),
            "thermal_from_heights_u": pick("thermal_from_heights_eastward"), "thermal_from_heights_v": pick("thermal_from_heights_northward"),
            "ageostrophic_u": pick("ageostrophic_eastward"), "ageostrophic_v": pick("ageostrophic_northward"),
            "warming": pick("warming"), "veering": pick("veering"),
        }


# Tolerances and why. Both sides compute in f64 from the same f32 inputs and
# store f32, with the same stencils (Baroc's differences equal numpy.gradient
# to rounding), so values agree to a few f32 ulps of the inputs:
# thickness ~5500 m -> f32 spacing 5e-4 m; winds from differences of f32
# fields divided by f, where f32 rounding of the thickness (~5e-4 m over
# 28 km, times g/f ~ 1e5 s) gives ~2e-3 m s-1; advection ~1e-3 K/day.
# The turning angle is ill-conditioned near the weak-wind threshold: a wind
# difference of 1e-2 m s-1 on a 2.5 m s-1 wind turns it by up to
# 1e-2/2.5 rad = 0.23 degree; it is compared where both define it, to 0.5
# degree (and at most 1 point in 10,000 may be masked by one side only).
TOLERANCES = {
    "layer_thickness": 5e-3, "thermal_u": 2e-2, "thermal_v": 2e-2,
    "thermal_from_heights_u": 2e-2, "thermal_from_heights_v": 2e-2,
    "ageostrophic_u": 2e-2, "ageostrophic_v": 2e-2, "warming": 1e-2, "veering": 0.5,
}


def compare(baroc_path, plain_path):
    ours = baroc_fields(baroc_path)
    with netCDF4.Dataset(plain_path) as ds:
        theirs = {name: ds[name][:].filled(np.nan) for name in ds.variables}
    # Line the plain output up with Baroc's coordinates (the order of the
    # longitudes of a box across the seam is each side's own choice).
    rows = [int(np.argmin(np.abs(theirs["latitude"] - y))) for y in ours["latitude"]]
    columns = [int(np.argmin(np.abs((theirs["longitude"] - x + 180.0) % 360.0 - 180.0))) for x in ours["longitude"]]
    if not (np.allclose(theirs["latitude"][rows], ours["latitude"]) and np.allclose(theirs["longitude"][columns] % 360, ours["longitude"] % 360)):
        return ["the two outputs are on different grids"]
    theirs = {name: value[rows][:, columns] for name, value in theirs.items() if value.ndim == 2}
    failures = []
    for name, tolerance in TOLERANCES.items():
        a, b = ours[name], theirs[name]
        if a.shape != b.shape:
            failures.append(f"{name}: shapes differ, baroc {a.shape} vs plain {b.shape}")
            continue
        both = np.isfinite(a) & np.isfinite(b)
        mismatched_mask = int(np.sum(np.isfinite(a) != np.isfinite(b)))
        worst = float(np.max(np.abs(a[both] - b[both]))) if both.any() else float("nan")
        note = f"{name:<24} max |diff| {worst:.3g} (tolerance {tolerance:g}), {int(both.sum())} points, {mismatched_mask} where only one is missing"
        print("  " + note)
        if not worst <= tolerance or (name != "veering" and mismatched_mask > 0) or mismatched_mask > 1e-4 * a.size:
            failures.append(note)
    return failures


def child_cpu_seconds():
    usage = resource.getrusage(resource.RUSAGE_CHILDREN)
    return usage.ru_utime + usage.ru_stime


def median(values):
    ordered = sorted(values)
    return ordered[len(ordered) // 2]


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--keep", action="store_true", help="keep the generated input")
    parser.add_argument("--area", choices=["global", "recipe"], default="global",
                        help="global: the recipe over the whole grid (poles aside); recipe: its default box (30N-68N, 62W-12E)")
    parser.add_argument("--repeats", type=int, default=3, help="runs of each side; medians are reported")
    parser.add_argument("--spacing", type=float, default=0.25, help="grid spacing in degrees (0.25 by default)")
    # Internal: the plain version alone in a fresh interpreter (timed by the
    # parent from process start, as Baroc is); prints its split as JSON.
    parser.add_argument("--plain-only", nargs=3, metavar=("INPUT", "OUTPUT", "AREA"), help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.plain_only:
        source, target, area = args.plain_only
        print(json.dumps(plain(Path(source), Path(target), area)))
        return
    global PATH, SPACING
    SPACING = args.spacing
    PATH = DATA / (f"global-{args.spacing:g}".replace(".", "p") + "-37-levels-1-step.nc")
    baroc = os.environ.get("BAROC_BIN", str(ROOT / "target" / "release" / "baroc"))
    if not PATH.exists():
        generate()
    baroc_out, plain_out = DATA / "end-to-end-baroc.nc", DATA / "end-to-end-plain.nc"
    try:
        # Warm the page cache once so neither side pays for the first read.
        with open(PATH, "rb") as f:
            while f.read(1 << 24):
                pass
        area = ["--set", f"area={GLOBAL_AREA}"] if args.area == "global" else []
        command = [baroc, "run", str(RECIPE), *area, "-o", str(baroc_out), str(PATH)]

        def timed(argv, environment):
            """(wall seconds from process start to exit, CPU seconds, stdout, stderr)"""
            cpu = child_cpu_seconds()
            started = time.perf_counter()
            done = subprocess.run(argv, capture_output=True, text=True, env={**os.environ, **environment})
            seconds = time.perf_counter() - started
            if done.returncode != 0:
                raise SystemExit(f"{' '.join(argv)} failed:\n{done.stderr}")
            return seconds, child_cpu_seconds() - cpu, done.stdout, done.stderr

        # Alternate the sides so that load from other work on the machine
        # falls on all alike; medians are reported. Each repeat runs:
        # Baroc without sharing, Baroc as it is, the plain version in this
        # interpreter (imports done, memory warm from earlier repeats: the
        # most favourable case for it), and the plain version in a fresh
        # interpreter (timed from process start, as Baroc is).
        unshared, shared, in_process, fresh = [], [], [], []
        for _ in range(args.repeats):
            unshared.append(timed(command, {"BAROC_TIMINGS": "1", "BAROC_SHARING": "0"}))
            shared.append(timed(command, {"BAROC_TIMINGS": "1"}))
            cpu = time.process_time()
            started = time.perf_counter()
            split = plain(PATH, plain_out, args.area)
            in_process.append((time.perf_counter() - started, time.process_time() - cpu, split))
            seconds, cpu, stdout, _ = timed([sys.executable, str(Path(__file__).resolve()), "--plain-only", str(PATH), str(plain_out), args.area], {})
            fresh.append((seconds, cpu, json.loads(stdout.strip().splitlines()[-1])))

        def middle(runs):
            """The run of median wall time, and the medians of wall and CPU time."""
            by_wall = sorted(runs, key=lambda run: run[0])
            return by_wall[len(by_wall) // 2], median([r[0] for r in runs]), median([r[1] for r in runs])

        def baroc_split(stderr):
            return [line[len("timings: "):] for line in stderr.splitlines() if line.startswith("timings:")]

        (_, _, _, unshared_err), unshared_seconds, unshared_cpu = middle(unshared)
        (_, _, _, shared_err), baroc_seconds, baroc_cpu = middle(shared)
        (_, _, split), plain_seconds, plain_cpu = middle(in_process)
        (_, _, fresh_split), fresh_seconds, fresh_cpu = middle(fresh)

        with netCDF4.Dataset(PATH) as ds:
            shape = " x ".join(str(len(ds.dimensions[d])) for d in ("level", "latitude", "longitude"))
        print(f"\ninput: 4 variables x {shape} (levels x latitudes x longitudes) float32, one time step ({PATH.stat().st_size / 1e9:.2f} GB), page cache warm")
        print(f"recipe: {RECIPE.name}, layer {BOTTOM:g} hPa to {TOP:g} hPa, area: {args.area}; load average before: {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores")
        print("output: both sides write NetCDF-4 (HDF5), contiguous, uncompressed, float32 with a _FillValue; Baroc writes in no-fill mode, the plain version with netCDF's default fill")
        print(f"{'run (median of ' + str(args.repeats) + ')':<44}{'wall s':>8}{'CPU s':>8}")
        print(f"{'baroc run, no sharing':<44}{unshared_seconds:>8.2f}{unshared_cpu:>8.2f}")
        for line in baroc_split(unshared_err):
            print(f"  {line}")
        print(f"{'baroc run (process start to file closed)':<44}{baroc_seconds:>8.2f}{baroc_cpu:>8.2f}")
        for line in baroc_split(shared_err):
            print(f"  {line}")
        with netCDF4.Dataset(baroc_out) as ds:
            method = ds["layer_thickness"].getncattr("method") if "method" in ds["layer_thickness"].ncattrs() else "not recorded"
        # The one-pass kernels (physics::vertical::adjacent_layer_thickness,
        # physics::layers) compute every layer between neighbouring data
        # levels at once; the recipe asks for one layer spanning 15 intervals,
        # which the general layer integral computes in one pass over the 17
        # levels its quadratic rule reaches (each level read once).
        print(f"  thickness path: general layer integral, one layer in one pass ({method})")
        print(f"{'plain, fresh process (start to exit)':<44}{fresh_seconds:>8.2f}{fresh_cpu:>8.2f}")
        print(f"  read {fresh_split['read']:.3f} s, compute {fresh_split['compute']:.3f} s, write {fresh_split['write']:.3f} s; the rest ({fresh_seconds - sum(fresh_split.values()):.2f} s) is interpreter start and imports")
        print(f"{'plain, in this interpreter (imports done)':<44}{plain_seconds:>8.2f}{plain_cpu:>8.2f}")
        print(f"  read {split['read']:.3f} s, compute {split['compute']:.3f} s, write {split['write']:.3f} s (memory warm from earlier repeats)")
        floor = split["read"] + split["write"]
        print(f"  its read + write alone: {floor:.3f} s (NetCDF/HDF5 and the page cache, work both sides share)")
        if args.area == "recipe":
            print("  note: the plain script reads and computes the whole globe and then crops to the box, while Baroc reads only the box; --area global is the like-for-like comparison")
        print(f"end to end, no sharing: baroc is {fresh_seconds / unshared_seconds:.2f}x the plain script as a fresh process, {plain_seconds / unshared_seconds:.2f}x it in this interpreter")
        ratio = fresh_seconds / baroc_seconds
        print(f"end to end: baroc is {ratio:.2f}x the plain script as a fresh process (goal >= 5x: {'met' if ratio >= 5 else 'not met'})")
        print(f"            and {plain_seconds / baroc_seconds:.2f}x it in this interpreter, imports and interpreter start excluded (goal >= 5x: {'met' if plain_seconds / baroc_seconds >= 5 else 'not met'})")
        print(f"sharing made the run {unshared_seconds / baroc_seconds:.2f}x faster")
        print("cross-check of the two outputs:")
        failures = compare(baroc_out, plain_out)
        if failures:
            print("DISAGREE:\n  " + "\n  ".join(failures))
            sys.exit(1)
        print("the two outputs agree")
    finally:
        baroc_out.unlink(missing_ok=True)
        plain_out.unlink(missing_ok=True)
        if not args.keep and not args.plain_only:
            PATH.unlink(missing_ok=True)


if __name__ == "__main__":
    main()
