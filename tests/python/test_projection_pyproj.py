"""Projected grids: Baroc's projection coordinates, map factors and wind
rotation angles against pyproj (PROJ), a general-purpose reference library
from PyPI.

Baroc's values come from the test probe `baroc-projection-probe` (built
beside the `baroc` binary by scripts/test-all; not a user command), which
reads CF grid-mapping attributes and points as JSON. Every projection is on
a sphere (`+R`), as Baroc uses Snyder's spherical forms.
Tolerance: 1e-6 relative (the issue's requirement), with 1e-3 m absolute
for coordinates that are near zero.
"""

from __future__ import annotations

import json
import math
import pathlib
import subprocess

import numpy as np
import pytest
from pyproj import Proj

R = 6_371_000.0

CASES = {
    # CF attributes, the equivalent PROJ string, latitudes to sample, the
    # longitude the samples are centred on.
    "lambert_2sp": (
        {"grid_mapping_name": "lambert_conformal_conic", "standard_parallel": [33.0, 45.0],
         "longitude_of_central_meridian": -97.0, "latitude_of_projection_origin": 40.0,
         "false_easting": 0.0, "false_northing": 0.0, "earth_radius": R},
        f"+proj=lcc +lat_1=33 +lat_2=45 +lat_0=40 +lon_0=-97 +x_0=0 +y_0=0 +R={R} +units=m",
        [20.0, 35.0, 50.0, 65.0], -97.0,
    ),
    "lambert_1sp": (
        {"grid_mapping_name": "lambert_conformal_conic", "standard_parallel": 50.0,
         "longitude_of_central_meridian": 10.0, "latitude_of_projection_origin": 50.0,
         "false_easting": 1000.0, "false_northing": -2000.0, "earth_radius": R},
        f"+proj=lcc +lat_1=50 +lat_2=50 +lat_0=50 +lon_0=10 +x_0=1000 +y_0=-2000 +R={R} +units=m",
        [30.0, 45.0, 60.0, 75.0], 10.0,
    ),
    "lambert_south": (
        {"grid_mapping_name": "lambert_conformal_conic", "standard_parallel": [-30.0, -60.0],
         "longitude_of_central_meridian": 140.0, "latitude_of_projection_origin": -45.0,
         "earth_radius": R},
        f"+proj=lcc +lat_1=-30 +lat_2=-60 +lat_0=-45 +lon_0=140 +R={R} +units=m",
        [-70.0, -50.0, -30.0, -10.0], 140.0,
    ),
    "polar_north": (
        {"grid_mapping_name": "polar_stereographic", "latitude_of_projection_origin": 90.0,
         "straight_vertical_longitude_from_pole": -105.0, "standard_parallel": 60.0,
         "earth_radius": R},
        f"+proj=stere +lat_0=90 +lat_ts=60 +lon_0=-105 +R={R} +units=m",
        [30.0, 50.0, 70.0, 85.0], -105.0,
    ),
    "polar_south": (
        {"grid_mapping_name": "polar_stereographic", "latitude_of_projection_origin": -90.0,
         "straight_vertical_longitude_from_pole": 0.0, "scale_factor_at_projection_origin": 0.97,
         "false_easting": 5.0e5, "false_northing": 5.0e5, "earth_radius": R},
        f"+proj=stere +lat_0=-90 +k_0=0.97 +lon_0=0 +x_0=500000 +y_0=500000 +R={R} +units=m",
        [-85.0, -70.0, -50.0, -30.0], 0.0,
    ),
}

# CF rotated pole (appendix F) in PROJ terms: ob_tran with o_lat_p the grid
# pole latitude, o_lon_p the north pole grid longitude and lon_0 = 180 + the
# grid pole longitude.
ROTATED = (
    {"grid_mapping_name": "rotated_latitude_longitude", "grid_north_pole_latitude": 40.0,
     "grid_north_pole_longitude": -170.0, "earth_radius": R},
    f"+proj=ob_tran +o_proj=longlat +o_lat_p=40 +o_lon_p=0 +lon_0=10 +R={R}",
)

OFFSETS = [-50.0, -20.0, 0.0, 15.0, 45.0]


@pytest.fixture(scope="module")
def probe(baroc):
    path = pathlib.Path(baroc).with_name("baroc-projection-probe")
    if not path.exists():
        pytest.fail(f"{path} is missing: scripts/test-all builds it with `cargo build --release --bins`")
    return str(path)


def ask(probe, mapping, points=(), grid_points=()):
    request = {"grid_mapping": mapping, "points": [list(p) for p in points], "grid_points": [list(p) for p in grid_points]}
    done = subprocess.run([probe], input=json.dumps(request), capture_output=True, text=True)
    assert done.returncode == 0, done.stderr
    return json.loads(done.stdout)


def close(a, b, relative=1e-6, absolute=1e-3):
    return abs(a - b) <= relative * abs(b) + absolute


