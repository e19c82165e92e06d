"""obsprep benchmarks: every goal of the scale issue, measured side by side in one run.

    python benchmarks/run.py            # full sizes (about 10-15 minutes on 2 cores)
    python benchmarks/run.py --quick    # smoke-test sizes (about 1-2 minutes)
    python benchmarks/run.py --record   # also write the table into benchmarks/README.md

Run from the repository root (or with obsprep installed).  Synthetic data (benchmarks/synthetic.py)
are written once to --data (default: $TMPDIR/obsprep-benchmark-data) and reused.

Timings: in-process comparisons are the median of --repeats runs, the two sides interleaved so
a drift of the machine's speed hits both; whole builds and the netCDF4 read baseline are timed
as whole processes (wall clock, and peak RSS from the operating system's accounting of that
child, ``os.wait4``), also interleaved.  The machine is shared and noisy: compare ratios.

In-process rows run on one core: compiled kernels are held to one thread (``NUMBA_NUM_THREADS=1``
in this process, unless it is set already; the build processes it starts do not inherit it).
"""

from __future__ import annotations

import argparse
import contextlib
import datetime as dt
import math
import os
import platform
import shutil
import signal
import socket
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

# one core for the in-process rows (numba reads this when it is first imported)
_ONE_THREAD_SET_HERE = "NUMBA_NUM_THREADS" not in os.environ
os.environ.setdefault("NUMBA_NUM_THREADS", "1")

SIZES = {
    "full": dict(accumulate=20_000_000, swath=20_000_000, startup_pixels=400,
                 projected=5_000_000, curvilinear=2_000_000,
                 pixels_per_granule=2_500_000, e2e=50_000_000, memory=(10_000_000, 100_000_000),
                 one_file=50_000_000,
                 scaling=(1_000_000, 10_000_000, 100_000_000), jobs=10_000_000),
    "quick": dict(accumulate=2_000_000, swath=2_000_000, startup_pixels=400,
                  projected=500_000, curvilinear=200_000,
                  pixels_per_granule=500_000, e2e=2_000_000, memory=(1_000_000, 4_000_000),
                  one_file=8_000_000,
                  scaling=(500_000, 1_000_000, 4_000_000), jobs=2_000_000),
}
GIB = 2.0 ** 30


def median_time(function, repeats):
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        function()
        times.append(time.perf_counter() - start)
    return statistics.median(times), times


def interleaved(functions: dict, repeats: int) -> dict:
    """Median seconds of each function, run A B C A B C ... (after one warm-up round)."""
    times = {name: [] for name in functions}
    for function in functions.values():
        function()  # warm-up: caches, lazily built tables, imports
    for _ in range(repeats):
        for name, function in functions.items():
            start = time.perf_counter()
            function()
            times[name].append(time.perf_counter() - start)
    return {name: statistics.median(values) for name, values in times.items()}


TIME = "/usr/bin/time"  # GNU time: reports the peak RSS of exactly the command it runs


def run_process(args, env=None) -> tuple[float, float, int]:
    """Run a command as a child process: (wall seconds, peak RSS in bytes, exit status).

    The peak RSS comes from GNU time (``%M``) when it exists: a child forked directly from this
    process would count this process's own memory at the fork in its high-water mark.  Without
    it, ``os.wait4`` gives an upper bound.
    """
    use_time = os.path.exists(TIME)
    command = [TIME, "-f", "OBSPREP_PEAK_KB %M"] + list(args) if use_time else list(args)
    start = time.perf_counter()
    child = subprocess.Popen(command, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, env=env)
    stderr = child.stderr.read().decode(errors="replace")
    _, status, usage = os.wait4(child.pid, 0)
    wall = time.perf_counter() - start
    child.stderr.close()
    child.returncode = os.waitstatus_to_exitcode(status)
    peak = usage.ru_maxrss * 1024.0
    own_lines = []  # the child's stderr without GNU time's lines, so a failure ends with its reason
    for line in stderr.splitlines():
        if line.startswith("OBSPREP_PEAK_KB "):
            peak = float(line.split()[1]) * 1024.0
        elif not (use_time and line.startswith("Command exited with non-zero status")):
            own_lines.append(line)
    if child.returncode != 0:
        raise RuntimeError(f"{' '.join(map(str, args))} failed ({child.returncode}):\n"
                           + "\n".join(own_lines))
    return wall, peak, child.returncode


# ------------------------------------------------------------------------------------------
# accumulation

