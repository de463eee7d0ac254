"""Reference timings for the engine benchmark: the same operations in numpy.

Run by `cargo bench --bench engine`, which reads the JSON this prints on
stdout; it can also be run alone:

    python benches/engine_numpy.py [--spacing 0.25] [--repeats 5]

The synthetic fields are generated from the same formulas as in
benches/engine.rs (an invented, smooth, hydrostatically consistent
atmosphere), and the operations are written the way a competent numpy user
would write them for a whole array at once:

- geostrophic wind on every level: np.gradient(edge_order=2) along latitude
  on radian coordinates, a centred difference with np.roll along the
  periodic longitude, u = -(g0/f) dZ/dy, v = (g0/f) dZ/dx (field guide);
- thickness of every pair of adjacent levels: the trapezoid rule in ln p,
  dz = (Rd/g0) (T_b + T_t)/2 ln(p_b/p_t) (hypsometric equation);
- thermal wind of every such layer from its thickness:
  u_T = -(g0/f) d(dz)/dy, v_T = (g0/f) d(dz)/dx (field guide).

Rows with |latitude| below 5 degrees and the poles are NaN, as in Baroc.
All arrays are float32 like the data; numpy computes the np.gradient
weights in float64, as it does by default.
"""

import argparse
import json
import statistics
import sys
import time

import numpy as np

# Constants (field guide; each with its source there).
GRAVITY = 9.80665  # standard gravity, CGPM 1901
DRY_AIR_GAS_CONSTANT = 8.31432 / 0.0289644  # R*/M0, U.S. Standard Atmosphere 1976
ROTATION_RATE = 7.292115e-5  # WGS 84 / IERS
EARTH_RADIUS = 6_371_000.0  # IUGG mean radius, rounded
EQUATOR_BAND = 5.0  # degrees; common practice

# The 37 standard pressure levels of a modern reanalysis, hPa, bottom first.
LEVELS_HPA = [1000, 975, 950, 925, 900, 875, 850, 825, 800, 775, 750, 700, 650, 600, 550,
              500, 450, 400, 350, 300, 250, 225, 200, 175, 150, 125, 100, 70, 50, 30, 20,
              10, 7, 5, 3, 2, 1]

# Points whose values the Rust side compares with its own results
# (level or layer index, latitude index, longitude index) as fractions of the
# grid so they exist at any spacing.
SAMPLE_FRACTIONS = [(5, 0.12, 0.0), (20, 0.8, 0.54), (30, 0.3, 0.999), (0, 0.001, 0.25), (35, 0.95, 0.5)]


def grid(spacing):
    ny = int(round(180.0 / spacing)) + 1
    nx = int(round(360.0 / spacing))
    latitudes = 90.0 - spacing * np.arange(ny)  # north first, like reanalyses
    longitudes = spacing * np.arange(nx)
    return latitudes, longitudes


def synthetic_fields(latitudes, longitudes):
    """Temperature (K) and geopotential height (m) on [level, lat, lon].

    With s = ln(p0/p), p0 = 1000 hPa:
      T(s, lat, lon) = 200 + 88 exp(-s) + 10 s + cos(k s) H(lat, lon),
      k = pi / 3.4 (the meridional contrast reverses near 180 hPa),
      H = -30 (sin^2 lat - 1/3) + 5 sin^2(2 lat) cos(6 lon) + 2 cos(lat) sin(3 lon);
      Z = Z0(lat, lon) + (Rd/g0) integral_0^s T ds'
        = Z0 + (Rd/g0) [200 s + 88 (1 - exp(-s)) + 5 s^2 + H sin(k s)/k],
      Z0 = 110 + 80 sin^2(2 lat) cos(4 lon + 1),
    so Z and T satisfy the hydrostatic equation dZ/d(ln p) = -(Rd/g0) T
    exactly. Invented for the benchmark; computed in float64 and stored as
    float32, as in benches/engine.rs.
    """
    lat = np.deg2rad(latitudes)[:, None]
    lon = np.deg2rad(longitudes)[None, :]
    horizontal = (-30.0 * (np.sin(lat) ** 2 - 1.0 / 3.0)
                  + 5.0 * np.sin(2.0 * lat) ** 2 * np.cos(6.0 * lon)
                  + 2.0 * np.cos(lat) * np.sin(3.0 * lon))
    surface_height = 110.0 + 80.0 * np.sin(2.0 * lat) ** 2 * np.cos(4.0 * lon + 1.0)
    s = np.log(1000.0 / np.asarray(LEVELS_HPA, dtype=np.float64))
    k = np.pi / 3.4
    base_temperature = 200.0 + 88.0 * np.exp(-s) + 10.0 * s
    base_integral = 200.0 * s + 88.0 * (1.0 - np.exp(-s)) + 5.0 * s ** 2
    scale = DRY_AIR_GAS_CONSTANT / GRAVITY
    nz, (ny, nx) = len(s), horizontal.shape
    temperature = np.empty((nz, ny, nx), dtype=np.float32)
    height = np.empty((nz, ny, nx), dtype=np.float32)
    for level in range(nz):
        temperature[level] = base_temperature[level] + np.cos(k * s[level]) * horizontal
        height[level] = surface_height + scale * (base_integral[level] + horizontal * np.sin(k * s[level]) / k)
    return temperature, height


