"""Peak memory and throughput of `baroc run --memory-limit` on a large input.

Generates once, under target/bench-data/, a global 0.25-degree, 37-level,
16-time-step file of float32 temperature, geopotential and wind (about
9.8 GB; skipped with a message when the disk lacks room), then runs the
thermal-wind budget recipe on it with and without a memory limit, and prints
beside each other: one time step's working set (the bytes of one step of
every variable), the peak resident memory of each run (from wait4's
ru_maxrss) and its ratio to that working set, and time steps per second.

    target/test-venv/bin/python benches/bounded_memory.py [--keep] [--limit 4GiB]

The file is deleted afterwards unless --keep is given (the disk is shared).
The fields are synthetic: a zonal-mean temperature falling with height and
latitude, heights from the hypsometric equation in ln p, and a geostrophic
wind from the height gradient, all moving east with time.
"""

from __future__ import annotations

import argparse
import os
import shutil
import subprocess
import sys
import time
from pathlib import Path

import netCDF4
import numpy as np

ROOT = Path(__file__).resolve().parents[1]
DATA = ROOT / "target" / "bench-data"
PATH = DATA / "global-0p25-37-levels-16-steps.nc"
LEVELS = np.array([1000, 975, 950, 925, 900, 875, 850, 825, 800, 775, 750, 700, 650, 600, 550, 500, 450, 400, 350, 300, 250, 225, 200, 175, 150, 125, 100, 70, 50, 30, 20, 10, 7, 5, 3, 2, 1], "f8")
NT, NY, NX = 16, 721, 1440
RD, G0, OMEGA, A = 287.053, 9.80665, 7.292115e-5, 6_371_000.0  # USSA 1976 R/M, CGPM g0, WGS 84, IUGG


def step_bytes():
    return 4 * len(LEVELS) * NY * NX * 4


def generate():
    DATA.mkdir(parents=True, exist_ok=True)
    need = NT * step_bytes() * 1.05
    free = shutil.disk_usage(DATA).free
    if free < need + 20e9:
        print(f"skipped: generating the input needs {need / 1e9:.1f} GB and leaves 20 GB for others; the disk has {free / 1e9:.1f} GB free")
        sys.exit(0)
    print(f"generating {PATH} ({NT * step_bytes() / 1e9:.1f} GB) ...", flush=True)
    started = time.monotonic()
    partial = PATH.with_suffix(".partial")
    lat = np.linspace(90, -90, NY)
    lon = np.arange(NX) * 0.25
    phi = np.radians(lat)[:, None]
    f = 2 * OMEGA * np.sin(phi)
    f = np.where(np.abs(lat[:, None]) < 5, np.sign(lat[:, None] + 1e-9) * 2 * OMEGA * np.sin(np.radians(5)), f)
    with netCDF4.Dataset(partial, "w") as ds:
        # Every value is written below: no need to pre-fill 10 GB.
        ds.set_fill_off()
        ds.createDimension("time", NT)
        ds.createDimension("level", len(LEVELS))
        ds.createDimension("latitude", NY)
        ds.createDimension("longitude", NX)
        v = ds.createVariable("time", "f8", ("time",))
        v.units, v.calendar, v.standard_name = "hours since 2031-01-01 00:00:00", "standard", "time"
        v[:] = np.arange(NT) * 6.0
        v = ds.createVariable("level", "f8", ("level",))
        v.units, v.standard_name, v.positive = "hPa", "air_pressure", "down"
        v[:] = LEVELS
        v = ds.createVariable("latitude", "f8", ("latitude",))
        v.units, v.standard_name = "degrees_north", "latitude"
        v[:] = lat
        v = ds.createVariable("longitude", "f8", ("longitude",))
        v.units, v.standard_name = "degrees_east", "longitude"
        v[:] = lon
        names = {"t": ("air_temperature", "K"), "z": ("geopotential", "m2 s-2"), "u": ("eastward_wind", "m s-1"), "v": ("northward_wind", "m s-1")}
        variables = {}
        for name, (standard_name, units) in names.items():
            var = ds.createVariable(name, "f4", ("time", "level", "latitude", "longitude"))
            var.standard_name, var.units = standard_name, units
            variables[name] = var
        for k in range(NT):
            wave = 3.0 * np.cos(np.radians(4 * (lon[None, :] - 2.0 * k))) * np.cos(phi) ** 2
            t_near = 288.0 - 40.0 * np.sin(phi) ** 2 + wave
            height = np.zeros((NY, NX))
            previous = None
            for j, p in enumerate(LEVELS):
                # Temperature falls 6.5 K/km up to about 225 hPa, constant above.
                t = np.maximum(t_near * (p / 1000.0) ** (RD * 0.0065 / G0), 216.65).astype("f4")
                if previous is not None:
                    height += RD / G0 * 0.5 * (previous + t) * np.log(LEVELS[j - 1] / p)
                previous = t
                geopotential = G0 * height
                dzdy = np.gradient(geopotential, np.radians(lat), axis=0) / A
                dzdx = np.gradient(geopotential, np.radians(lon), axis=1) / (A * np.maximum(np.cos(phi), 1e-3))
                variables["t"][k, j] = t
                variables["z"][k, j] = geopotential.astype("f4")
                variables["u"][k, j] = (-dzdy / f).astype("f4")
                variables["v"][k, j] = (dzdx / f).astype("f4")
            print(f"  time step {k + 1}/{NT}", flush=True)
    partial.rename(PATH)
    print(f"generated in {time.monotonic() - started:.0f} s")


