"""The audit's verdicts on whole builds of three collocated sensors, over many nights.

    python benchmarks/audit_scenarios.py              # 40 nights per case, about a minute
    python benchmarks/audit_scenarios.py --nights 10

The nights are those of tests/audit/test_audit_scenarios.py (GDS 2.0 L2P files written from a
known truth, built with ``obsprep.run.build.build`` and audited with ``obsprep.audit.audit``,
with the ensemble and without a model), drawn with other seeds: the test checks one night per
case, this script many, so that a verdict that is right by luck on the test's night shows up.
Cases: an unstated correlated error field on ir_a (right: too_small), a within-sensor
correlation of 0.6 wrongly configured on ir_c (too_large), a coarse grid with sub-cell
variability without and with a representation error common to all sensors (every sensor ok),
ir_b's stated errors a third of the true ones (too_small).  Every other sensor is right: ok.

Counted per case, way and sensor: the right verdict, an honest "inconclusive" (or
"no_evidence"), and confident wrong verdicts (a flag or an "ok" that is not the right one),
which the issue allows none of.  Exit status 1 when there is any.  A script, not a test.
"""

from __future__ import annotations

import argparse
import collections
import logging
import sys
import tempfile
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
for folder in (ROOT, ROOT / "tests", ROOT / "tests" / "audit"):
    sys.path.insert(0, str(folder))

import test_audit_scenarios as scenes  # noqa: E402

#: case: (arguments of write_night, of the configuration, the right verdict per sensor)
CASES = {
    "correlated field on ir_a": (
        dict(field_on="ir_a", field_sigma=0.45), {},
        {"ir_a": "too_small", "ir_b": "ok", "ir_c": "ok"}),
    "correlation 0.6 configured on ir_c": (
        {}, dict(correlation={"ir_c": 0.6}),
        {"ir_a": "ok", "ir_b": "ok", "ir_c": "too_large"}),
    "coarse grid, no representation error": (
        dict(clouds=False, subcell_amplitude=1.6, representation_sigma=0.0),
        dict(representation=0.0), {"ir_a": "ok", "ir_b": "ok", "ir_c": "ok"}),
    "coarse grid, representation error 0.3 K": (
        dict(clouds=False, subcell_amplitude=1.6, representation_sigma=0.3),
        dict(representation=0.3), {"ir_a": "ok", "ir_b": "ok", "ir_c": "ok"}),
    "ir_b's errors a third of the true": (
        dict(stated_divisor={"ir_b": 3.0}), {},
        {"ir_a": "ok", "ir_b": "too_small", "ir_c": "ok"}),
}
WAYS = ("ensemble", "collocation only")
SEED = 20261204


def one_night(job) -> list:
    """(case, night, way, sensor, right verdict, flag, reason) of every sensor of one night."""
    case, night = job
    write_arguments, config, right = CASES[case]
    logging.disable(logging.CRITICAL)  # the build's progress lines, not what is measured
    with tempfile.TemporaryDirectory(prefix="obsprep-audit-scene-") as tmp:
        directory = Path(tmp)
        rng = np.random.default_rng([SEED, list(CASES).index(case), night])
        paths = scenes.write_night(directory, rng, **write_arguments)
        summaries = scenes.built_and_audited(directory, paths, **config)
    return [(case, night, way, sensor, expected, summaries[way].loc[sensor, "flag"],
             summaries[way].loc[sensor, "reason"])
            for way in WAYS for sensor, expected in right.items()]


def kind(expected: str, flag: str) -> str:
    if flag == expected:
        return "right"
    if flag in ("inconclusive", "no_evidence"):
        return "honest"
    return "wrong"


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__,
                                     formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--nights", type=int, default=40, help="nights per case")
    parser.add_argument("--jobs", type=int, default=2, help="worker processes")
    options = parser.parse_args(argv)
    jobs = [(case, night) for case in CASES for night in range(options.nights)]
    with ProcessPoolExecutor(options.jobs) as pool:
        rows = [row for night_rows in pool.map(one_night, jobs) for row in night_rows]
    tally = collections.Counter((case, way, sensor, kind(expected, flag))
                                for case, _, way, sensor, expected, flag, _ in rows)
    print(f"{options.nights} nights per case; per sensor: right / inconclusive / confident "
          f"wrong", "", "| case | way | sensor (right verdict) | right | inconclusive | wrong |",
          "|---|---|---|---|---|---|", sep="\n")
    for case, (_, _, right) in CASES.items():
        for way in WAYS:
            for sensor, expected in right.items():
                counts = [tally[(case, way, sensor, k)] for k in ("right", "honest", "wrong")]
                print(f"| {case} | {way} | {sensor} ({expected}) | "
                      + " | ".join(map(str, counts)) + " |")
    wrong = [row for row in rows if kind(row[4], row[5]) == "wrong"]
    print(f"\nconfident wrong verdicts: {len(wrong)} of {len(rows)}")
    for case, night, way, sensor, expected, flag, reason in wrong[:10]:
        print(f"- {case}, night {night}, {way}, {sensor} (right: {expected}): {flag}: {reason}")
    return 1 if wrong else 0


if __name__ == "__main__":
    sys.exit(main())
