"""Where the build's time goes on a synthetic GDS 2.0 day, against the bare read.

    python benchmarks/build_profile.py                 # 8 granules of 2.5 M pixels, 3 repeats
    python benchmarks/build_profile.py --profile       # also a cProfile of one in-process build
    python benchmarks/build_profile.py --jobs 2        # --jobs 2 against the two-process read

Run from the repository root.  The day is written once (benchmarks/synthetic.py) to --data and
reused; builds and reads are whole processes, interleaved, the median of --repeats reported.  The
machine is shared and noisy: compare the ratio, not the seconds.
"""

from __future__ import annotations

import argparse
import cProfile
import pstats
import statistics
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parent))

import run  # noqa: E402  (the benchmark helpers: day, config_for, build_command, read_command)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--data", type=Path, default=Path("/tmp/read-bench"))
    parser.add_argument("--granules", type=int, default=8)
    parser.add_argument("--pixels", type=int, default=2_500_000, help="pixels per granule")
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--jobs", type=int, default=1)
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
        ratios, builds, reads = [], [], []
        for _ in range(args.repeats):
            b, _, _ = run.run_process(run.build_command(toml, args.jobs), env)
            r, _, _ = run.run_process(run.read_command(paths, args.jobs), env)
            builds.append(b)
            reads.append(r)
            ratios.append(b / r)
        where = "" if args.jobs == 1 else f" in {args.jobs} processes"
        print(f"{len(paths)} granules x {args.pixels:,} pixels, --jobs {args.jobs}: build "
              f"{statistics.median(builds):.2f} s, bare read{where} {statistics.median(reads):.2f} s; "
              f"build/read per pair {', '.join(f'{x:.2f}' for x in ratios)}; median "
              f"{statistics.median(ratios):.2f}x")
    return 0


if __name__ == "__main__":
    sys.exit(main())