def bench_accumulation(n, repeats):
    import pandas as pd
    from scipy.stats import binned_statistic_dd

    from obsprep.superobs import Accumulator

    nx, ny, n_slots = 800, 880, 4
    i, j, slot, value, error, rng = synthetic.random_observations(n, nx, ny, n_slots)
    time_s = rng.uniform(-86400.0, 0.0, n)
    lon = rng.uniform(-60.0, 0.0, n)
    lat = rng.uniform(60.0, 80.0, n)
    correlation = 0.2
    results = {}

    def obsprep_run():
        accumulator = Accumulator.from_observations({"slot": slot, "j": j, "i": i}, value, error,
                                                    time_s, lon, lat, 0.0)
        results["obsprep"] = accumulator.finalize(mode="mean", correlation=correlation)

    frame = pd.DataFrame({"slot": slot, "j": j, "i": i, "value": value, "variance": error ** 2,
                          "sigma": error})

    def pandas_run():
        grouped = frame.groupby(["slot", "j", "i"])
        out = grouped.agg(count=("value", "size"), value=("value", "mean"),
                          spread=("value", "std"), sum_variance=("variance", "sum"),
                          sum_sigma=("sigma", "sum"))
        # error of the equal-weight mean with common correlation rho (README formula)
        n_obs = out["count"]
        out["error"] = np.sqrt(out["sum_variance"] + correlation * (out["sum_sigma"] ** 2
                                                                    - out["sum_variance"])) / n_obs
        results["pandas"] = out

    sample = np.column_stack([slot, j, i]).astype(np.float64)
    bins = [np.arange(n_slots + 1) - 0.5, np.arange(ny + 1) - 0.5, np.arange(nx + 1) - 0.5]

    def scipy_run():
        count = binned_statistic_dd(sample, value, "count", bins=bins)
        stats = binned_statistic_dd(sample, [value, error ** 2, error], "sum", bins=bins,
                                    binned_statistic_result=count)
        spread = binned_statistic_dd(sample, value, "std", bins=bins,
                                     binned_statistic_result=count)
        c = count.statistic
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = stats.statistic[0] / c
            sample_spread = spread.statistic * np.sqrt(c / (c - 1))
            err = np.sqrt(stats.statistic[1] + correlation * (stats.statistic[2] ** 2
                                                             - stats.statistic[1])) / c
        results["scipy"] = (c, mean, sample_spread, err)

    medians = interleaved({"obsprep": obsprep_run, "pandas": pandas_run, "scipy": scipy_run},
                          repeats)
    # the three agree (a benchmark that computes something else would be no comparison)
    ours, ref = results["obsprep"], results["pandas"].reset_index()
    agree = (len(ours) == len(ref) and np.array_equal(ours["count"], ref["count"])
             and np.allclose(ours["value"], ref["value"], rtol=1e-12, atol=1e-9)
             and np.allclose(ours["spread"], ref["spread"], rtol=1e-9, equal_nan=True)
             and np.allclose(ours["error"], ref["error"], rtol=1e-9))
    c = results["scipy"][0].ravel()
    agree &= int(c.sum()) == n and np.array_equal(c[c > 0], ours["count"].to_numpy())
    return medians, agree


def bench_accumulation_swath(n, repeats):
    """The accumulator on observations in swath order (scan lines across the grid): median
    seconds of ``from_observations`` and of ``finalize`` (the same full state and call as the
    random-cell row), and whether counts and means agree with ``np.bincount`` of the same rows."""
    from obsprep.superobs import Accumulator

    nx, ny, n_slots = 800, 880, 4
    i, j, slot, value, error, time_s, lon, lat = synthetic.swath_order_observations(n, n_slots)
    keys = {"slot": slot, "j": j, "i": i}
    out = {}

    def accumulate():
        out["accumulator"] = Accumulator.from_observations(keys, value, error, time_s, lon, lat,
                                                           0.0)

    def finalize():
        out["result"] = out["accumulator"].finalize(mode="mean", correlation=0.2)

    accumulate_times, finalize_times = [], []
    for round_ in range(repeats + 1):  # the first round is a warm-up
        for function, times in ((accumulate, accumulate_times), (finalize, finalize_times)):
            start = time.perf_counter()
            function()
            if round_:
                times.append(time.perf_counter() - start)
    # the same count and mean per cell as plain numpy (super-observations sorted by the keys)
    cell = (slot * ny + j) * nx + i
    count = np.bincount(cell, minlength=n_slots * ny * nx)
    total = np.bincount(cell, weights=value, minlength=n_slots * ny * nx)
    filled = count > 0
    result = out["result"]
    agree = (len(result) == int(filled.sum())
             and np.array_equal(result["count"].to_numpy(), count[filled])
             and np.allclose(result["value"].to_numpy(), total[filled] / count[filled],
                             rtol=1e-12, atol=0.0))
    return statistics.median(accumulate_times), statistics.median(finalize_times), agree


# ------------------------------------------------------------------------------------------
# geolocation

