"""Temperature/salinity profiles: CF discrete sampling geometry ``featureType = "profile"``.

Layouts: incomplete multidimensional arrays (profile, level) padded with fill, contiguous
ragged arrays (a count variable with ``sample_dimension``, CF H.3.4) and indexed ragged arrays
(an index variable with ``instance_dimension``, CF H.3.5), as written for ship CTD casts and
glider profiles.  One row per (profile, level,
quantity); ``row`` is the flat index of the value in the source variable
(profile * n_levels + level for the multidimensional layout, the sample index for ragged).
A padding level, where every quantity and the vertical coordinate are fill, is not an
observation and is dropped; any other fill counts as ``missing_value`` (including a value whose
vertical coordinate is fill: it cannot be placed).
"""

from __future__ import annotations

import numpy as np

from obsprep.exceptions import InputFileError
from obsprep.geo.seawater import depth_from_pressure
from obsprep.model.quantities import get_quantity
from obsprep.model.table import concat_tables
from obsprep.readers import cf
from obsprep.readers.registry import Reader, register_reader

PROFILE_QUANTITIES = (get_quantity("sea_water_temperature"), get_quantity("sea_water_salinity"))


def _quantity_variables(ds) -> dict:
    names = {}
    for q in PROFILE_QUANTITIES:
        name = cf.find_variable(ds, q.accepted_standard_names)
        if name is not None:
            names[q] = name
    return names


class _Layout:
    """Maps per-profile and per-sample arrays onto the shape of the data variables."""

    def __init__(self, ds, var, path):
        self.var = var
        self.path = path
        counts = [c for c in ds.variables
                  if ds[c].attrs.get("sample_dimension") in var.dims and ds[c].ndim == 1]
        indices = [c for c in ds.variables
                   if ds[c].attrs.get("instance_dimension") in ds.dims
                   and ds[c].dims == var.dims and var.ndim == 1]
        self.ragged = (bool(counts) or bool(indices)) and var.ndim == 1
        if self.ragged and not counts:
            index = ds[indices[0]]
            self.profile_dim = str(index.attrs["instance_dimension"])
            self.n_profiles = ds.sizes[self.profile_dim]
            values = np.asarray(index.values, dtype=np.float64)
            if not (np.isfinite(values) & (values >= 0) & (values < self.n_profiles)).all():
                raise InputFileError(path, f"indexed ragged array: every index must be a "
                                           f"profile number 0..{self.n_profiles - 1}",
                                     variable=index.name)
            self.profile_of_sample = values.astype(np.int64)
        elif self.ragged:
            count = ds[counts[0]]
            n = count.values
            if not np.isfinite(n).all() or int(n.sum()) != var.size:
                raise InputFileError(path, f"ragged-array counts sum to {np.nansum(n):.0f} but "
                                           f"the sample dimension has {var.size} values",
                                     variable=count.name)
            self.profile_dim = count.dims[0]
            self.profile_of_sample = np.repeat(np.arange(n.size), n.astype(np.int64))
            self.n_profiles = n.size
        else:
            lat = cf.find_coordinate(ds, var.name, "latitude", anywhere=True)
            self.profile_dim = ds[lat].dims[0] if lat is not None and ds[lat].ndim == 1 else None
            self.n_profiles = var.sizes[self.profile_dim] if self.profile_dim else 1

    def per_sample(self, values, dims) -> np.ndarray:
        """``values`` (on ``dims``) as an array of the data variables' shape."""
        if self.ragged and tuple(dims) == (self.profile_dim,):
            return np.asarray(values)[self.profile_of_sample]
        return cf.broadcast_to_variable(values, dims, self.var, path=self.path)

    def profile_index(self) -> np.ndarray:
        if self.profile_dim is None:
            return np.zeros(self.var.shape, dtype=np.int64)
        return self.per_sample(np.arange(self.n_profiles), (self.profile_dim,))


