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
    grid.compiled_from = 0
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


def orbit_swath(rows=2000, columns=1250, latitude_of_centre=76.0, float32=True):
    """Longitude, latitude (degrees) of an invented scanning-radiometer swath over the
    benchmark grid: nadir on a near-polar orbit (inclination 98.7 degrees, a great circle of
    a spherical Earth, 1 km steps), pixels across the track at scan angles of -55..55 degrees
    from 800 km up, so their spacing grows towards the swath edges and the swath is curved on
    the map, unlike ``synthetic.swath_pixels``'s straight strips.  ``float32``: positions
    stored as in L2P files (single precision).

    Geometry: Earth-central angle of scan angle a from height h, gamma = asin((R + h) / R
    sin a) - a (plane geometry of the triangle Earth centre, satellite, pixel); the pixel is
    nadir rotated by gamma towards the orbit's normal."""
    radius, height = 6371.0, 800.0
    inclination = np.radians(98.7)
    # orbit plane basis: u at the ascending node (lon 0), v 90 degrees on along the orbit
    u = np.array([1.0, 0.0, 0.0])
    v = np.array([0.0, np.cos(inclination), np.sin(inclination)])
    normal = np.cross(u, v)
    # the argument of latitude whose nadir is at latitude_of_centre, on the ascending side
    centre = np.arcsin(np.sin(np.radians(latitude_of_centre)) / np.sin(inclination))
    theta = centre + (np.arange(rows) - rows / 2) / radius
    scan = np.radians(np.linspace(-55.0, 55.0, columns))
    gamma = np.arcsin((radius + height) / radius * np.sin(scan)) - scan
    nadir = np.cos(theta)[:, None] * u + np.sin(theta)[:, None] * v  # (rows, 3)
    p = (np.cos(gamma)[None, :, None] * nadir[:, None, :]
         + np.sin(gamma)[None, :, None] * normal[None, None, :])
    lon = np.degrees(np.arctan2(p[..., 1], p[..., 0]))
    lat = np.degrees(np.arcsin(np.clip(p[..., 2], -1.0, 1.0)))
    if float32:
        lon, lat = lon.astype(np.float32).astype(float), lat.astype(np.float32).astype(float)
    return lon, lat


def tie_indices(rows, columns, step):
    """Tie-point rows and columns of a (rows, columns) swath: every ``step``-th and the last."""
    tie_rows = np.unique(np.append(np.arange(0, rows, step), rows - 1))
    tie_columns = np.unique(np.append(np.arange(0, columns, step), columns - 1))
    return tie_rows, tie_columns


def _linear_weights(ties, n):
    """Left tie index and weight of the right one for each of n positions."""
    left = np.clip(np.searchsorted(ties, np.arange(n), side="right") - 1, 0, len(ties) - 2)
    weight = (np.arange(n) - ties[left]) / (ties[left + 1] - ties[left])
    return left, weight


def tie_point_projection(to_xy, lon, lat, step):
    """Projected x, y (m) of every pixel from PROJ at the tie points (every ``step``-th row and
    column and the last ones) and separable linear interpolation between them."""
    rows, columns = lon.shape
    tie_rows, tie_columns = tie_indices(rows, columns, step)
    tx, ty = to_xy.transform(lon[np.ix_(tie_rows, tie_columns)], lat[np.ix_(tie_rows, tie_columns)])
    left_c, weight_c = _linear_weights(tie_columns, columns)
    left_r, weight_r = _linear_weights(tie_rows, rows)
    out = []
    for t in (np.asarray(tx), np.asarray(ty)):
        along_columns = t[:, left_c] * (1.0 - weight_c) + t[:, left_c + 1] * weight_c
        out.append(along_columns[left_r] * (1.0 - weight_r)[:, None]
                   + along_columns[left_r + 1] * weight_r[:, None])
    return out[0], out[1]


def tie_points(repeats, steps=(2, 4, 8, 16, 32)):
    """Time of PROJ for every pixel against PROJ at tie points and interpolation, and the cells
    of the benchmark's projected grid that change, with their distance from a cell edge."""
    from pyproj import Transformer

    g = synthetic.GRID
    to_xy = Transformer.from_crs("EPSG:4326", g["crs"], always_xy=True)

    def cells(x, y):
        fi, fj = (x - g["x_min"]) / g["dx"], (y - g["y_min"]) / g["dy"]
        return np.floor(fi), np.floor(fj), fi, fj

    for name, (lon, lat) in (("curved orbit swath, float32 positions", orbit_swath()),
                             ("curved orbit swath, float64 positions",
                              orbit_swath(float32=False)),
                             ("straight strip of synthetic.py (granule 3)",
                              _strip_positions(3))):
        x, y = (np.asarray(a) for a in to_xy.transform(lon, lat))
        i, j, fi, fj = cells(x, y)
        to_edge = np.minimum(np.minimum(fi - np.floor(fi), np.ceil(fi) - fi),
                             np.minimum(fj - np.floor(fj), np.ceil(fj) - fj))
        functions = {"every pixel": lambda: to_xy.transform(lon, lat)}
        for step in steps:
            functions[f"step {step}"] = (lambda s=step: tie_point_projection(to_xy, lon, lat, s))
        medians = interleaved(functions, repeats)
        print(f"{name}: {lon.size:,} pixels; PROJ for every pixel {medians['every pixel']:.3f} s")
        for step in steps:
            xt, yt = tie_point_projection(to_xy, lon, lat, step)
            it, jt, _, _ = cells(xt, yt)
            differ = (it != i) | (jt != j)
            error = np.maximum(np.abs(xt - x), np.abs(yt - y))
            worst_edge = to_edge[differ].max() * g["dx"] if differ.any() else 0.0
            print(f"  tie points every {step:2d}: {medians[f'step {step}']:.3f} s "
                  f"({medians['every pixel'] / medians[f'step {step}']:.1f}x faster); "
                  f"largest position error {error.max():.3g} m; {int(differ.sum())} pixels "
                  f"({differ.mean():.2e}) in another cell, all within {worst_edge:.3g} m of a "
                  f"cell edge")


def _strip_positions(granule, rows=2000, columns=1250):
    import pyproj

    x, y = synthetic.swath_pixels(granule, rows, columns, None)
    lon, lat = pyproj.Transformer.from_crs("EPSG:3413", "EPSG:4326",
                                           always_xy=True).transform(x, y)
    return (np.asarray(lon).astype(np.float32).astype(float),
            np.asarray(lat).astype(np.float32).astype(float))


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
    if args.part in ("tie-points", "all"):
        tie_points(args.repeats)
    return 0


if __name__ == "__main__":
    sys.exit(main())
