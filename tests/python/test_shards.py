"""Sharded runs (`baroc run --shard I/N`) and `baroc merge`, read back with
netCDF4-python: the merged file holds exactly what one unsharded run writes
(every variable's bytes, every attribute but provenance), and merge refuses
shards that do not belong together, naming the first disagreement."""

import os
import random
import shutil
import subprocess

import netCDF4
import numpy as np
import pytest

from conftest import ROOT, run
from netcdf_content import assert_same_content

RECIPE = ROOT / "recipes" / "thermal-wind-budget.baroc"


@pytest.fixture(scope="module")
def shards(baroc, demo_case, tmp_path_factory):
    """One unsharded run of the thermal-wind budget and its four shards."""
    directory = tmp_path_factory.mktemp("shards")
    full = directory / "full.nc"
    run(baroc, "run", RECIPE, "-o", full, demo_case)
    parts = []
    for i in range(1, 5):
        part = directory / f"part-{i}.nc"
        run(baroc, "run", RECIPE, "--shard", f"{i}/4", "-o", part, demo_case)
        parts.append(part)
    return full, parts


def test_merged_shards_hold_exactly_what_one_run_writes(baroc, shards, tmp_path):
    full, parts = shards
    shuffled = parts[:]
    random.Random(11).shuffle(shuffled)
    merged = tmp_path / "merged.nc"
    done = run(baroc, "merge", merged, *shuffled)
    assert "merged 4 shards (5 of 5 time steps)" in done.stdout
    assert_same_content(full, merged)
    # The content check is not vacuous: the merged file has all five
    # analyses, and a single shard is not equal to the whole.
    with netCDF4.Dataset(merged) as ds:
        assert len(ds.dimensions["time"]) == 5
        # Provenance of every shard: its history and its block.
        described = ds.getncattr("baroc_merged_shards").splitlines()
        assert [line.split(":")[0] for line in described] == [f"shard {i}/4" for i in range(1, 5)]
        assert all("part-" in line for line in described)
        assert ds.getncattr("history").count("baroc") >= 5
        assert not any(k.startswith("baroc_shard_") for k in ds.ncattrs())
    with pytest.raises(AssertionError):
        assert_same_content(full, parts[0])


def test_shards_split_the_times_into_contiguous_blocks_and_record_them(shards, demo_case):
    _, parts = shards
    with netCDF4.Dataset(demo_case) as ds:
        times = ds["time"][:]
    # Five steps in four shards: blocks floor(i*5/4) .. floor((i+1)*5/4),
    # i.e. one step each and two in the last.
    expected = [(0, 1), (1, 1), (2, 1), (3, 2)]
    for i, (part, (first, count)) in enumerate(zip(parts, expected), start=1):
        with netCDF4.Dataset(part) as ds:
            assert ds.getncattr("baroc_shard_index") == str(i)
            assert ds.getncattr("baroc_shard_count") == "4"
            assert ds.getncattr("baroc_shard_first_time_step") == str(first)
            assert ds.getncattr("baroc_shard_time_steps") == str(count)
            assert ds.getncattr("baroc_shard_dataset_time_steps") == "5"
            # The demo: five analyses six hours apart from 2026-10-14 00 UTC.
            assert ds.getncattr("baroc_shard_dataset_time_range") == "2026-10-14T00:00:00 to 2026-10-15T00:00:00"
            assert "thermal_wind(layer)" in ds.getncattr("baroc_script")
            # The time coordinate is the dataset's own (same units: demo
            # and output both say hours since an epoch).
            assert len(ds.dimensions["time"]) == count
            with netCDF4.Dataset(demo_case) as source:
                expected_times = netCDF4.num2date(times[first : first + count], source["time"].units)
            got = netCDF4.num2date(ds["time"][:], ds["time"].units, ds["time"].calendar)
            assert [t.isoformat() for t in got] == [t.isoformat() for t in expected_times]


def test_slurm_array_tasks_count_from_the_arrays_minimum(baroc, shards, demo_case, tmp_path):
    _, parts = shards
    # A zero-based array (`--array=0-3`): task 2 is the third shard.
    env = dict(os.environ, SLURM_ARRAY_TASK_ID="2", SLURM_ARRAY_TASK_COUNT="4", SLURM_ARRAY_TASK_MIN="0", SLURM_ARRAY_TASK_MAX="3")
    out = tmp_path / "task.nc"
    done = subprocess.run([baroc, "run", str(RECIPE), "--shard", "slurm", "-o", str(out), str(demo_case)], env=env, capture_output=True, text=True)
    assert done.returncode == 0, done.stderr
    assert_same_content(parts[2], out)
    # Outside a job array the error says what is missing and what to do.
    env = {k: v for k, v in os.environ.items() if not k.startswith("SLURM_")}
    done = subprocess.run([baroc, "run", str(RECIPE), "--shard", "slurm", "-o", str(out), str(demo_case)], env=env, capture_output=True, text=True)
    assert done.returncode != 0 and "SLURM_ARRAY_TASK_ID is not set" in done.stderr and "--shard 2/4" in done.stderr


def test_each_time_shards_merge_to_the_same_result(baroc, shards, demo_case, tmp_path):
    full, _ = shards
    parts = []
    for i in (1, 2):
        part = tmp_path / f"each-{i}.nc"
        run(baroc, "run", RECIPE, "--each-time", "--shard", f"{i}/2", "-o", part, demo_case)
        parts.append(part)
    merged = tmp_path / "merged.nc"
    run(baroc, "merge", merged, *parts)
    assert_same_content(full, merged)


