"""Speed of the within-group pair kernel (obsprep.superobs.pairs), a script, not a test.

    python benchmarks/pairs_kernel.py              # 2 M rows in groups of about 100
    python benchmarks/pairs_kernel.py --rows 200000

Prints: the import time of numba in a fresh process; the first call in a fresh process with an
empty numba cache (compile) and with a filled one (load); pairs per second of the compiled
kernel on --rows rows; and the ratio against the plain numpy reference of the tests
(tests/superobs/test_pairs.py, np.subtract.outer per group) on a subset of groups.  Medians of
--repeats runs; the machine is shared, so compare ratios.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests" / "superobs"))

from test_pairs import random_groups, reference_pair_sums  # noqa: E402

from obsprep.superobs.accumulate import _group_index  # noqa: E402
from obsprep.superobs.pairs import within_group_pair_sums  # noqa: E402

_FIRST_CALL = """
import json, time
import numpy as np
started = time.perf_counter()
import numba
imported = time.perf_counter()
from obsprep.superobs.pairs import within_group_pair_sums
x, y, z = np.array([1.0, 0.0]), np.array([0.0, 1.0]), np.zeros(2)
module = time.perf_counter()
within_group_pair_sums(np.arange(2), np.array([0]), x, y, z, np.ones(2), np.ones(2), 0.5, 1e6)
called = time.perf_counter()
print(json.dumps(dict(numba_import=imported - started, first_call=called - module)))
"""


def fresh_process(cache_dir):
    """Import time of numba and the first call's time, in a new process with the given cache."""
    environment = dict(os.environ, NUMBA_CACHE_DIR=cache_dir, PYTHONPATH=str(ROOT))
    result = subprocess.run([sys.executable, "-c", _FIRST_CALL], capture_output=True, text=True, check=True,
                            env=environment)
    return json.loads(result.stdout.splitlines()[-1])


def median_seconds(function, repeats):
    times = []
    for _ in range(repeats):
        started = time.perf_counter()
        function()
        times.append(time.perf_counter() - started)
    return statistics.median(times)


def main():
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--rows", type=int, default=2_000_000)
    parser.add_argument("--group-size", type=int, default=100, help="mean group size (sizes 50..150%%)")
    parser.add_argument("--reference-groups", type=int, default=200, help="groups timed with the numpy reference")
    parser.add_argument("--repeats", type=int, default=3)
    options = parser.parse_args()

    cold, warm = [], []
    for _ in range(options.repeats):
        with tempfile.TemporaryDirectory(prefix="obsprep-numba-cache-") as cache_dir:
            cold.append(fresh_process(cache_dir))  # empty cache: compiles and fills it
            warm.append(fresh_process(cache_dir))  # loads what the first process wrote
    numba_import = statistics.median(run["numba_import"] for run in cold + warm)
    print(f"numba import (fresh process, numpy already imported): {numba_import:.3f} s")
    print(f"first call, empty cache (compile):  {statistics.median(r['first_call'] for r in cold):.3f} s")
    print(f"first call, filled cache (load):    {statistics.median(r['first_call'] for r in warm):.3f} s")

    rng = np.random.default_rng(0)
    mean = options.group_size
    sizes = rng.integers(mean // 2, mean + mean // 2 + 1, options.rows // mean)
    group_of_row, x, y, z, sigma = random_groups(rng, sizes)
    order, starts, _ = _group_index([group_of_row])
    n_pairs = int(np.sum(sizes * (sizes - 1) // 2))
    arguments = (x, y, z, sigma, 1.0 / sigma, 0.5, 5_000.0)

    within_group_pair_sums(order, starts, *arguments)  # compile or load outside the timing
    kernel_s = median_seconds(lambda: within_group_pair_sums(order, starts, *arguments), options.repeats)
    print(f"kernel: {len(order):,} rows, {len(starts):,} groups, {n_pairs:,} pairs in {kernel_s:.3f} s: "
          f"{n_pairs / kernel_s / 1e6:.1f} M pairs/s")

    subset = options.reference_groups
    subset_end = starts[subset] if subset < len(starts) else len(order)
    subset_sizes = np.diff(np.append(starts[:subset], subset_end))
    subset_pairs = int(np.sum(subset_sizes * (subset_sizes - 1) // 2))
    reference_s = median_seconds(lambda: reference_pair_sums(order[:subset_end], starts[:subset], *arguments),
                                 options.repeats)
    subset_kernel_s = median_seconds(lambda: within_group_pair_sums(order[:subset_end], starts[:subset], *arguments),
                                     options.repeats)
    got = within_group_pair_sums(order[:subset_end], starts[:subset], *arguments)
    expected = reference_pair_sums(order[:subset_end], starts[:subset], *arguments)
    worst = max(float(np.max(np.abs(g / e - 1.0))) for g, e in zip(got, expected))
    print(f"numpy reference on {subset} groups ({subset_pairs:,} pairs): {subset_pairs / reference_s / 1e6:.2f} M pairs/s; "
          f"kernel on the same: {subset_pairs / subset_kernel_s / 1e6:.1f} M pairs/s; "
          f"ratio {reference_s / subset_kernel_s:.1f}x; largest relative difference {worst:.1e}")


if __name__ == "__main__":
    main()