def bench_projected(n, repeats):
    from pyproj import Transformer

    from obsprep.geo.grid import ProjectedGrid

    g = synthetic.GRID
    grid = ProjectedGrid(g["crs"], g["x_min"], g["y_min"], g["dx"], g["dy"], g["nx"], g["ny"])
    rng = np.random.default_rng(3)
    x = rng.uniform(g["x_min"] - 1e5, g["x_min"] + g["nx"] * g["dx"] + 1e5, n)
    y = rng.uniform(g["y_min"] - 1e5, g["y_min"] + g["ny"] * g["dy"] + 1e5, n)
    lon, lat = Transformer.from_crs(g["crs"], "EPSG:4326", always_xy=True).transform(x, y)
    forward = Transformer.from_crs("EPSG:4326", g["crs"], always_xy=True)
    out = {}

    def ours():
        out["ours"] = grid.locate(lon, lat)

    def reference():
        px, py = forward.transform(lon, lat)
        fi = np.floor((px - g["x_min"]) / g["dx"])
        fj = np.floor((py - g["y_min"]) / g["dy"])
        inside = (fi >= 0) & (fi < g["nx"]) & (fj >= 0) & (fj < g["ny"])
        out["ref"] = (np.where(inside, fi, -1).astype(np.int64),
                      np.where(inside, fj, -1).astype(np.int64))

    medians = interleaved({"obsprep": ours, "pyproj": reference}, repeats)
    same = int(((out["ours"][0] == out["ref"][0]) & (out["ours"][1] == out["ref"][1])).sum())
    return medians, n - same


def curvilinear_points(lon_c, lat_c, n, seed=4):
    """Positions spread over the grid: random fractional indices, bilinear in unit vectors."""
    from scipy.ndimage import map_coordinates

    from obsprep.geo.sphere import unit_vectors_from_lonlat

    rng = np.random.default_rng(seed)
    ny, nx = lon_c.shape
    fi = rng.uniform(-0.4, nx - 0.6, n)
    fj = rng.uniform(-0.4, ny - 0.6, n)
    r = unit_vectors_from_lonlat(lon_c, lat_c)
    p = np.stack([map_coordinates(r[..., k], [fj, fi], order=1, mode="nearest")
                  for k in range(3)], axis=-1)
    p /= np.linalg.norm(p, axis=1)[:, None]
    return np.degrees(np.arctan2(p[:, 1], p[:, 0])), np.degrees(np.arcsin(p[:, 2]))


def bench_curvilinear(n, repeats):
    from scipy.spatial import cKDTree

    from obsprep.geo.grid import CurvilinearGrid
    from obsprep.geo.sphere import unit_vectors_from_lonlat

    lon_c, lat_c = synthetic.curvilinear_grid()
    fast = CurvilinearGrid(lon_c, lat_c)
    by_tree = CurvilinearGrid(lon_c, lat_c)
    by_tree.first_guess = "tree"
    lon, lat = curvilinear_points(lon_c, lat_c, n)
    tree = cKDTree(unit_vectors_from_lonlat(lon_c, lat_c).reshape(-1, 3))
    out = {}

    def ours():
        out["ours"] = fast.locate(lon, lat)

    def kdtree():
        _, out["nearest"] = tree.query(unit_vectors_from_lonlat(lon, lat))

    medians = interleaved({"obsprep": ours, "kdtree": kdtree}, repeats)
    i, j = out["ours"]
    i_tree, j_tree = by_tree.locate(lon, lat)  # the same cells by the KD-tree first guess
    differ = (i != i_tree) | (j != j_tree)
    jn, in_ = np.divmod(out["nearest"], lon_c.shape[1])
    nearest_differs = int(((i != in_) | (j != jn)).sum())
    return medians, int(differ.sum()), nearest_differs


# ------------------------------------------------------------------------------------------
# whole builds

def day(data_dir: Path, total: int, per_granule: int) -> list:
    """Granule paths of a synthetic day of about ``total`` pixels (written once)."""
    directory = data_dir / f"granules_{per_granule}"
    n_granules = max(1, int(round(total / per_granule)))
    paths = synthetic.write_day(directory, per_granule * n_granules,
                                pixels_per_granule=per_granule)
    return paths[:n_granules]


def config_for(paths, work: Path, name: str, source_extra: str = "") -> Path:
    listing = work / f"{name}.list"
    listing.mkdir(parents=True, exist_ok=True)
    for old in listing.iterdir():
        old.unlink()
    for path in paths:  # a directory of links selects exactly these granules
        (listing / path.name).symlink_to(path)
    toml = work / f"{name}.toml"
    toml.write_text(synthetic.config_toml(str(listing / "synth_l2p_*.nc"), str(work / f"{name}.out"),
                                          source_extra=source_extra))
    return toml


def build_command(toml, jobs=1, out=None, scheduler=None):
    command = [sys.executable, "-m", "obsprep", "build", str(toml), "--quiet"]
    command += ["--jobs", str(jobs)] if scheduler is None else ["--scheduler", scheduler]
    if out is not None:
        command += ["--out", str(out)]
    return command