class Balance:
    """Per-row factors of (scale/f) k x grad on the sphere, NaN where masked."""

    def __init__(self, latitudes, longitudes):
        self.latitude_radians = np.deg2rad(latitudes)
        self.longitude_step = np.deg2rad(longitudes[1] - longitudes[0])
        coriolis = 2.0 * ROTATION_RATE * np.sin(self.latitude_radians)
        cos_latitude = np.cos(self.latitude_radians)
        masked = (np.abs(latitudes) < EQUATOR_BAND) | (np.abs(np.abs(latitudes) - 90.0) < 1e-6)
        with np.errstate(divide="ignore"):
            self.y_factor = np.where(masked, np.nan, -GRAVITY / (coriolis * EARTH_RADIUS))
            self.x_factor = np.where(masked, np.nan, GRAVITY / (coriolis * EARTH_RADIUS * cos_latitude))
        self.y_factor = self.y_factor.astype(np.float32)[None, :, None]
        self.x_factor = self.x_factor.astype(np.float32)[None, :, None]

    def wind(self, field):
        """(u, v) = (g0/f) k x grad(field) for field on [slice, lat, lon]."""
        d_dlat = np.gradient(field, self.latitude_radians, axis=1, edge_order=2)
        d_dlon = (np.roll(field, -1, axis=2) - np.roll(field, 1, axis=2)) / np.float32(2.0 * self.longitude_step)
        d_dlat *= self.y_factor
        d_dlon *= self.x_factor
        return d_dlat, d_dlon


def layer_thickness(temperature):
    """Thickness (m) of every pair of adjacent levels, trapezoid in ln p."""
    log_pressure = np.log(np.asarray(LEVELS_HPA, dtype=np.float64))
    weight = (0.5 * DRY_AIR_GAS_CONSTANT / GRAVITY * (log_pressure[:-1] - log_pressure[1:])).astype(np.float32)
    thickness = temperature[:-1] + temperature[1:]
    thickness *= weight[:, None, None]
    return thickness


def timed(function, repeats):
    function()  # warm-up
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        result = function()
        times.append((time.perf_counter() - start) * 1000.0)
        del result
    return {"median_ms": statistics.median(times), "min_ms": min(times)}


def samples(arrays, shape):
    out = []
    for level_fraction, lat_fraction, lon_fraction in SAMPLE_FRACTIONS:
        k = min(level_fraction, shape[0] - 1)
        j = min(int(lat_fraction * (shape[1] - 1)), shape[1] - 1)
        i = min(int(lon_fraction * (shape[2] - 1)), shape[2] - 1)
        values = [float(a[min(k, a.shape[0] - 1), j, i]) for a in arrays]
        # JSON has no NaN: missing values travel as null.
        out.append([value if np.isfinite(value) else None for value in values])
    return out


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--spacing", type=float, default=0.25, help="grid spacing in degrees")
    parser.add_argument("--repeats", type=int, default=5, help="timed repetitions after one warm-up")
    args = parser.parse_args()

    latitudes, longitudes = grid(args.spacing)
    temperature, height = synthetic_fields(latitudes, longitudes)
    balance = Balance(latitudes, longitudes)
    buffer = np.ones_like(height)

    results = {
        "numpy_version": np.__version__,
        "shape": list(height.shape),
        "copy": timed(lambda: height.copy(), args.repeats),
        "copy_into_existing": timed(lambda: np.copyto(buffer, height), args.repeats),
        "geostrophic_wind": timed(lambda: balance.wind(height), args.repeats),
        "thickness": timed(lambda: layer_thickness(temperature), args.repeats),
    }
    thickness = layer_thickness(temperature)
    results["thermal_wind"] = timed(lambda: balance.wind(thickness), args.repeats)
    results["thickness_and_thermal_wind"] = timed(lambda: balance.wind(layer_thickness(temperature)), args.repeats)

    # Values at a few points, for the Rust side to check that both computed
    # the same thing: [u_g, v_g] per level, [dz, u_T, v_T] per layer.
    u, v = balance.wind(height)
    u_t, v_t = balance.wind(thickness)
    results["samples"] = {
        "geostrophic_wind": samples([u, v], u.shape),
        "thermal_wind": samples([thickness, u_t, v_t], thickness.shape),
    }
    try:
        from threadpoolctl import threadpool_info

        results["blas"] = [f"{p.get('internal_api')} {p.get('version')} {p.get('architecture')}" for p in threadpool_info()]
    except ImportError:
        results["blas"] = ["threadpoolctl not installed"]
    json.dump(results, sys.stdout)
    sys.stdout.write("\n")


if __name__ == "__main__":
    main()