@register_reader
class ProfileReader(Reader):
    """Profiles with pressure (converted to depth with TEOS-10) or depth as vertical
    coordinate; ``group`` from the ``cf_role = "profile_id"`` variable, else the profile index;
    ``platform`` from the option, the ``platform`` global attribute or a variable whose
    ``long_name`` contains "platform"."""

    kind = "profiles"
    description = "T/S profiles (CF featureType profile: multidimensional or ragged arrays)"
    Options = cf.CfOptions

    def guess_can_open(self, ds) -> bool:
        return (str(ds.attrs.get("featureType", "")).lower() == "profile"
                and bool(_quantity_variables(ds)))

    def read_dataset(self, ds, path, *, options, leave_out_rejected, reading_part):
        opts = options
        names = _quantity_variables(ds)
        if not names:
            raise InputFileError(path, "no profile variables: expected standard_name "
                                       "sea_water_temperature or sea_water_practical_salinity")
        first = ds[next(iter(names.values()))]
        for name in names.values():
            if ds[name].dims != first.dims:
                raise InputFileError(path, f"dimensions {ds[name].dims} differ from "
                                           f"{first.dims} of '{first.name}'", variable=name)
        decoded = [cf.decode_data_variable(ds, n, q, path, opts.good_flag_meanings)
                   for q, n in names.items()]
        cf.require_values(path, decoded, reading_part=reading_part)
        layout = _Layout(ds, first, path)

        def coordinate(kind):
            name = cf.find_coordinate(ds, first.name, kind, anywhere=True)
            return None if name is None else ds[name]

        lat_var, lon_var, time_var = (coordinate(k) for k in ("latitude", "longitude", "time"))
        for kind, c in (("latitude", lat_var), ("longitude", lon_var), ("time", time_var)):
            if c is None:
                raise InputFileError(path, f"no {kind} coordinate for the profiles",
                                     variable=first.name)
        lat = layout.per_sample(lat_var.values.astype(np.float64), lat_var.dims)
        lon = cf.wrap_longitude(layout.per_sample(lon_var.values, lon_var.dims))
        time = layout.per_sample(cf.decode_time_variable(time_var, path), time_var.dims)
        depth = self._depth(ds, first, layout, lat, path)

        padding = None
        if not layout.ragged:
            padding = ~np.isfinite(depth)
            for d in decoded:
                padding &= ~np.isfinite(d.values)
        group = self._group(ds, layout)
        platform = self._platform(ds, opts, layout)
        table = concat_tables([
            cf.observation_table(path, opts, d, lon=lon, lat=lat, time=time, depth=depth,
                                 group=group, platform=platform,
                                 keep=None if padding is None else ~padding,
                                 missing=~np.isfinite(depth))
            for d in decoded])
        used = [n for n in names.values()]
        for n in names.values():
            used += cf.ancillary_variable_names(ds, n)
        for kind in ("latitude", "longitude", "time", "depth", "sea_water_pressure"):
            used.append(cf.find_coordinate(ds, first.name, kind, anywhere=True))
        table.attrs["variables"] = cf.variable_units(ds, list(dict.fromkeys(used)))
        return table

    @staticmethod
    def _depth(ds, var, layout, lat, path) -> np.ndarray:
        depth_name = cf.find_coordinate(ds, var.name, "depth", anywhere=True)
        if depth_name is not None:
            depth = cf.values_in_units(ds[depth_name], "m", path)
            if str(ds[depth_name].attrs.get("positive", "down")).lower() == "up":
                depth = -depth
            return np.asarray(layout.per_sample(depth, ds[depth_name].dims), dtype=np.float64)
        pressure_name = cf.find_coordinate(ds, var.name, "sea_water_pressure", anywhere=True)
        if pressure_name is None:
            raise InputFileError(path, "no vertical coordinate: expected a variable with "
                                       "standard_name 'depth' or 'sea_water_pressure'",
                                 variable=var.name)
        pressure = cf.values_in_units(ds[pressure_name], "dbar", path)
        return depth_from_pressure(layout.per_sample(pressure, ds[pressure_name].dims), lat)

    @staticmethod
    def _group(ds, layout):
        ids = [v for v in ds.variables if ds[v].attrs.get("cf_role") == "profile_id"]
        if ids and ds[ids[0]].ndim <= 1:
            return layout.per_sample(cf.labels_as_strings(ds[ids[0]].values), ds[ids[0]].dims)
        return layout.profile_index().astype(str)

    @staticmethod
    def _platform(ds, opts, layout):
        if opts.platform is not None or "platform" in ds.attrs:
            return cf.platform_attribute(ds, opts)
        named = [v for v in ds.variables
                 if "platform" in str(ds[v].attrs.get("long_name", "")).lower()
                 and ds[v].ndim <= 1]
        if named:
            return layout.per_sample(cf.labels_as_strings(ds[named[0]].values), ds[named[0]].dims)
        return ""