def read_command(paths, processes=1):
    names = [str(p) for p in paths]
    call = (f"synthetic.read_needed_variables({names!r})" if processes == 1 else
            f"synthetic.read_needed_variables_in_processes({names!r}, {processes:d})")
    code = (f"import sys; sys.path.insert(0, {str(HERE)!r}); import synthetic\n"
            f"if __name__ == '__main__':\n    {call}")
    return [sys.executable, "-c", code]


def environment():
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join([str(ROOT)] + [p for p in [env.get("PYTHONPATH")] if p])
    if _ONE_THREAD_SET_HERE:  # the builds use the machine as a user's would
        env.pop("NUMBA_NUM_THREADS", None)
    return env


def timed_pair(a, b, env, repeats):
    """Whole-process wall time and peak RSS of commands a and b, interleaved."""
    result = {"a": [], "b": [], "a_rss": [], "b_rss": []}
    for _ in range(repeats):
        for key, command in (("a", a), ("b", b)):
            wall, rss, _ = run_process(command, env)
            result[key].append(wall)
            result[key + "_rss"].append(rss)
    return {k: statistics.median(v) for k, v in result.items()}


def superobs_variables_identical(path_a, path_b) -> bool:
    import xarray as xr

    with xr.open_dataset(path_a) as a, xr.open_dataset(path_b) as b:
        if set(a.data_vars) != set(b.data_vars):
            return False
        return all(np.array_equal(a[v].values, b[v].values, equal_nan=a[v].dtype.kind == "f")
                   for v in a.data_vars)


def reader_variables(path) -> set:
    """The file variables obsprep's reader says it uses (``attrs["variables"]``) for one file:
    what the bare-read baseline must read, no more and no less."""
    from obsprep.readers import read

    return set(read(path, leave_out_rejected=True).attrs["variables"])


# ------------------------------------------------------------------------------------------
# start-up of the compiled kernels

#: the source settings of the start-up build: a within-group error correlation with a length
#: scale runs the pair kernel (obsprep.superobs.pairs), so that the tiny build reaches every
#: compiled kernel a build can reach, not only those every build runs
STARTUP_SOURCE = "correlation = 0.2\ncorrelation_length_km = 20.0"
#: rounds of the start-up comparison at least (cold, warm and plain-Python build in each)
STARTUP_ROUNDS = 5


def cache_files(directory: Path) -> dict:
    """numba cache files under ``directory``: path -> (size, modification time in ns)."""
    return {str(p): (p.stat().st_size, p.stat().st_mtime_ns)
            for p in directory.rglob("*") if p.suffix in (".nbi", ".nbc")}


def numba_import_seconds() -> float:
    """Seconds a fresh interpreter spends importing numba after numpy (``-X importtime``, the
    cumulative time of the top-level ``numba`` import)."""
    done = subprocess.run([sys.executable, "-X", "importtime", "-c", "import numpy; import numba"],
                          capture_output=True, text=True, check=True)
    for line in done.stderr.splitlines():
        fields = [f.strip() for f in line.split("|")]
        if len(fields) == 3 and fields[2] == "numba":
            return int(fields[1]) * 1e-6
    raise RuntimeError("python -X importtime printed no line for numba:\n" + done.stderr[-2000:])


def bench_startup(toml, work: Path, env, repeats):
    """Wall time of a tiny build in a fresh process: cold (an empty numba cache, pointed to by
    ``NUMBA_CACHE_DIR``, which numba's cache locator puts before the package's own directory),
    warm (the same cache, filled by the cold run), and the same build with the kernels run as
    plain Python (``NUMBA_DISABLE_JIT=1``, nothing compiled or loaded; numba is still imported,
    so its import time is measured apart and taken off that reference).  Medians over
    ``repeats`` rounds, a new empty cache each round."""
    times = {"cold": [], "warm": [], "python": [], "numba_import": []}
    kernels, recompiled, identical, reference_error = set(), False, True, None
    for round_ in range(repeats):
        cache = Path(tempfile.mkdtemp(prefix="numba-cache-", dir=work))
        cache_env = dict(env, NUMBA_CACHE_DIR=str(cache))
        outs = {}
        for kind in ("cold", "warm", "python"):
            run_env = cache_env
            if kind == "python":  # nothing compiled, nothing written to any cache
                run_env = dict(env, NUMBA_DISABLE_JIT="1",
                               NUMBA_CACHE_DIR=tempfile.mkdtemp(prefix="numba-none-", dir=work))
            outs[kind] = work / f"startup_{kind}_{round_}"
            try:
                wall, _, _ = run_process(build_command(toml, out=outs[kind]), run_env)
            except RuntimeError as exc:
                if kind != "python":
                    raise
                # a kernel that cannot run uncompiled leaves the rows without a reference
                reference_error = str(exc).strip().splitlines()[-1]
                continue
            times[kind].append(wall)
            if kind == "cold":
                after_cold = cache_files(cache)
                kernels |= {Path(f).name for f in after_cold if f.endswith(".nbi")}
            elif kind == "warm":
                recompiled |= cache_files(cache) != after_cold
        times["numba_import"].append(numba_import_seconds())
        name = "superobs_20261120.nc"
        identical &= superobs_variables_identical(outs["cold"] / name, outs["warm"] / name)
        shutil.rmtree(cache, ignore_errors=True)
    medians = {k: statistics.median(v) for k, v in times.items() if v}
    return medians, sorted(kernels), recompiled, identical, reference_error