def measure(command):
    started = time.monotonic()
    process = subprocess.Popen(command, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    _, status, usage = os.wait4(process.pid, 0)
    elapsed = time.monotonic() - started
    out, err = process.stdout.read(), process.stderr.read()
    if os.waitstatus_to_exitcode(status) != 0:
        raise SystemExit(f"{' '.join(command)} failed:\n{err}")
    return elapsed, usage.ru_maxrss * 1024, out.strip()


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--keep", action="store_true", help="keep the generated input")
    parser.add_argument("--limit", default="4GiB")
    parser.add_argument(
        "--area",
        choices=["global", "recipe"],
        default="global",
        help="global: the recipe over the whole grid (poles aside); recipe: its default box (30N-68N, 62W-12E), which reads about 6%% of each level",
    )
    args = parser.parse_args()
    baroc = os.environ.get("BAROC_BIN", str(ROOT / "target" / "release" / "baroc"))
    if not PATH.exists():
        generate()
    recipe = ROOT / "recipes" / "thermal-wind-budget.baroc"
    working_set = step_bytes()
    rows = []
    try:
        for label, extra in ((f"--memory-limit {args.limit}", ["--memory-limit", args.limit]), ("whole run", [])):
            out = DATA / "bounded-out.nc"
            area = ["--set", "area=box(89.5 south to 89.5 north, 180 west to 180 east)"] if args.area == "global" else []
            elapsed, rss, said = measure([baroc, "run", str(recipe), *area, *extra, "-o", str(out), str(PATH)])
            out.unlink(missing_ok=True)
            rows.append((label, elapsed, rss, said))
    finally:
        if not args.keep:
            PATH.unlink(missing_ok=True)
    print(f"\ninput: {NT} time steps of 4 variables x {len(LEVELS)} levels x {NY} x {NX} float32 ({NT * working_set / 1e9:.2f} GB)")
    print(f"recipe: thermal-wind budget of 1000 hPa to 500 hPa, area: {args.area}")
    print(f"one time step's working set (every variable, every level): {working_set / 1e6:.0f} MB")
    print(f"{'run':<26}{'seconds':>9}{'steps/s':>9}{'peak RSS (MB)':>15}{'RSS / step set':>16}")
    for label, elapsed, rss, said in rows:
        print(f"{label:<26}{elapsed:>9.1f}{NT / elapsed:>9.2f}{rss / 1e6:>15.0f}{rss / working_set:>16.2f}")
    for label, _, _, said in rows:
        print(f"  {label}: {said.splitlines()[-1] if said else ''}")


if __name__ == "__main__":
    main()
