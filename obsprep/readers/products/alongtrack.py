"""Along-track sea level anomaly: a 1-D series of points with 1-D time, latitude, longitude.

Longitudes in 0..360 or -180..180 (wrapped to -180..180).  The pass (``group``) comes from a
``cf_role = "trajectory_id"`` variable or the variable named by option ``pass_variable``, else
passes are split at time gaps.

Correction terms: by default none is applied: the product's sea level anomaly is taken as the
provider computed it (an L2 record's anomaly already has its range, tide and atmospheric
corrections in it, as its documentation lists).  Options ``add_corrections`` /
``subtract_corrections`` name further terms on the same dimension, each a variable name or a
standard_name (so one configuration serves products that name their variables differently),
converted to m and added to / subtracted from the anomaly; where one is fill the value is
rejected as ``missing_correction``.

netCDF-4 groups (recent L2 records keep the 1 Hz and 20 Hz data in groups such as
``data_01``, ``data_01/ku``, ``data_20``): when the root group holds no sea level anomaly,
the groups that do (with 1-D time, latitude and longitude on its dimension, found upward
through the parent groups as CF 2.7 allows) are candidates, and the one with the fewest values
along that dimension is read: the lowest-rate record, the 1 Hz one that carries the
corrections, of which the 20 Hz values are the raw samples.  A per-file warning names the
group read when there were several; option ``data_group`` names another.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from obsprep.exceptions import InputFileError
from obsprep.model.quantities import get_quantity
from obsprep.model.reasons import register_reason
from obsprep.readers import cf
from obsprep.readers.registry import Reader, register_reader

SEA_LEVEL_ANOMALY = get_quantity("sea_level_anomaly")
register_reason("missing_correction", "a correction named in the configuration is fill for "
                                      "this value", stage="reader")


def _data_variable(ds) -> str | None:
    return cf.find_variable(ds, SEA_LEVEL_ANOMALY.accepted_standard_names, ndim=1)


def _is_alongtrack(ds) -> bool:
    """True when ``ds`` holds a 1-D sea level anomaly with time, latitude and longitude on
    its dimension (and is not a profile file)."""
    name = _data_variable(ds)
    if name is None or str(ds.attrs.get("featureType", "")).lower() == "profile":
        return False
    coords = [cf.find_coordinate(ds, name, k) for k in ("latitude", "longitude", "time")]
    return all(c is not None and ds[c].dims == ds[name].dims for c in coords)


def alongtrack_groups(path) -> list[tuple[str, int]]:
    """(group, values) of every group of ``path`` holding an along-track record, lowest rate
    (fewest values) first, then file order."""
    found = []
    for group in cf.group_paths(path):
        ds = cf.open_group(path, group, load=False)
        try:
            if _is_alongtrack(ds):
                found.append((group, int(ds[_data_variable(ds)].size)))
        finally:
            ds.close()
    return sorted(found, key=lambda item: item[1])


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


def correction_variable(ds, wanted: str) -> str | None:
    """The variable a correction option names: a variable of that name (the last part of a
    group path "data_01/inv_bar_cor" too, the groups being merged), else the one with that
    standard_name; None when there is neither."""
    for candidate in (wanted, wanted.rsplit("/", 1)[-1]):
        if candidate in ds.variables:
            return candidate
    return cf.find_variable(ds, [wanted])


@dataclass(frozen=True)
class AlongTrackOptions(cf.CfOptions):
    """Options of the along-track reader."""

    pass_gap_seconds: float = cf.option(
        60.0, "split passes at time gaps longer than this (s, default 60) when the file has no "
              "trajectory_id variable", cf.parse_positive_seconds)
    pass_variable: str | None = cf.option(
        None, "variable holding the pass/track number (default: the cf_role = trajectory_id "
              "variable, else time gaps)", cf.parse_string)
    data_group: str | None = cf.option(
        None, "netCDF-4 group to read, e.g. data_01/ku (default: the root group, else the "
              "lowest-rate group holding a sea level anomaly)", cf.parse_string)
    add_corrections: tuple = cf.option(
        (), "correction terms added to the value: variable names or standard_names (m, or "
            "any length unit); default none: the product's anomaly as the provider "
            "corrected it", cf.parse_names)
    subtract_corrections: tuple = cf.option(
        (), "correction terms subtracted from the value: variable names or standard_names "
            "(m, or any length unit); default none", cf.parse_names)


@register_reader
class AlongTrackReader(Reader):
    """Along-track altimetry: ``group`` is the ``cf_role = "trajectory_id"`` variable when
    present, else ``"pass_<n>"`` with passes split at time gaps > ``pass_gap_seconds``."""

    kind = "alongtrack"
    description = "along-track sea level anomaly (1-D series with 1-D time/lat/lon)"
    Options = AlongTrackOptions

    def guess_can_open(self, ds) -> bool:
        if _is_alongtrack(ds):
            return True
        source = cf.source_path(ds)
        return _data_variable(ds) is None and source is not None \
            and bool(alongtrack_groups(source))

    def read_dataset(self, ds, path, *, options, leave_out_rejected, reading_part):
        opts = options
        if opts.data_group is not None:
            if opts.data_group.strip("/") not in cf.group_paths(path):
                raise InputFileError(path, f"option data_group names group "
                                           f"'{opts.data_group}', which is not in the file")
            ds = cf.open_group(path, opts.data_group.strip("/"))
        elif _data_variable(ds) is None:
            groups = alongtrack_groups(path)
            if groups:
                group, size = groups[0]
                if len(groups) > 1:
                    others = ", ".join(f"{g} ({n})" for g, n in groups[1:])
                    cf.file_warning(f"read group '{group}' ({size} values), the lowest-rate "
                                    f"along-track record; not read: {others}")
                ds = cf.open_group(path, group)
        name = cf.require_variable(ds, path, SEA_LEVEL_ANOMALY.accepted_standard_names,
                                   "sea level anomaly", ndim=1)
        decoded = cf.decode_data_variable(ds, name, SEA_LEVEL_ANOMALY, path,
                                          opts.good_flag_meanings)
        cf.require_values(path, [decoded], reading_part=reading_part)
        decoded, correction_missing, used = self._corrections(ds, name, decoded, path, opts)
        lon, lat = cf.horizontal_position(ds, name, path, reading_part=reading_part)
        time = cf.observation_time(ds, name, path)
        trajectory = [v for v in ds.variables
                      if ds[v].attrs.get("cf_role") == "trajectory_id" and ds[v].ndim <= 1]
        pass_variable = opts.pass_variable
        if pass_variable is not None:
            if pass_variable not in ds.variables:
                raise InputFileError(path, "option pass_variable names a variable that is not "
                                           "in the file", variable=str(pass_variable))
            trajectory = [pass_variable]
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
        table = cf.observation_table(path, opts, decoded, lon=lon, lat=lat, time=time,
                                     group=group, platform=cf.platform_attribute(ds, opts),
                                     rejections=[(correction_missing, "missing_correction")],
                                     leave_out_rejected=leave_out_rejected)
        names = [name] + [cf.find_coordinate(ds, name, k) for k in ("latitude", "longitude",
                                                                     "time")]
        table.attrs["variables"] = cf.variable_units(ds, names + trajectory[:1] + used)
        return table

    @staticmethod
    def _corrections(ds, name, decoded, path, opts):
        """Add/subtract the named correction variables (converted to m)."""
        values = decoded.values
        missing = np.zeros(values.shape, dtype=bool)
        used = []
        for option, sign in (("add_corrections", 1.0), ("subtract_corrections", -1.0)):
            for wanted in getattr(opts, option):
                correction = correction_variable(ds, wanted)
                if correction is None:
                    raise InputFileError(path, f"option {option} names a variable (or "
                                               f"standard_name) that is not in the file",
                                         variable=str(wanted))
                var = ds[correction]
                if not set(var.dims) <= set(ds[name].dims):
                    raise InputFileError(path, f"correction on dimensions {var.dims}, expected "
                                               f"the data dimension {ds[name].dims}",
                                         variable=correction)
                metres = cf.broadcast_to_variable(cf.values_in_units(var, "m", path),
                                                  var.dims, ds[name], path=path)
                missing |= np.isfinite(values) & ~np.isfinite(metres)
                values = values + sign * np.where(np.isfinite(metres), metres, 0.0)
                used.append(correction)
        return decoded.replace(values=values), missing, used
