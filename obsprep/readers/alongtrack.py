"""Along-track sea level anomaly: a 1-D series of points with 1-D time, latitude, longitude."""

from __future__ import annotations

import numpy as np

from ..exceptions import InputFileError
from ..quantities import get_quantity
from . import cf
from .base import Reader, register_reader

SEA_LEVEL_ANOMALY = get_quantity("sea_level_anomaly")


def _data_variable(ds) -> str | None:
    return cf.find_variable(ds, SEA_LEVEL_ANOMALY.accepted_standard_names, ndim=1)


def pass_index_from_time_gaps(time, gap_seconds: float) -> np.ndarray:
    """Pass number (0, 1, ...) of each point of a time series in file order.

    A new pass starts where the time step is larger than ``gap_seconds`` (s) or negative
    (the series restarts); a NaT neighbour does not start a pass.
    """
    time = np.asarray(time, dtype="datetime64[ns]")
    ns = np.where(np.isnat(time), np.nan, time.astype(np.int64).astype(np.float64))
    step = np.diff(ns) / 1e9
    new_pass = (step > gap_seconds) | (step < 0)  # NaN compares False
    return np.concatenate([[0], np.cumsum(new_pass)]).astype(np.int64)


@register_reader
class AlongTrackReader(Reader):
    """Along-track altimetry: ``group`` is the ``cf_role = "trajectory_id"`` variable when
    present, else ``"pass_<n>"`` with passes split at time gaps > ``pass_gap_seconds``."""

    kind = "alongtrack"
    description = "along-track sea level anomaly (1-D series with 1-D time/lat/lon)"
    options = {**cf.COMMON_OPTIONS,
               "pass_gap_seconds": "split passes at time gaps longer than this (s, default 60) "
                                   "when the file has no trajectory_id variable"}

    def guess_can_open(self, ds) -> bool:
        name = _data_variable(ds)
        if name is None or str(ds.attrs.get("featureType", "")).lower() == "profile":
            return False
        coords = [cf.find_coordinate(ds, name, k) for k in ("latitude", "longitude", "time")]
        return all(c is not None and ds[c].dims == ds[name].dims for c in coords)

    def read_dataset(self, ds, path, **options):
        opts = cf.reader_options(self, options)
        name = cf.require_variable(ds, path, SEA_LEVEL_ANOMALY.accepted_standard_names,
                                   "sea level anomaly", ndim=1)
        decoded = cf.decode_data_variable(ds, name, SEA_LEVEL_ANOMALY, path,
                                          opts.good_flag_meanings)
        cf.require_values(path, [decoded])
        lon, lat = cf.horizontal_position(ds, name, path)
        time = cf.observation_time(ds, name, path)
        trajectory = [v for v in ds.variables
                      if ds[v].attrs.get("cf_role") == "trajectory_id" and ds[v].ndim <= 1]
        if trajectory:
            tid = ds[trajectory[0]]
            if tid.ndim == 1 and tid.dims != ds[name].dims:
                raise InputFileError(path, f"trajectory_id is on dimension {tid.dims}, expected "
                                           f"the data dimension {ds[name].dims}",
                                     variable=tid.name)
            group = cf.labels_as_strings(tid.values)
        else:
            passes = pass_index_from_time_gaps(time, opts.pass_gap_seconds)
            group = np.char.add("pass_", np.char.zfill(passes.astype(str), 4))
        return cf.observation_table(path, opts, decoded, lon=lon, lat=lat, time=time,
                                    group=group, platform=cf.platform_attribute(ds, opts))