# ------------------------------------------------------------------------------------------
# a real local Dask cluster

def free_port() -> int:
    """A TCP port on 127.0.0.1 free at the time of asking (the system chooses it)."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


@contextlib.contextmanager
def local_dask_cluster(env, work: Path, n_workers=2, timeout=120.0):
    """A Dask scheduler and ``n_workers`` worker processes (one thread each) on 127.0.0.1, each
    a ``dask`` command in its own process group; yields the scheduler address once every worker
    has joined.  All of them are stopped on the way out, also after an error."""
    from distributed import Client

    logs = work / "dask-logs"
    logs.mkdir(exist_ok=True)
    address = f"tcp://127.0.0.1:{free_port()}"
    dask = [sys.executable, "-m", "dask"]
    commands = [dask + ["scheduler", "--host", "127.0.0.1", "--port", address.rsplit(":", 1)[1],
                        "--no-dashboard"]]
    commands += [dask + ["worker", address, "--nthreads", "1", "--nworkers", "1",
                         "--host", "127.0.0.1", "--no-dashboard", "--name", f"bench-{k}",
                         "--local-directory", str(work / f"dask-worker-{k}")]
                 for k in range(n_workers)]
    children = []
    try:
        for k, command in enumerate(commands):
            log = open(logs / f"{command[3]}-{k}.log", "wb")
            children.append((subprocess.Popen(command, stdout=log, stderr=subprocess.STDOUT,
                                              env=env, cwd=work, start_new_session=True), log))
            if k == 0:  # the scheduler listens before the workers look for it
                wait_for_port(address, timeout, children[0][0], logs)
        with Client(address, timeout=timeout) as client:
            client.wait_for_workers(n_workers, timeout=timeout)
        yield address
    finally:
        for child, _ in reversed(children):  # workers first, then the scheduler
            if child.poll() is None:
                child.send_signal(signal.SIGTERM)
        for child, log in reversed(children):
            try:
                child.wait(timeout=30)
            except subprocess.TimeoutExpired:
                child.kill()
                child.wait()
            with contextlib.suppress(ProcessLookupError, PermissionError):
                os.killpg(child.pid, signal.SIGKILL)  # anything it left behind in its group
            log.close()


def wait_for_port(address: str, timeout: float, process, logs: Path) -> None:
    host, port = address.removeprefix("tcp://").rsplit(":", 1)
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if process.poll() is not None:
            raise RuntimeError(f"the Dask scheduler exited ({process.returncode}); see {logs}")
        with contextlib.suppress(OSError), socket.create_connection((host, int(port)), 1.0):
            return
        time.sleep(0.2)
    raise RuntimeError(f"the Dask scheduler did not listen on {address} within {timeout:g} s")


# ------------------------------------------------------------------------------------------

def machine_line():
    import numpy
    import pandas
    import scipy

    cpu = platform.processor() or platform.machine()
    try:
        with open("/proc/cpuinfo") as fh:
            for line in fh:
                if line.startswith("model name"):
                    cpu = line.split(":", 1)[1].strip()
                    break
    except OSError:
        pass
    memory = ""
    try:
        with open("/proc/meminfo") as fh:
            memory = f", {int(fh.readline().split()[1]) / 2**20:.0f} GiB"
    except (OSError, ValueError, IndexError):
        pass
    return (f"{cpu}, {os.cpu_count()} cores{memory}; Python {platform.python_version()}, "
            f"numpy {numpy.__version__}, pandas {pandas.__version__}, scipy {scipy.__version__}")


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--quick", action="store_true", help="small sizes for a smoke run")
    parser.add_argument("--repeats", type=int, default=3, help="in-process repeats (median)")
    parser.add_argument("--process-repeats", type=int, default=1,
                        help="repeats of each whole-process build/read (median)")
    parser.add_argument("--data", type=Path,
                        default=Path(tempfile.gettempdir()) / "obsprep-benchmark-data",
                        help="where the synthetic data are written and reused")
    parser.add_argument("--record", action="store_true",
                        help="write the table into benchmarks/README.md")
    parser.add_argument("--only", default="", help="comma list: accumulation, geolocation, "
                        "startup (cold and warm start of the compiled kernels), build (end to "
                        "end, memory, scaling, jobs), dask (a local Dask cluster against "
                        "--jobs 2); default all")
    args = parser.parse_args(argv)
    size = SIZES["quick" if args.quick else "full"]
    only = {s.strip() for s in args.only.split(",") if s.strip()} or {
        "accumulation", "geolocation", "startup", "build", "dask"}
    rows = []  # (benchmark, obsprep, reference, ratio, goal, met)
    started = dt.datetime.now(dt.UTC)

    def log(text):
        print(text, file=sys.stderr, flush=True)

    if "accumulation" in only:
        n = size["accumulate"]
        log(f"accumulation: {n:,} observations, 800 x 880 cells, 4 slots ...")
        medians, agree = bench_accumulation(n, args.repeats)
        speedup = medians["pandas"] / medians["obsprep"]
        rows.append((f"accumulate {n / 1e6:g} M obs, 800x880x4 (count, mean, spread, error)",
                     f"{medians['obsprep']:.2f} s", f"pandas groupby {medians['pandas']:.2f} s; "
                     f"scipy binned_statistic_dd {medians['scipy']:.2f} s",
                     f"{speedup:.2f}x vs pandas, {medians['scipy'] / medians['obsprep']:.2f}x "
                     f"vs scipy", ">= 5x faster than pandas; same results",
                     speedup >= 5.0 and agree))
        if not agree:
            log("  WARNING: obsprep, pandas and scipy results disagree")
        n = size["swath"]
        log(f"accumulation: {n:,} observations in swath order ...")
        accumulate_s, finalize_s, agree = bench_accumulation_swath(n, args.repeats)
        rate = n / (accumulate_s + finalize_s) / 1e6
        rows.append((f"accumulate {n / 1e6:g} M obs in swath order (scan lines across "
                     f"800x880, 4 slots), the same full state, one core",
                     f"{accumulate_s + finalize_s:.2f} s (from_observations {accumulate_s:.2f} s, "
                     f"finalize {finalize_s:.2f} s)", "-",
                     f"{rate:.1f} M obs/s ({n / accumulate_s / 1e6:.1f} M obs/s without "
                     f"finalize); counts and means {'equal' if agree else 'DIFFER from'} "
                     f"np.bincount", ">= 50 M obs/s (with finalize); same results",
                     rate >= 50.0 and agree))
        if not agree:
            log("  WARNING: the swath-order accumulation disagrees with np.bincount")

    if "geolocation" in only:
        n = size["projected"]
        log(f"geolocation: projected grid, {n:,} positions ...")
        medians, differ = bench_projected(n, args.repeats)
        rows.append((f"locate {n / 1e6:g} M positions, projected 800x880 grid",
                     f"{medians['obsprep']:.2f} s", f"pyproj transform + floor "
                     f"{medians['pyproj']:.2f} s",
                     f"{medians['pyproj'] / medians['obsprep']:.2f}x; {differ} cells differ",
                     "(reference only) identical cells", differ == 0))
        n = size["curvilinear"]
        log(f"geolocation: curvilinear grid, {n:,} positions ...")
        medians, differ, nearest_differs = bench_curvilinear(n, args.repeats)
        speedup = medians["kdtree"] / medians["obsprep"]
        rows.append((f"locate {n / 1e6:g} M positions, curvilinear 800x880 grid",
                     f"{medians['obsprep']:.2f} s", f"cKDTree nearest-centre query "
                     f"{medians['kdtree']:.2f} s",
                     f"{speedup:.2f}x; {differ} cells differ from the KD-tree-guided search; "
                     f"{nearest_differs} differ from the nearest centre (cell edges are not "
                     f"equidistant on a sheared grid)",
                     ">= 10x faster than the KD-tree, identical cells", speedup >= 10.0
                     and differ == 0))

    if "startup" in only:
        env = environment()
        with tempfile.TemporaryDirectory(prefix="obsprep-bench-") as tmp:
            work = Path(tmp)
            n = size["startup_pixels"]
            log(f"start-up: cold and warm start of the compiled kernels, 1 granule of {n} "
                f"pixels ...")
            toml = config_for(day(args.data, n, n), work, "startup", STARTUP_SOURCE)
            # short processes, each a difference of two: more rounds than the long builds
            medians, kernels, recompiled, identical, failed = bench_startup(
                toml, work, env, max(STARTUP_ROUNDS, args.process_repeats))
            if failed is None:
                # the same build without compiled code: kernels as Python, numba's import off
                without = medians["python"] - medians["numba_import"]
                reference = (f"the same build, kernels run as plain Python (NUMBA_DISABLE_JIT=1) "
                             f"{medians['python']:.2f} s, less numba's import "
                             f"{medians['numba_import']:.2f} s: {without:.2f} s")
            else:
                log(f"  WARNING: the build with NUMBA_DISABLE_JIT=1 failed: {failed}")
                without, reference = math.nan, f"NUMBA_DISABLE_JIT=1 build FAILED: {failed}"
            cold, warm = medians["cold"] - without, medians["warm"] - without
            label = f"fresh process, build of 1 granule of {n} pixels"
            rows.append((f"cold start of the compiled kernels ({label}, empty numba cache)",
                         f"{medians['cold']:.2f} s; kernels compiled and cached: {len(kernels)} "
                         f"({', '.join(k.split('-')[0] for k in kernels) or 'none'})",
                         reference, f"overhead {cold:.2f} s",
                         "(reference only) kernels cached", bool(kernels)))
            rows.append((f"warm start of the compiled kernels ({label}, the cache filled)",
                         f"{medians['warm']:.2f} s; "
                         f"{'RECOMPILED' if recompiled else 'nothing recompiled'}; output "
                         f"{'identical to' if identical else 'DIFFERS from'} the cold run's",
                         reference, f"overhead {warm:.2f} s", "overhead < 0.5 s",
                         warm < 0.5 and bool(kernels) and not recompiled and identical))

    if "build" in only:
        env = environment()
        per = size["pixels_per_granule"]
        with tempfile.TemporaryDirectory(prefix="obsprep-bench-") as tmp:
            work = Path(tmp)
            n = size["e2e"]
            log(f"end to end: build on {n:,} pixels of GDS 2.0 style swaths ...")
            paths = day(args.data, n, per)
            toml = config_for(paths, work, "e2e")
            # the baseline reads what the reader uses, no more, no less
            used = reader_variables(paths[0])
            needed = set(synthetic.NEEDED_VARIABLES)
            honest = used == needed
            baseline = (f"the reader's {len(used)} variables" if honest else
                        f"NOT the reader's variables (reader only: {sorted(used - needed)}; "
                        f"baseline only: {sorted(needed - used)})")
            if not honest:
                log(f"  WARNING: the read baseline reads {baseline}")
            # one process, then both cores: --jobs 2 against the same read in two processes
            for jobs, label in ((1, f"build, {len(paths)} granules, {n / 1e6:g} M pixels"),
                                (2, f"build --jobs 2, the same {len(paths)} granules")):
                timing = timed_pair(build_command(toml, jobs), read_command(paths, jobs), env,
                                    args.process_repeats)
                ratio = timing["a"] / timing["b"]
                where = "" if jobs == 1 else f" in {jobs} processes"
                rows.append((f"{label} (whole process)", f"{timing['a']:.1f} s",
                             f"netCDF4 read of {baseline} (mask and scale applied){where} "
                             f"{timing['b']:.1f} s",
                             f"{ratio:.1f}x the read time", "<= 1.5x the read time",
                             ratio <= 1.5 and honest))

            log("memory and scaling ...")
            builds = {}
            for total in sorted(set(size["memory"]) | set(size["scaling"])):
                paths_n = day(args.data, total, min(per, total))
                toml_n = config_for(paths_n, work, f"n{total}")
                walls, rss = [], []
                for _ in range(args.process_repeats):
                    wall, peak, _ = run_process(build_command(toml_n), env)
                    walls.append(wall)
                    rss.append(peak)
                builds[total] = (statistics.median(walls), max(rss), len(paths_n))
            for total in size["memory"]:
                wall, peak, files = builds[total]
                rows.append((f"peak RSS of the build, {total / 1e6:g} M observations "
                             f"({files} files)", f"{peak / GIB:.2f} GiB", "-", "-",
                             "<= 1 GiB", peak <= GIB))
            # one huge file (a global L3 grid, a full orbit): read in parts, the same budget
            total = size["one_file"]
            paths_1 = day(args.data, total, total)
            wall, peak, _ = run_process(build_command(config_for(paths_1, work, "one")), env)
            rows.append((f"peak RSS of the build, one file of {total / 1e6:g} M pixels",
                         f"{peak / GIB:.2f} GiB ({wall:.1f} s)", "-", "-", "< 2 GiB",
                         peak < 2 * GIB))
            # linear growth: the marginal time per million observations (the slope between
            # consecutive sizes; start-up is a constant) stays the same as the size grows
            sizes = size["scaling"]
            slopes = [(builds[b][0] - builds[a][0]) / ((b - a) / 1e6)
                      for a, b in zip(sizes[:-1], sizes[1:])]
            growth = slopes[-1] / slopes[0]
            rows.append(("scaling: build time at " + ", ".join(f"{t / 1e6:g} M" for t in sizes),
                         ", ".join(f"{builds[t][0]:.1f} s" for t in sizes),
                         "marginal s per million: " + ", ".join(
                             f"{a / 1e6:g}-{b / 1e6:g} M: {v:.2f}"
                             for (a, b), v in zip(zip(sizes[:-1], sizes[1:]), slopes)),
                         f"{growth:.2f} (last slope / first slope)",
                         "linear: slopes within 25 % of each other", 0.75 <= growth <= 1.25))

            n = size["jobs"]
            log(f"--jobs 1 against --jobs 2 on {n:,} pixels ...")
            paths_j = day(args.data, n, min(per, n))
            toml_j = config_for(paths_j, work, "jobs")
            out1, out2 = work / "jobs1", work / "jobs2"
            timing = timed_pair(build_command(toml_j, 1, out1), build_command(toml_j, 2, out2),
                                env, args.process_repeats)
            name = "superobs_20261120.nc"
            identical = superobs_variables_identical(out1 / name, out2 / name)
            rows.append((f"--jobs 1 vs --jobs 2, {len(paths_j)} files, {n / 1e6:g} M pixels",
                         f"jobs 2: {timing['b']:.1f} s", f"jobs 1: {timing['a']:.1f} s",
                         f"{timing['a'] / timing['b']:.2f}x faster; outputs "
                         f"{'bit-for-bit identical' if identical else 'DIFFER'}",
                         "(2 cores) faster, identical data variables",
                         identical and timing["b"] < timing["a"]))

    if "dask" in only:
        env = environment()
        with tempfile.TemporaryDirectory(prefix="obsprep-bench-") as tmp:
            work = Path(tmp)
            n = size["e2e"]
            paths = day(args.data, n, size["pixels_per_granule"])
            toml = config_for(paths, work, "dask")
            warm_up = config_for(day(args.data, size["startup_pixels"], size["startup_pixels"]),
                                 work, "dask_warm_up")
            log(f"Dask: a local scheduler and 2 workers, the build on {n:,} pixels against "
                f"--jobs 2 ...")
            with local_dask_cluster(env, work) as address:
                # a cluster is long-lived: its workers have imported obsprep before the timing
                run_process(build_command(warm_up, out=work / "warm_up", scheduler=address), env)
                commands = {"dask": build_command(toml, out=work / "on_dask", scheduler=address),
                            "jobs2": build_command(toml, 2, out=work / "jobs_2"),
                            "read2": read_command(paths, 2)}
                walls = {name: [] for name in commands}
                for _ in range(args.process_repeats):
                    for name, command in commands.items():
                        walls[name].append(run_process(command, env)[0])
            wall = {name: statistics.median(v) for name, v in walls.items()}
            name = "superobs_20261120.nc"
            identical = superobs_variables_identical(work / "on_dask" / name,
                                                     work / "jobs_2" / name)
            rows.append((f"build on a local Dask cluster (scheduler and 2 one-thread workers on "
                         f"127.0.0.1), the same {len(paths)} granules (whole process)",
                         f"{wall['dask']:.1f} s",
                         f"--jobs 2 {wall['jobs2']:.1f} s; the netCDF4 read of the --jobs 2 row "
                         f"in 2 processes {wall['read2']:.1f} s",
                         f"{wall['dask'] / wall['jobs2']:.2f}x the --jobs 2 time, "
                         f"{wall['dask'] / wall['read2']:.1f}x the read time; outputs "
                         f"{'bit-for-bit identical' if identical else 'DIFFER'}",
                         "(reference only) identical data variables", identical))

    table = format_table(rows, started, args)
    print(table)
    if args.record:
        record(table)
    return 0


def format_table(rows, started, args) -> str:
    lines = [f"Run {started:%Y-%m-%d %H:%M} UTC, `python benchmarks/run.py"
             f"{' --quick' if args.quick else ''}` (repeats {args.repeats}, process repeats "
             f"{args.process_repeats})", "", f"Machine: {machine_line()}", "",
             "| benchmark | obsprep | reference | ratio | goal | met |",
             "|---|---|---|---|---|---|"]
    for name, ours, reference, ratio, goal, met in rows:
        lines.append(f"| {name} | {ours} | {reference} | {ratio} | {goal} | "
                     f"{'yes' if met else 'no'} |")
    return "\n".join(lines)


BEGIN, END = "<!-- benchmark results: begin -->", "<!-- benchmark results: end -->"


def record(table: str) -> None:
    readme = HERE / "README.md"
    text = readme.read_text() if readme.exists() else ""
    block = f"{BEGIN}\n{table}\n{END}"
    if BEGIN in text and END in text:
        head, rest = text.split(BEGIN, 1)
        text = head + block + rest.split(END, 1)[1]
    else:
        text = text.rstrip("\n") + "\n\n" + block + "\n"
    readme.write_text(text)


if __name__ == "__main__":
    sys.exit(main())
