"""z = (super-observation - truth) / error of a demo build, and its sampling tolerances when the
demo's errors are correlated within error groups (passes, granules, files).

z values of one error group share that group's common error, so they are not independent.  The
sampling tolerance comes from the groups: the cluster-robust (sandwich) variance of a mean over
independent groups, Var(mean) = G / (G - 1) sum_g (sum_{i in g} (x_i - mean))^2 / n^2
([LiangZeger1986]; from memory), for the mean of z (x = z) and for its variance (x = the
squared deviations; the standard error of the std by the delta method, SE(var) / (2 std)).  The
effective count is var(z) / Var(mean of z).  Kish's effective number of groups,
(sum_g m_g)^2 / sum_g m_g^2 for groups of m_g values ([Kish1965]; from memory), is the count
left if all z of a group were equal.
"""

from __future__ import annotations

import json
import os

import numpy as np
import pandas as pd

from obsprep.demo.truth import truth_value

#: sensors whose errors are correlated within one granule file, the granule's start time in its
#: file name (the demo's obs/sst_swath/sst_l2_YYYYMMDDTHHMMSS.nc)
GRANULE_SENSORS = {"sst_swath_ir": "sst_l2_"}
#: along-track sensors (also merged, as "altimetry" in examples/regular_grid.toml)
ALONG_TRACK_SENSORS = ("altimeter_a", "altimeter_b", "altimeter_c", "altimetry")
#: a new pass starts after this gap between a sensor's super-observations: one satellite's
#: passes over the domain are about 50 min apart and last under 15 min; two satellites' passes
#: less than this apart become one group (fewer groups: a wider, conservative tolerance)
PASS_GAP = np.timedelta64(20, "m")


def error_groups(ds, quantity, truth_fn=None):
    """Error-group label of each super-observation of ``quantity`` in dataset ``ds``: (sensor,
    day, pass) for along-track sensors, passes split at gaps of :data:`PASS_GAP` in time (the
    day because each daily file's pass is its own group), the granule for the granule sensors
    (:data:`GRANULE_SENSORS`), else the super-observation itself."""
    sensor = ds[f"{quantity}_sensor"].to_numpy().astype(str)
    time = ds[f"{quantity}_time"].to_numpy()
    day = time.astype("datetime64[D]").astype(str)
    labels = np.array([f"obs{k}" for k in range(sensor.size)], dtype=object)
    for name in ALONG_TRACK_SENSORS:
        chosen = np.flatnonzero(sensor == name)
        if chosen.size:
            order = chosen[np.argsort(time[chosen], kind="stable")]
            passes = np.concatenate([[0], np.cumsum(np.diff(time[order]) > PASS_GAP)])
            labels[order] = [f"{name}/{d}/{p}" for d, p in zip(day[order], passes)]
    files = [str(f.get("file", f.get("path", ""))) if isinstance(f, dict) else str(f)
             for f in json.loads(ds.attrs.get("input_files", "[]"))]
    for name, prefix in GRANULE_SENSORS.items():
        chosen = np.flatnonzero(sensor == name)
        starts = np.sort(np.array(
            [np.datetime64(pd.Timestamp(os.path.basename(f)[len(prefix):-3]).to_datetime64(), "ns")
             for f in files if os.path.basename(f).startswith(prefix)], dtype="datetime64[ns]"))
        if chosen.size and starts.size:
            # a super-observation belongs to the granule in which its mean time lies (one in a
            # cell shared by two granules is given one of them)
            granule = np.searchsorted(starts, time[chosen], side="right") - 1
            labels[chosen] = [f"{name}/{g}" for g in granule]
    return labels


def cluster_standard_error(values, groups):
    """Standard error of the mean of ``values`` over independent ``groups`` (cluster-robust
    variance, [LiangZeger1986]; from memory); returns (standard error, number of groups)."""
    values = np.asarray(values, dtype=np.float64)
    deviations = pd.Series(values - values.mean()).groupby(np.asarray(groups)).sum().to_numpy()
    n_groups = deviations.size
    variance = n_groups / (n_groups - 1.0) * np.sum(deviations ** 2) / values.size ** 2
    return float(np.sqrt(variance)), n_groups


def z_values(ds, quantity, truth=None):
    """z = (super-observation - truth) / error; ``truth`` given, or the demo truth at the
    super-observations' positions and times."""
    q = quantity
    if truth is None:
        time_end = ds[f"{q}_time_end"].to_numpy() if f"{q}_time_end" in ds else None
        truth = truth_value(q, ds[f"{q}_lon"].to_numpy(), ds[f"{q}_lat"].to_numpy(),
                            ds[f"{q}_depth"].to_numpy(), ds[f"{q}_time"].to_numpy(), time_end)
    return (ds[q].to_numpy() - truth) / ds[f"{q}_error"].to_numpy()


def z_statistics(ds, quantity, standard_errors, truth=None):
    """Mean and std of z, the count n, the number of error groups, the effective count and
    Kish's effective number of groups, and tolerances of ``standard_errors`` cluster-robust
    standard errors for the mean and the std."""
    z = z_values(ds, quantity, truth)
    groups = error_groups(ds, quantity)
    mean, std = float(z.mean()), float(z.std(ddof=1))
    mean_se, n_groups = cluster_standard_error(z, groups)
    variance_se, _ = cluster_standard_error((z - mean) ** 2, groups)
    sizes = pd.Series(groups).value_counts().to_numpy().astype(np.float64)
    return {"n": int(z.size), "groups": n_groups, "mean": mean, "std": std,
            "effective_n": std ** 2 / mean_se ** 2,
            "kish_groups": float(sizes.sum() ** 2 / np.sum(sizes ** 2)),
            "mean_tolerance": standard_errors * mean_se,
            "std_tolerance": standard_errors * variance_se / (2.0 * std)}
