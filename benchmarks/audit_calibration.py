"""Calibration of the error audit's verdict on synthetic nights of known error.

    python benchmarks/audit_calibration.py            # full: 100 trials per case, ~15 min
    python benchmarks/audit_calibration.py --quick    # 20 trials per case, ~3-6 min
    python benchmarks/audit_calibration.py --record   # also write the table into README.md

Each trial draws one table of three sensors (benchmarks/audit_synthetic.py: spatially
correlated background errors, an ensemble of 20-40 members exchangeable with the truth,
granule-correlated raw errors, sub-cell variability, a representation error common to all
sensors), with one sensor (a, b, c in turn) assigned its true error divided by F, F in 0.5,
1.5, 2, 3 (F = 1: every sensor correct), and gives it to
``obsprep.audit.summary.assess``.  Two ways of auditing are run: with the ensemble, and
without any model (pairs and triple collocation only).  Seeds are fixed: a rerun gives the
same table on the same library versions.  Trials run in ``--jobs`` processes (default 2: the
full run is about 15 minutes on two idle cores, the audit's block statistics being most of it).

What is counted, per case (way, F, super-observations per sensor):

- false alarms: a correct sensor flagged too_small or too_large;
- detection: the misassigned sensor flagged in the right direction (too_small for F > 1,
  too_large for F < 1); wrong direction: flagged the other way; ok: called ok (a confident
  miss); inconclusive and no_evidence: the honest rest;
- coverage: the share of verdicts whose [factor_low, factor_high] contains the true F.

Goals (the issue): false alarms at most 5 %; detection of F = 2 and 0.5 at 200 or more
super-observations at least 90 %, of F = 3 at least 99 %; no flag in the wrong direction.
"""

from __future__ import annotations

import argparse
import datetime as dt
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(ROOT))

import audit_synthetic as synthetic  # noqa: E402

FACTORS = (1.0, 0.5, 1.5, 2.0, 3.0)
SIZES = (30, 100, 200, 1000)
TRIALS = {"full": 100, "quick": 20}
WAYS = ("ensemble", "collocation only")
MEMBERS = (20, 40)              # ensemble size: uniform in this range per trial
TOLERANCE = 1.5
SEED = 20261204
FLAGGED = ("too_small", "too_large")
#: columns of the synthetic table that carry the truth: never given to the audit
TRUTH_COLUMNS = ("true_error", "true_factor", "true_background_variance", "truth")

BEGIN = "<!-- audit calibration results: begin -->"
END = "<!-- audit calibration results: end -->"


def one_trial(job) -> list:
    """Audit one synthetic table; one result row per sensor."""
    from obsprep.audit.summary import AuditContext, assess

    way, factor, size, trial = job
    rng = np.random.default_rng([SEED, WAYS.index(way), FACTORS.index(factor), size, trial])
    scenario = synthetic.Scenario()
    misassigned = scenario.sensors[trial % len(scenario.sensors)].name
    members = int(rng.integers(MEMBERS[0], MEMBERS[1] + 1)) if way == "ensemble" else 0
    table = synthetic.synthetic_table(rng, size, {misassigned: factor}, members=members,
                                      scenario=scenario)
    context = AuditContext(members=members, tolerance=TOLERANCE,
                           correlation={s.name: s.rho for s in scenario.sensors},
                           representation_common=True)
    summary = assess(table.drop(columns=list(TRUTH_COLUMNS)), context)
    rows = []
    for sensor in scenario.sensors:
        match = summary[summary["sensor"] == sensor.name]
        true_factor = factor if sensor.name == misassigned else 1.0
        if len(match) != 1:
            raise RuntimeError(f"assess returned {len(match)} rows for sensor {sensor.name}")
        m = match.iloc[0]
        rows.append({"way": way, "factor": factor, "size": size, "trial": trial,
                     "sensor": sensor.name, "misassigned": sensor.name == misassigned
                     and factor != 1.0, "true_factor": true_factor, "flag": m["flag"],
                     "estimate": float(m["factor"]), "low": float(m["factor_low"]),
                     "high": float(m["factor_high"]), "reason": str(m["reason"])})
    return rows


