"""Speed of the compiled accumulation (obsprep.superobs.batch_kernels), a script, not a test.

    python benchmarks/accumulate_kernel.py                 # 20 M observations
    python benchmarks/accumulate_kernel.py --rows 2000000  # smaller

Rows:

- random cells: --rows observations in random cells of an 800 x 880 x 4 grid (the data of the
  accumulation row of benchmarks/run.py), full state (varying errors, times, positions): the
  compiled path and the numpy reference path of ``Accumulator.from_observations``, each also
  with ``finalize``, against pandas groupby computing count, mean, std and the sum of sigma^2;
- swath order: --rows observations in the order a swath delivers them (scan lines across the
  grid, neighbouring pixels in neighbouring cells, four passes in four time slots):
  observations per second of ``from_observations`` on one core;
- start: importing numba and loading the cached kernels in a fresh process (warm: the cache
  filled), and compiling them into an empty cache (cold);
- stages (``--stages``): for both orders, the compiled path's time split into the bins of the
  rows (``_compiled_grouping``: the packed code and the rows per code), the sums and the
  per-group state (``_compiled_state``) and ``finalize``, to show where the time goes.

Medians of --repeats runs, the sides interleaved; the machine is shared, so compare ratios.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(ROOT))

import synthetic  # noqa: E402

from obsprep.superobs.accumulate import Accumulator, _from_observations  # noqa: E402

_FRESH = """
import json, time
started = time.perf_counter()
import numpy as np
from obsprep.superobs.accumulate import Accumulator
imported = time.perf_counter()
cpu_before = time.process_time()
import numba
numba_imported = time.perf_counter()
Accumulator.from_observations({"i": np.array([0, 1, 1])}, np.array([1.0, 2.0, 4.0]),
                              np.array([1.0, 2.0, 2.0]), np.array([0.0, 1.0, 2.0]),
                              np.zeros(3), np.zeros(3), np.array([0.0, 1.0, 2.0]))
called = time.perf_counter()
print(json.dumps(dict(obsprep_import=imported - started, numba_import=numba_imported - imported,
                      first_call=called - numba_imported,
                      overhead_cpu=time.process_time() - cpu_before)))