def test_gaps_and_overlaps_are_refused_unless_accepted(baroc, shards, tmp_path):
    _, parts = shards
    out = tmp_path / "merged.nc"
    done = run(baroc, "merge", out, parts[0], parts[2], parts[3], check=False)
    assert done.returncode != 0
    assert "gap: time step 1 is in no shard" in done.stderr and parts[0].name in done.stderr and parts[2].name in done.stderr
    assert not out.exists()
    done = run(baroc, "merge", out, *parts[:3], check=False)
    assert done.returncode != 0 and "time steps 3 to 4 are in no shard" in done.stderr
    done = run(baroc, "merge", out, parts[0], parts[1], parts[1], parts[2], parts[3], check=False)
    assert done.returncode != 0 and "overlap: time step 1 is in both" in done.stderr
    assert not out.exists()
    # Accepted: the gap is left out and recorded.
    done = run(baroc, "merge", "--accept-gaps-and-overlaps", out, parts[3], parts[0], parts[2], parts[3])
    with netCDF4.Dataset(out) as ds:
        assert len(ds.dimensions["time"]) == 4
        assert ds.getncattr("baroc_merged_missing_time_steps") == "1"
        assert ds.getncattr("baroc_merged_repeated_time_steps") == "3 4"
        assert np.all(np.diff(ds["time"][:]) > 0)


def test_shards_of_different_runs_are_refused(baroc, shards, demo_case, tmp_path):
    _, parts = shards
    other = tmp_path / "other-2.nc"
    run(baroc, "run", RECIPE, "--set", "layer=850 hPa to 300 hPa", "--shard", "2/4", "-o", other, demo_case)
    out = tmp_path / "merged.nc"
    done = run(baroc, "merge", out, parts[0], other, parts[2], parts[3], check=False)
    assert done.returncode != 0
    assert "other-2.nc was made with other parameters" in done.stderr and "part-1.nc" in done.stderr
    assert not out.exists()
    # Another shard count is another partition.
    two = tmp_path / "two-2.nc"
    run(baroc, "run", RECIPE, "--shard", "2/2", "-o", two, demo_case)
    done = run(baroc, "merge", out, parts[0], two, check=False)
    assert done.returncode != 0 and "baroc_shard_count" in done.stderr


def tampered(source, directory, change):
    copy = directory / ("tampered-" + source.name)
    shutil.copy(source, copy)
    with netCDF4.Dataset(copy, "a") as ds:
        change(ds)
    return copy


def test_the_first_disagreement_is_named_with_its_file(baroc, shards, tmp_path):
    _, parts = shards
    out = tmp_path / "merged.nc"

    def units(ds):
        ds["warming"].units = "K s-1"

    copy = tampered(parts[1], tmp_path, units)
    done = run(baroc, "merge", out, parts[0], copy, parts[2], parts[3], check=False)
    assert done.returncode != 0
    assert "variable `warming` has units `K s-1` in " + str(copy) in done.stderr
    # Results are written with udunits spellings (`K day-1`), one spelling per unit.
    assert "`K day-1` in " + str(parts[0]) in done.stderr

    def grid(ds):
        ds["latitude"][0] = ds["latitude"][0] + 0.5

    copy = tampered(parts[2], tmp_path, grid)
    done = run(baroc, "merge", out, parts[0], parts[1], copy, parts[3], check=False)
    assert done.returncode != 0 and "the grids differ: the `latitude` coordinates of" in done.stderr and copy.name in done.stderr

    def extra(ds):
        v = ds.createVariable("extra", "f4", ("latitude",))
        v[:] = 1.0

    copy = tampered(parts[3], tmp_path, extra)
    done = run(baroc, "merge", out, parts[0], parts[1], parts[2], copy, check=False)
    assert done.returncode != 0 and "has a variable `extra` that" in done.stderr
    assert not out.exists()

    # A file that is not a shard at all.
    done = run(baroc, "merge", out, parts[0], shards[0], check=False)
    assert done.returncode != 0 and "is not a shard written by `baroc run --shard I/N`" in done.stderr


def test_shard_errors_say_what_is_valid(baroc, demo_case, tmp_path):
    out = tmp_path / "x.nc"
    done = run(baroc, "run", RECIPE, "--shard", "0/4", "-o", out, demo_case, check=False)
    assert done.returncode != 0 and "counted from 1 to 4" in done.stderr
    done = run(baroc, "run", RECIPE, "--shard", "1/6", "-o", out, demo_case, check=False)
    assert done.returncode != 0 and "use at most 5 shards" in done.stderr
    done = run(baroc, "run", RECIPE, "--shard", "1/4", demo_case, check=False)
    assert done.returncode != 0 and "add --output" in done.stderr
    assert not out.exists()


def test_a_memory_limited_run_writes_what_one_whole_run_writes(baroc, shards, demo_case, tmp_path):
    full, parts = shards
    out = tmp_path / "bounded.nc"
    # 1 MB is less than one of the demo's time steps: one step per block.
    done = run(baroc, "run", RECIPE, "--memory-limit", "1MB", "-o", out, demo_case)
    assert "5 time steps in 5 blocks of at most 1" in done.stdout
    assert_same_content(full, out)
    assert [p for p in os.listdir(tmp_path) if p.endswith(".partial")] == []
    # Within a shard: the shard's own steps, in blocks, with its record.
    out = tmp_path / "bounded-shard.nc"
    done = run(baroc, "run", RECIPE, "--shard", "4/4", "--memory-limit", "1MB", "-o", out, demo_case)
    assert "2 time steps in 2 blocks" in done.stdout
    assert_same_content(parts[3], out)
    with netCDF4.Dataset(out) as ds:
        assert ds.getncattr("baroc_shard_index") == "4" and ds.getncattr("baroc_shard_first_time_step") == "3"
    done = run(baroc, "run", RECIPE, "--memory-limit", "4 parsecs", "-o", out, demo_case, check=False)
    assert done.returncode != 0 and "not a unit of size" in done.stderr
