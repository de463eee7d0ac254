"""Round trip of a trivial cell: the Baroc kernel against ipykernel.

One round trip = execute_request sent -> execute_reply received on shell and
status idle received on iopub (what a notebook waits for before the cell
counts as done). Both kernels are driven by the same jupyter_client code in
the same run, so the ratio is fair on a busy machine; absolute times depend
on the machine. Target for the Baroc kernel: median <= 3 ms.

    python tests/python/bench_kernel_roundtrip.py [--rounds 300]
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

from jupyter_client.manager import start_new_kernel  # noqa: E402

from kernel_env import TemporaryJupyter  # noqa: E402

TARGET_MS = 3.0
MAP_TARGET_MS = 150.0


def round_trips(kernel_name: str, code: str, rounds: int, warmup: int, setup: str | None = None) -> list[float]:
    km, kc = start_new_kernel(kernel_name=kernel_name, startup_timeout=60)
    try:
        if setup is not None:
            kc.execute_interactive(setup, timeout=120)
        timings = []
        for index in range(warmup + rounds):
            started = time.perf_counter()
            msg_id = kc.execute(code, store_history=False)
            reply_seen = idle_seen = False
            while not reply_seen:
                reply = kc.get_shell_msg(timeout=10)
                reply_seen = reply["parent_header"].get("msg_id") == msg_id
            if reply["content"]["status"] != "ok":
                raise RuntimeError(f"{kernel_name}: {code!r} failed: {reply['content']}")
            while not idle_seen:
                message = kc.get_iopub_msg(timeout=10)
                idle_seen = (
                    message["parent_header"].get("msg_id") == msg_id
                    and message["msg_type"] == "status"
                    and message["content"]["execution_state"] == "idle"
                )
            elapsed = time.perf_counter() - started
            if index >= warmup:
                timings.append(elapsed * 1000.0)
        return timings
    finally:
        kc.stop_channels()
        km.shutdown_kernel(now=True)


def describe(name: str, timings: list[float]) -> str:
    quartiles = statistics.quantiles(timings, n=4)
    return (
        f"{name:10s} median {statistics.median(timings):6.3f} ms   "
        f"quartiles {quartiles[0]:6.3f} .. {quartiles[2]:6.3f} ms   ({len(timings)} rounds)"
    )


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rounds", type=int, default=300)
    parser.add_argument("--warmup", type=int, default=30)
    options = parser.parse_args()

    import subprocess
    import tempfile

    from kernel_env import baroc_binary

    jupyter = TemporaryJupyter()
    demo = Path(tempfile.mkdtemp(prefix="baroc-bench-"))
    subprocess.run([str(baroc_binary()), "demo", "--output", str(demo)], check=True, capture_output=True)
    try:
        baroc = round_trips("baroc", "1+2", options.rounds, options.warmup)
        # ipykernel's own kernelspec ("python3") ships inside the environment.
        python = round_trips("python3", "1+2", options.rounds, options.warmup)
        # A thermal-wind map of one analysis of the demo case, from
        # execute_request to idle (reading, computing, drawing SVG and PNG).
        maps = round_trips(
            "baroc",
            "map(thermal_wind(1000 hPa to 500 hPa) at time(4))",
            max(10, options.rounds // 20),
            3,
            setup=f'open "{demo / "marrowind-wave-2026-10-14.nc"}"',
        )
    finally:
        jupyter.close()

    baroc_median = statistics.median(baroc)
    python_median = statistics.median(python)
    print(describe("baroc", baroc))
    print(describe("ipykernel", python))
    print(f"ratio baroc / ipykernel: {baroc_median / python_median:.2f}")
    verdict = "meets" if baroc_median <= TARGET_MS else "misses"
    print(f"baroc median {baroc_median:.3f} ms {verdict} the {TARGET_MS:.0f} ms target")
    map_median = statistics.median(maps)
    print(describe("map cell", maps))
    print(f"thermal-wind map cell median {map_median:.1f} ms {'meets' if map_median <= MAP_TARGET_MS else 'misses'} the {MAP_TARGET_MS:.0f} ms target")
    return 0


if __name__ == "__main__":
    sys.exit(main())