"""


def fresh_process(cache_dir):
    environment = dict(os.environ, NUMBA_CACHE_DIR=cache_dir, PYTHONPATH=str(ROOT))
    result = subprocess.run([sys.executable, "-c", _FRESH], capture_output=True, text=True,
                            check=True, env=environment)
    return json.loads(result.stdout.splitlines()[-1])


def _cpu_seconds():
    usage = resource.getrusage(resource.RUSAGE_SELF)
    return usage.ru_utime + usage.ru_stime


def interleaved(functions, repeats):
    """Median wall seconds and median processor seconds (user + system: what this process
    itself spent, less sensitive to other processes on a busy machine) of each function."""
    wall = {name: [] for name in functions}
    cpu = {name: [] for name in functions}
    for _ in range(repeats):
        for name, function in functions.items():
            started, cpu_started = time.perf_counter(), _cpu_seconds()
            function()
            wall[name].append(time.perf_counter() - started)
            cpu[name].append(_cpu_seconds() - cpu_started)
    return ({name: statistics.median(values) for name, values in wall.items()},
            {name: statistics.median(values) for name, values in cpu.items()})


def random_cells(n):
    i, j, slot, value, error, rng = synthetic.random_observations(n, 800, 880, 4)
    time_s = rng.uniform(-86400.0, 0.0, n)
    lon = rng.uniform(-60.0, 0.0, n)
    lat = rng.uniform(60.0, 80.0, n)
    return {"slot": slot, "j": j, "i": i}, value, error, time_s, lon, lat


def swath_order(n, nx=800, ny=880, n_slots=4, pixels_per_scan=2000):
    """Rows as a swath delivers them: scan lines of ``pixels_per_scan`` pixels across the i
    axis, successive scans down the j axis, one pass over the grid per time slot."""
    rng = np.random.default_rng(1)
    row = np.arange(n)
    scan, pixel = np.divmod(row, pixels_per_scan)
    scans_per_pass = max(n // pixels_per_scan // n_slots, 1)
    slot = np.minimum(scan // scans_per_pass, n_slots - 1)
    i = pixel * nx // pixels_per_scan
    j = (scan % scans_per_pass) * ny // scans_per_pass
    lon = -60.0 + 60.0 * pixel / pixels_per_scan + 0.01 * rng.standard_normal(n)
    lat = 60.0 + 20.0 * (scan % scans_per_pass) / scans_per_pass
    value = 271.35 + 10.0 * lat / 80.0 + 0.2 * rng.standard_normal(n)
    error = 0.3 + 0.3 * rng.random(n)
    time_s = -86400.0 + 86400.0 * row / n
    return {"slot": slot, "j": j, "i": i}, value, error, time_s, lon, lat


def main():
    parser = argparse.ArgumentParser(description=__doc__,
                                     formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--rows", type=int, default=20_000_000)
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--skip-reference", action="store_true",
                        help="leave out the numpy reference path (slow at 20 M rows)")
    parser.add_argument("--stages", action="store_true",
                        help="only the split of the compiled path into its stages")
    options = parser.parse_args()
    n = options.rows
    if options.stages:
        for name, rows in (("random cells", random_cells), ("swath order", swath_order)):
            stage_row(name, rows(n), options.repeats)
        return

    cold, warm = [], []
    for _ in range(options.repeats):
        with tempfile.TemporaryDirectory(prefix="obsprep-numba-cache-") as cache_dir:
            cold.append(fresh_process(cache_dir))
            warm.append(fresh_process(cache_dir))
    median = statistics.median
    print(f"fresh process: import obsprep.superobs.accumulate "
          f"{median(r['obsprep_import'] for r in warm):.3f} s, numba "
          f"{median(r['numba_import'] for r in warm):.3f} s; first call, filled cache (warm) "
          f"{median(r['first_call'] for r in warm):.3f} s, empty cache (cold, compiles) "
          f"{median(r['first_call'] for r in cold):.3f} s; warm overhead (numba import + first "
          f"call) {median(r['numba_import'] + r['first_call'] for r in warm):.3f} s wall, "
          f"{median(r['overhead_cpu'] for r in warm):.3f} s processor")

    random_cell_row(n, options)
    swath_row(n, options)


def random_cell_row(n, options):
    import pandas as pd

    keys, value, error, time_s, lon, lat = random_cells(n)
    arguments = (keys, value, error, time_s, lon, lat, 0.0, None, None, None, None, None)
    frame = pd.DataFrame({"slot": keys["slot"], "j": keys["j"], "i": keys["i"], "value": value,
                          "variance": error ** 2})

    def pandas_run():
        frame.groupby(["slot", "j", "i"]).agg(count=("value", "size"), value=("value", "mean"),
                                              spread=("value", "std"),
                                              sum_variance=("variance", "sum"))

    def compiled_run():
        _from_observations(Accumulator, *arguments, compiled=True)

    def compiled_finalize_run():
        _from_observations(Accumulator, *arguments, compiled=True).finalize(mode="mean",
                                                                            correlation=0.2)

    def reference_run():
        _from_observations(Accumulator, *arguments, compiled=False)

    compiled_run()  # load the kernels outside the timing
    functions = {"pandas": pandas_run, "compiled": compiled_run,
                 "compiled + finalize": compiled_finalize_run}
    if not options.skip_reference:
        functions["numpy reference"] = reference_run
    seconds, cpu = interleaved(functions, options.repeats)
    print(f"random cells, {n:,} observations in 800 x 880 x 4 cells, full state "
          f"(wall; processor):")
    for name, value_s in seconds.items():
        print(f"  {name:22s} {value_s:7.3f} s   pandas / this = {seconds['pandas'] / value_s:5.2f};"
              f"   {cpu[name]:7.3f} s   pandas / this = {cpu['pandas'] / cpu[name]:5.2f}")



def swath_row(n, options):
    keys, value, error, time_s, lon, lat = swath_order(n)
    arguments = (keys, value, error, time_s, lon, lat, 0.0, None, None, None, None, None)

    def swath_compiled():
        _from_observations(Accumulator, *arguments, compiled=True)

    def swath_reference():
        _from_observations(Accumulator, *arguments, compiled=False)

    functions = {"compiled": swath_compiled}
    if not options.skip_reference:
        functions["numpy reference"] = swath_reference
    seconds, cpu = interleaved(functions, options.repeats)
    print(f"swath order, {n:,} observations (wall; processor):")
    for name, value_s in seconds.items():
        print(f"  {name:22s} {value_s:7.3f} s   {n / value_s / 1e6:6.1f} M observations/s;"
              f"   {cpu[name]:7.3f} s   {n / cpu[name] / 1e6:6.1f} M observations/s")


def stage_row(name, rows, repeats):
    """Median wall seconds of each stage of the compiled path (module docstring)."""
    from obsprep.superobs import accumulate
    from obsprep.superobs.batch_kernels import compiled

    keys, value, error, time_s, lon, lat = rows
    n = len(value)
    kernels = compiled()
    key_arrays = [keys[key] for key in ("slot", "j", "i")]
    columns = (value, error, time_s, lon, lat, np.float64(0.0), None, None)
    arguments = (keys, value, error, time_s, lon, lat, 0.0, None, None, None, None, None)
    seconds = {"bins": [], "sums and state": [], "finalize": []}
    for _ in range(repeats + 1):  # the first round fills the caches and is left out
        started = time.perf_counter()
        bins = accumulate._compiled_grouping(key_arrays, kernels)
        grouped = time.perf_counter()
        accumulate._compiled_state(bins, *columns)
        summed = time.perf_counter()
        accumulator = _from_observations(Accumulator, *arguments, compiled=True)
        before_finalize = time.perf_counter()
        accumulator.finalize(mode="mean", correlation=0.2)
        finished = time.perf_counter()
        for stage, spent in zip(seconds, (grouped - started, summed - grouped,
                                          finished - before_finalize)):
            seconds[stage].append(spent)
    medians = {stage: statistics.median(values[1:]) for stage, values in seconds.items()}
    total = sum(medians.values())
    print(f"stages, {name}, {n:,} observations, {bins.n_bins:,} bins (median wall s of "
          f"{repeats}): " + ", ".join(f"{stage} {spent:.3f}" for stage, spent in medians.items())
          + f"; total {total:.3f} ({n / total / 1e6:.1f} M observations/s)")


if __name__ == "__main__":
    main()
