"""What a reader sees in a NetCDF file, for comparing two files value for
value: global attributes (less provenance), dimensions, and per variable its
type, dimensions, attributes and raw bytes (read without masking or
scaling, so fill values and NaN patterns compare too). Used by the shard
tests and by scripts/test-slurm."""

import sys

import netCDF4
import numpy as np


def is_provenance(name):
    # What says where a file came from rather than what it holds.
    return name == "history" or name.startswith("baroc_shard_") or name.startswith("baroc_merged_")


def content(path):
    with netCDF4.Dataset(path) as ds:
        ds.set_auto_maskandscale(False)
        out = {
            "attributes": {k: ds.getncattr(k) for k in ds.ncattrs() if not is_provenance(k)},
            "dimensions": {k: len(d) for k, d in ds.dimensions.items()},
            "variables": {},
        }
        for name, v in ds.variables.items():
            attributes = {}
            for k in v.ncattrs():
                value = v.getncattr(k)
                attributes[k] = value.tobytes() if isinstance(value, np.ndarray) else value
            out["variables"][name] = (str(v.dtype), v.dimensions, attributes, np.asarray(v[:]).tobytes())
        return out


def assert_same_content(a, b):
    ca, cb = content(a), content(b)
    assert ca["attributes"] == cb["attributes"], f"global attributes differ: {a} vs {b}"
    assert ca["dimensions"] == cb["dimensions"], f"dimensions differ: {ca['dimensions']} vs {cb['dimensions']}"
    assert list(ca["variables"]) == list(cb["variables"]), "variables differ"
    for name in ca["variables"]:
        assert ca["variables"][name][:3] == cb["variables"][name][:3], f"{name}: type, dimensions or attributes differ"
        assert ca["variables"][name][3] == cb["variables"][name][3], f"{name}: the bytes differ"
    return len(ca["variables"])


if __name__ == "__main__":
    count = assert_same_content(sys.argv[1], sys.argv[2])
    print(f"{sys.argv[1]} and {sys.argv[2]} hold the same {count} variables, byte for byte, with the same attributes (provenance aside)")