@pytest.mark.parametrize("name", sorted(CASES))
def test_coordinates_and_map_factors_match_proj(probe, name):
    mapping, proj_string, latitudes, centre = CASES[name]
    proj = Proj(proj_string)
    points = [(lat, centre + d) for lat in latitudes for d in OFFSETS]
    ours = ask(probe, mapping, points)["forward"]
    for (lat, lon), (x, y, k, _) in zip(points, ours):
        px, py = proj(lon, lat)
        assert close(x, px) and close(y, py), f"{name} at {lat}, {lon}: ({x}, {y}) vs PROJ ({px}, {py})"
        factors = proj.get_factors(lon, lat)
        # Conformal: the meridional and parallel scales are equal, and equal k.
        assert close(k, factors.parallel_scale, absolute=0.0), f"{name} at {lat}, {lon}: k {k} vs {factors.parallel_scale}"
        assert close(k, factors.meridional_scale, absolute=0.0)


@pytest.mark.parametrize("name", sorted(CASES))
def test_inverse_matches_proj(probe, name):
    mapping, proj_string, latitudes, centre = CASES[name]
    proj = Proj(proj_string)
    points = [(lat, centre + d) for lat in latitudes for d in OFFSETS]
    grid_points = [proj(lon, lat) for lat, lon in points]
    ours = ask(probe, mapping, grid_points=grid_points)["inverse"]
    for (x, y), (lat, lon) in zip(grid_points, ours):
        plon, plat = proj(x, y, inverse=True)
        assert abs(lat - plat) < 1e-8, f"{name} at ({x}, {y}): lat {lat} vs {plat}"
        assert abs((lon - plon + 540.0) % 360.0 - 180.0) < 1e-8, f"{name} at ({x}, {y}): lon {lon} vs {plon}"


@pytest.mark.parametrize("name", sorted(CASES))
def test_rotation_angle_matches_proj_meridian_convergence(probe, name):
    """PROJ's meridian convergence (degrees: the angle between grid north
    and true north) equals Baroc's east angle (the angle of east from the
    grid's x axis): on a conformal grid north is east turned by 90 degrees,
    so both measure the same rotation, with the same sign."""
    mapping, proj_string, latitudes, centre = CASES[name]
    proj = Proj(proj_string)
    points = [(lat, centre + d) for lat in latitudes for d in OFFSETS]
    ours = ask(probe, mapping, points)["forward"]
    for (lat, lon), (_, _, _, angle) in zip(points, ours):
        convergence = proj.get_factors(lon, lat).meridian_convergence
        assert abs(math.degrees(angle) - convergence) < 1e-6, f"{name} at {lat}, {lon}: {math.degrees(angle)} vs {convergence}"


def test_lambert_rotation_is_cone_constant_times_longitude_offset(probe):
    """Snyder (1987) eqs. (15-1), (15-3): theta = n (lambda - lambda0), n =
    ln(cos phi1 / cos phi2) / ln(tan(45 + phi2/2) / tan(45 + phi1/2))."""
    mapping, _, latitudes, centre = CASES["lambert_2sp"]
    p1, p2 = map(math.radians, mapping["standard_parallel"])
    n = math.log(math.cos(p1) / math.cos(p2)) / math.log(math.tan(math.pi / 4 + p2 / 2) / math.tan(math.pi / 4 + p1 / 2))
    points = [(lat, centre + d) for lat in latitudes for d in OFFSETS]
    ours = ask(probe, mapping, points)["forward"]
    for (lat, lon), (_, _, _, angle) in zip(points, ours):
        assert abs(angle - n * math.radians(lon - centre)) < 1e-8


def test_rotated_pole_matches_proj(probe):
    mapping, proj_string = ROTATED
    proj = Proj(proj_string)
    points = [(lat, lon) for lat in (30.0, 45.0, 55.0, 70.0) for lon in (-20.0, 0.0, 10.0, 35.0)]
    ours = ask(probe, mapping, points)["forward"]
    for (lat, lon), (x, y, k, _) in zip(points, ours):
        rlon, rlat = proj(lon, lat)
        # PROJ gives ob_tran longlat coordinates in radians.
        rlon, rlat = np.degrees(rlon), np.degrees(rlat)
        assert abs(x - rlon) < 1e-7 and abs(y - rlat) < 1e-7, f"at {lat}, {lon}: ({x}, {y}) vs PROJ ({rlon}, {rlat})"
        # On the rotated sphere the grid is latitude-longitude: x scale 1/cos(lat').
        assert close(k, 1.0 / math.cos(math.radians(rlat)), absolute=0.0)
    back = ask(probe, mapping, grid_points=[(x, y) for x, y, _, _ in ours])["inverse"]
    for (lat, lon), (lat2, lon2) in zip(points, back):
        assert abs(lat - lat2) < 1e-9 and abs((lon - lon2 + 540.0) % 360.0 - 180.0) < 1e-9


def test_missing_parameter_is_a_clear_error(probe):
    request = {"grid_mapping": {"grid_mapping_name": "lambert_conformal_conic", "standard_parallel": [30.0, 60.0]}, "points": []}
    done = subprocess.run([probe], input=json.dumps(request), capture_output=True, text=True)
    assert done.returncode != 0
    assert "longitude_of_central_meridian" in done.stderr
    assert "panicked" not in done.stderr
