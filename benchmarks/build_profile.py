"""Where the build's time goes on a synthetic GDS 2.0 day, against the bare read.

    python benchmarks/build_profile.py                 # 8 granules of 2.5 M pixels, 3 repeats
    python benchmarks/build_profile.py --profile       # also a cProfile of one in-process build
    python benchmarks/build_profile.py --jobs 2        # --jobs 2 against the two-process read
    python benchmarks/build_profile.py --other /path/to/other/checkout   # two versions, A/B

Run from the repository root.  The day is written once (benchmarks/synthetic.py) to --data and
reused; builds and reads are whole processes, interleaved, the median of --repeats reported.  The
machine is shared and noisy: compare the ratio, not the seconds.
"""

from __future__ import annotations

import argparse
import cProfile
import os
import pstats
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parent))

import run  # noqa: E402  (the benchmark helpers: day, config_for, build_command, read_command)


def timed(command, env) -> tuple[float, float]:
    """(wall seconds, CPU seconds: user + system of the process and its children) of one
    command.  On a shared machine the CPU time is the steadier measure of the work done; the
    wall time is what a build's overlap of reading and computing shortens."""
    start = time.perf_counter()
    child = subprocess.Popen(command, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    stderr = child.stderr.read()
    _, status, usage = os.wait4(child.pid, 0)
    wall = time.perf_counter() - start
    child.stderr.close()
    if os.waitstatus_to_exitcode(status) != 0:
        raise RuntimeError(f"{' '.join(map(str, command))} failed:\n{stderr.decode()[-2000:]}")
    return wall, usage.ru_utime + usage.ru_stime


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--data", type=Path, default=Path("/tmp/read-bench"))
    parser.add_argument("--granules", type=int, default=8)
    parser.add_argument("--pixels", type=int, default=2_500_000, help="pixels per granule")
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--jobs", type=int, default=1)
    parser.add_argument("--other", type=Path, default=None,
                        help="also build with the obsprep of this source tree (another "
                             "checkout), interleaved, for a before/after comparison")
    parser.add_argument("--profile", action="store_true",
                        help="cProfile one in-process build and print the top functions")
    args = parser.parse_args(argv)
    paths = run.day(args.data, args.granules * args.pixels, args.pixels)
    env = run.environment()
    with tempfile.TemporaryDirectory(prefix="obsprep-profile-") as tmp:
        work = Path(tmp)
        toml = run.config_for(paths, work, "day")
        if args.profile:
            from obsprep.run.build import build

            build(toml)  # warm-up: imports, compiled kernels
            profiler = cProfile.Profile()
            profiler.enable()
            build(toml)
            profiler.disable()
            pstats.Stats(profiler).sort_stats("cumulative").print_stats(45)
            pstats.Stats(profiler).sort_stats("tottime").print_stats(35)
        commands = {"build": (run.build_command(toml, args.jobs), env)}
        if args.other is not None:
            other_env = dict(env, PYTHONPATH=str(args.other.resolve()))
            commands["other build"] = (run.build_command(toml, args.jobs), other_env)
        commands["read"] = (run.read_command(paths, args.jobs), env)
        walls = {name: [] for name in commands}
        cpus = {name: [] for name in commands}
        for _ in range(args.repeats):  # interleaved: a drift of the machine hits all
            for name, (command, command_env) in commands.items():
                wall, cpu = timed(command, command_env)
                walls[name].append(wall)
                cpus[name].append(cpu)
        where = "" if args.jobs == 1 else f" in {args.jobs} processes"
        median = {k: statistics.median(v) for k, v in walls.items()}
        cpu = {k: statistics.median(v) for k, v in cpus.items()}
        print(f"{len(paths)} granules x {args.pixels:,} pixels, --jobs {args.jobs}; bare read"
              f"{where} {median['read']:.2f} s wall, {cpu['read']:.2f} s CPU (median of "
              f"{args.repeats})")
        for name in commands:
            if name == "read":
                continue
            pairs = [b / r for b, r in zip(walls[name], walls["read"])]
            label = "this tree" if name == "build" else str(args.other)
            print(f"  build ({label}): {median[name]:.2f} s wall = "
                  f"{median[name] / median['read']:.2f}x the read (per pair "
                  f"{', '.join(f'{x:.2f}' for x in pairs)}); CPU (user + system) "
                  f"{cpu[name]:.2f} s = {cpu[name] / cpu['read']:.2f}x")
    return 0


if __name__ == "__main__":
    sys.exit(main())