def run_trials(trials: int, jobs: int, ways=WAYS) -> pd.DataFrame:
    work = [(way, factor, size, trial) for way in ways for factor in FACTORS for size in SIZES
            for trial in range(trials)]
    if jobs > 1:
        import multiprocessing

        with multiprocessing.get_context("fork").Pool(jobs) as pool:
            parts = pool.map(one_trial, work, chunksize=4)
    else:
        parts = [one_trial(job) for job in work]
    return pd.DataFrame([row for part in parts for row in part])


def percent(part) -> str:
    return f"{100.0 * np.mean(part):.0f}" if len(part) else "-"


def right_direction(row_flag, true_factor) -> bool:
    return row_flag == ("too_small" if true_factor > 1 else "too_large")


def wrong_direction(row_flag, true_factor) -> bool:
    if true_factor == 1.0:
        return False
    return row_flag == ("too_large" if true_factor > 1 else "too_small")


def tables(results: pd.DataFrame) -> tuple[str, list]:
    """The Markdown tables and the goal rows (name, value, goal, met)."""
    results = results.copy()
    results["covers"] = (results["low"] <= results["true_factor"]) \
        & (results["true_factor"] <= results["high"])
    results["right"] = [right_direction(f, t) for f, t in zip(results["flag"],
                                                                results["true_factor"])]
    results["wrong"] = [wrong_direction(f, t) for f, t in zip(results["flag"],
                                                                results["true_factor"])]
    lines = ["Correct sensors (every case; % of sensor verdicts):", "",
             "| way | super-obs per sensor | verdicts | false alarms % | ok % | "
             "inconclusive % | no_evidence % | interval covers 1 % |",
             "|---|---|---|---|---|---|---|---|"]
    goals = []
    correct = results[~results["misassigned"]]
    for (way, size), g in correct.groupby(["way", "size"], sort=False):
        lines.append(f"| {way} | {size} | {len(g)} | {percent(g['flag'].isin(FLAGGED))} | "
                     f"{percent(g['flag'] == 'ok')} | {percent(g['flag'] == 'inconclusive')} | "
                     f"{percent(g['flag'] == 'no_evidence')} | {percent(g['covers'])} |")
    lines += ["", "Misassigned sensors (true error F times the assigned; % of trials):", "",
              "| way | F | super-obs per sensor | trials | right direction % | "
              "wrong direction % | ok % | inconclusive % | no_evidence % | "
              "interval covers F % | median estimate |",
              "|---|---|---|---|---|---|---|---|---|---|---|"]
    wrong = results[results["misassigned"]]
    for (way, factor, size), g in wrong.groupby(["way", "factor", "size"], sort=False):
        median = np.nanmedian(g["estimate"]) if np.isfinite(g["estimate"]).any() else np.nan
        lines.append(f"| {way} | {factor:g} | {size} | {len(g)} | {percent(g['right'])} | "
                     f"{percent(g['wrong'])} | {percent(g['flag'] == 'ok')} | "
                     f"{percent(g['flag'] == 'inconclusive')} | "
                     f"{percent(g['flag'] == 'no_evidence')} | {percent(g['covers'])} | "
                     f"{median:.2f} |")
    for way, g in results.groupby("way", sort=False):
        c = g[~g["misassigned"]]
        rate = c["flag"].isin(FLAGGED).groupby(c["size"]).mean()
        goals.append((f"{way}: false alarms on correct sensors (worst size)",
                      f"{100 * rate.max():.1f} % (at {rate.idxmax()})", "<= 5 %",
                      rate.max() <= 0.05))
        big = g[g["misassigned"] & (g["size"] >= 200)]
        for factors, goal in (((2.0, 0.5), 0.90), ((3.0,), 0.99)):
            pick = big[big["factor"].isin(factors)]
            by_case = pick["right"].groupby([pick["factor"], pick["size"]]).mean()
            worst = by_case.min()
            where = by_case.idxmin()
            goals.append((f"{way}: detection of F = {' and '.join(f'{f:g}' for f in factors)}"
                          f" at >= 200 super-obs (worst case)",
                          f"{100 * worst:.1f} % (F {where[0]:g}, {where[1]})",
                          f">= {100 * goal:.0f} %", worst >= goal))
        count = int(g["wrong"].sum())
        goals.append((f"{way}: flags in the wrong direction", f"{count} of "
                      f"{int(g['misassigned'].sum())}", "none", count == 0))
    lines += ["", "| goal | measured | target | met |", "|---|---|---|---|"]
    lines += [f"| {name} | {value} | {target} | {'yes' if met else 'no'} |"
              for name, value, target, met in goals]
    return "\n".join(lines), goals


