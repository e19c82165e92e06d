"""Geolocation timings: the compiled curvilinear cell search, and projected coordinates at tie
points.  A script that prints ratios (medians of repeated, interleaved runs), not a test.

    python benchmarks/locate_kernel.py                    # both parts, full sizes
    python benchmarks/locate_kernel.py --part curvilinear --n 2000000 --repeats 5
    python benchmarks/locate_kernel.py --part tie-points

curvilinear: ``CurvilinearGrid.locate`` (compiled first step, the default) against the same
search all in numpy (``search = "numpy"``) and a bare scipy ``cKDTree`` nearest-centre query, on
the sheared 800 x 880 polar grid and the positions of ``benchmarks/run.py``; the cells of the
compiled search are compared with the numpy search and with the KD-tree-guided search (both
must be identical).  Also the start-up of the kernel in a fresh process: compiled into an empty
on-disk cache (cold, after install) and loaded from it (warm).

tie-points: forward projection of a dense synthetic swath (``synthetic.write_day``'s geometry)
through PROJ for every pixel against PROJ at every k-th pixel along and across the swath with
bilinear interpolation in between: the time of each, how many pixels get another cell of the
benchmark's projected grid, and how far from a cell edge they lie (in cells).
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import textwrap
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(ROOT))

import synthetic  # noqa: E402
from run import curvilinear_points, interleaved  # noqa: E402


def curvilinear(n, repeats):
    from scipy.spatial import cKDTree

    from obsprep.geo.grid import CurvilinearGrid
    from obsprep.geo.sphere import unit_vectors_from_lonlat

    lon_c, lat_c = synthetic.curvilinear_grid()
    compiled = CurvilinearGrid(lon_c, lat_c)
    vectorised = CurvilinearGrid(lon_c, lat_c)
    vectorised.search = "numpy"
    by_tree = CurvilinearGrid(lon_c, lat_c)
    by_tree.first_guess = "tree"
    lon, lat = curvilinear_points(lon_c, lat_c, n)
    tree = cKDTree(unit_vectors_from_lonlat(lon_c, lat_c).reshape(-1, 3))
    out = {}

    def run_compiled():
        out["compiled"] = compiled.locate(lon, lat)

    def run_numpy():
        out["numpy"] = vectorised.locate(lon, lat)

    def run_kdtree():
        tree.query(unit_vectors_from_lonlat(lon, lat))

    medians = interleaved({"compiled": run_compiled, "numpy": run_numpy, "kdtree": run_kdtree},
                          repeats)
    i, j = out["compiled"]
    differ_numpy = int(((i != out["numpy"][0]) | (j != out["numpy"][1])).sum())
    i_tree, j_tree = by_tree.locate(lon, lat)
    differ_tree = int(((i != i_tree) | (j != j_tree)).sum())
    print(f"curvilinear locate, {n:,} positions, sheared 800 x 880 polar grid "
          f"(medians of {repeats}, interleaved)")
    print(f"  compiled search   {medians['compiled']:.3f} s")
    print(f"  numpy search      {medians['numpy']:.3f} s   "
          f"({medians['numpy'] / medians['compiled']:.2f}x the compiled time)")
    print(f"  cKDTree query     {medians['kdtree']:.3f} s   "
          f"ratio cKDTree / compiled: {medians['kdtree'] / medians['compiled']:.2f}x "
          f"(goal >= 10x)")
    print(f"  cells differing from the numpy search: {differ_numpy}; from the KD-tree-guided "
          f"search: {differ_tree}")


_START = textwrap.dedent("""
    import time
    start = time.perf_counter()
    import numpy as np
    from obsprep.geo.grid import CurvilinearGrid
    lon, lat = np.meshgrid(np.arange(5.0), np.arange(4.0))
    grid = CurvilinearGrid(lon, lat)
    grid.search = "numpy"
    grid.locate(2.2, 1.6)
    numpy_first = time.perf_counter() - start
    start = time.perf_counter()
    grid.search = "compiled"
    grid.locate(2.2, 1.6)
    print(time.perf_counter() - start)
""")


def start_up(repeats):
    """Seconds the first compiled locate of a fresh process takes beyond a warm numpy one: with
    an empty numba cache (compile and write) and with the cache written (import numba, load)."""
    cold, warm = [], []
    for _ in range(repeats):
        with tempfile.TemporaryDirectory() as cache:
            environment = dict(os.environ, NUMBA_CACHE_DIR=cache,
                               PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
            for times in (cold, warm):
                result = subprocess.run([sys.executable, "-c", _START], capture_output=True,
                                        text=True, check=True, env=environment, cwd="/")
                times.append(float(result.stdout.split()[-1]))
    print(f"compiled cell search, first call in a fresh process (medians of {repeats}):")
    print(f"  cold (empty cache: compile, write)  {statistics.median(cold):.2f} s")
    print(f"  warm (import numba, load the cache)  {statistics.median(warm):.2f} s (goal < 0.5 s)")


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--part", choices=["curvilinear", "start-up", "tie-points", "all"],
                        default="all")
    parser.add_argument("--n", type=int, default=2_000_000, help="positions (curvilinear)")
    parser.add_argument("--repeats", type=int, default=5)
    args = parser.parse_args(argv)
    if args.part in ("curvilinear", "all"):
        curvilinear(args.n, args.repeats)
    if args.part in ("start-up", "all"):
        start_up(max(1, args.repeats // 2))
    return 0


if __name__ == "__main__":
    sys.exit(main())
