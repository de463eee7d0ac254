"""The ecCodes side of the GRIB2 decode benchmark (benches/grib2_decode.rs).

    python benches/grib2_eccodes.py generate PATH PACKING [SPACING]
        writes 37 isobaric levels x 5 variables (t, gh, u, v, q) on a global
        lat-lon grid (default 0.25 degrees) in the given ecCodes packing
        (grid_complex_spatial_differencing, grid_ccsds), from ecCodes' own
        sample; the fields are invented, smooth with a little noise
    python benches/grib2_eccodes.py time PATH REPEATS
        decodes every message with the ecCodes Python bindings, REPEATS
        times after one warm-up, and prints JSON: median and minimum in ms,
        the message count and the sum of the values (a check that both
        decoders read the same numbers)
"""

import json
import statistics
import sys
import time

import eccodes as ec
import numpy as np

LEVELS_HPA = [1000, 975, 950, 925, 900, 875, 850, 825, 800, 775, 750, 700, 650, 600, 550, 500, 450, 400, 350, 300, 250, 225, 200, 175, 150, 125, 100, 70, 50, 30, 20, 10, 7, 5, 3, 2, 1]

# (shortName, base value, amplitude, noise, bits per value)
VARIABLES = [("t", 250.0, 30.0, 0.3, 16), ("gh", 5500.0, 300.0, 2.0, 18), ("u", 10.0, 25.0, 1.0, 16), ("v", 0.0, 20.0, 1.0, 16), ("q", 0.004, 0.004, 0.0002, 16)]


def generate(path, packing, spacing):
    lats = np.arange(90.0, -90.0 - spacing / 2, -spacing)
    lons = np.arange(0.0, 360.0 - spacing / 2, spacing)
    la, lo = np.meshgrid(np.radians(lats), np.radians(lons), indexing="ij")
    rng = np.random.default_rng(1)
    sample = ec.codes_grib_new_from_samples("regular_ll_pl_grib2")
    for key, value in {
        "Ni": len(lons),
        "Nj": len(lats),
        "latitudeOfFirstGridPointInDegrees": 90.0,
        "longitudeOfFirstGridPointInDegrees": 0.0,
        "latitudeOfLastGridPointInDegrees": -90.0,
        "longitudeOfLastGridPointInDegrees": float(lons[-1]),
        "iDirectionIncrementInDegrees": spacing,
        "jDirectionIncrementInDegrees": spacing,
    }.items():
        ec.codes_set(sample, key, value)
    with open(path, "wb") as f:
        for k, level in enumerate(LEVELS_HPA):
            for name, base, amplitude, noise, bits in VARIABLES:
                h = ec.codes_clone(sample)
                ec.codes_set(h, "shortName", name)
                ec.codes_set(h, "level", level)
                ec.codes_set(h, "bitsPerValue", bits)
                values = base + amplitude * np.cos(la) * np.sin(2 * lo + 0.1 * k) + noise * rng.standard_normal(la.shape)
                ec.codes_set_values(h, values.ravel())
                ec.codes_set(h, "packingType", packing)
                ec.codes_write(h, f)
                ec.codes_release(h)
    ec.codes_release(sample)


def decode_all(path):
    total = 0.0
    count = 0
    with open(path, "rb") as f:
        while (h := ec.codes_grib_new_from_file(f)) is not None:
            total += float(ec.codes_get_values(h).sum())
            count += 1
            ec.codes_release(h)
    return count, total


def main():
    mode, path = sys.argv[1], sys.argv[2]
    if mode == "generate":
        generate(path, sys.argv[3], float(sys.argv[4]) if len(sys.argv) > 4 else 0.25)
        return
    repeats = int(sys.argv[3])
    decode_all(path)
    times = []
    for _ in range(max(1, repeats)):
        start = time.perf_counter()
        count, total = decode_all(path)
        times.append((time.perf_counter() - start) * 1000.0)
    print(json.dumps({"median_ms": statistics.median(times), "min_ms": min(times), "messages": count, "sum": total, "eccodes": ec.codes_get_api_version()}))


if __name__ == "__main__":
    main()