def wrong_examples(results: pd.DataFrame, limit: int = 8) -> str:
    """A few confident wrong verdicts with their reasons (for whoever mends the audit)."""
    bad = results[[wrong_direction(f, t) or (t == 1.0 and f in FLAGGED) or
                   (t in (3.0,) and f == "ok")
                   for f, t in zip(results["flag"], results["true_factor"])]]
    lines = [f"- {r.way}, F {r.factor:g}, {r.size} super-obs, trial {r.trial}, sensor "
             f"{r.sensor} (true {r.true_factor:g}): {r.flag}, estimate {r.estimate:.2f} "
             f"[{r.low:.2f}, {r.high:.2f}]: {r.reason}" for r in bad.head(limit).itertuples()]
    return "\n".join(lines)


def source_revision() -> str:
    """The git commit of the working tree the benchmark runs in ("unknown" outside git)."""
    import subprocess

    try:
        out = subprocess.run(["git", "-C", str(ROOT), "describe", "--always", "--dirty"],
                             capture_output=True, text=True, timeout=10)
    except (OSError, subprocess.SubprocessError):
        return "unknown"
    return out.stdout.strip() or "unknown"


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--quick", action="store_true", help="20 trials per case")
    parser.add_argument("--trials", type=int, help="trials per case (overrides the default)")
    parser.add_argument("--jobs", type=int, default=2, help="worker processes (default 2)")
    parser.add_argument("--record", action="store_true",
                        help="write the table into benchmarks/README.md between its markers")
    parser.add_argument("--csv", type=Path, help="also write every verdict to this CSV file")
    args = parser.parse_args(argv)
    try:
        from obsprep.audit.summary import AuditContext, assess  # noqa: F401
    except ImportError as exc:
        print(f"obsprep.audit.summary has no AuditContext/assess yet ({exc}); "
              f"this benchmark needs them", file=sys.stderr)
        return 2
    trials = args.trials or TRIALS["quick" if args.quick else "full"]
    started = dt.datetime.now(dt.UTC)
    revision = source_revision()     # before the run: the code the trials import
    clock = time.perf_counter()
    results = run_trials(trials, args.jobs)
    elapsed = time.perf_counter() - clock
    if args.csv:
        results.to_csv(args.csv, index=False)
    body, goals = tables(results)
    from run import machine_line

    command = "python benchmarks/audit_calibration.py" + (" --quick" if args.quick else "") \
        + (f" --trials {args.trials}" if args.trials else "")
    text = (f"Run {started:%Y-%m-%d %H:%M} UTC, `{command}` ({trials} trials per case, "
            f"{elapsed / 60:.1f} min with {args.jobs} process{'es' if args.jobs > 1 else ''}; "
            f"source {revision})"
            f"\n\nMachine: {machine_line()}\n\n{body}")
    print(text)
    examples = wrong_examples(results)
    if examples:
        print("\nConfident wrong verdicts (first few):\n" + examples)
    if args.record:
        record(text)
    return 0


def record(text: str) -> None:
    readme = HERE / "README.md"
    content = readme.read_text()
    block = f"{BEGIN}\n{text}\n{END}"
    if BEGIN in content and END in content:
        head, rest = content.split(BEGIN, 1)
        content = head + block + rest.split(END, 1)[1]
    else:
        content = content.rstrip("\n") + "\n\n## Audit calibration\n\n" + block + "\n"
    readme.write_text(content)


if __name__ == "__main__":
    sys.exit(main())
