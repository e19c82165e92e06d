"""Temperature/salinity profiles in CF discrete sampling geometries: ``featureType`` profile,
trajectoryProfile (gliders) or timeSeriesProfile, in any of the four CF representations
(orthogonal and incomplete multidimensional, contiguous and indexed ragged; CF 1.8 chapter 9,
appendix H), decoded by :mod:`obsprep.readers.dsg`.

One row per (profile, level, quantity).  The quantities are the depth-resolved ones of
:mod:`obsprep.model.quantities` (in-situ temperature, practical salinity, potential
temperature, each by its own standard_name: potential temperature is never read as in-situ
temperature).  Data variables on different dimensions (several sample dimensions in one file)
are read layout by layout, each with the coordinates that reach it (a layout that cannot be
read, for want of coordinates, is named in a warning when another can; the file is refused
only when none can); on the same dimensions one variable per quantity is read, the first in the
file, and any other is named in a warning.

- time, latitude, longitude: the coordinate of that kind that reaches the values, preferring
  one named in the data variable's ``coordinates`` attribute, then one with an ``axis``
  attribute (the nominal position, CF 9.5);
- depth from a ``depth`` coordinate (``positive = "up"`` negated) or from sea pressure with
  TEOS-10 (:func:`obsprep.geo.seawater.depth_from_pressure`);
- ``group``: the ``cf_role`` labels joined by "_" (trajectory or station, then profile), the
  profile number (along the dimensions of time and position) in place of a missing
  profile_id;
- ``platform``: the option, the ``platform`` global attribute, a variable with standard_name
  ``platform_id`` or ``platform_name``, the trajectory or station label, a string variable
  whose ``long_name`` contains "platform", else "";
- ``row``: the flat index of the value in its data variable, offset by the sizes of the
  layouts before it, so that rows of different sample dimensions never coincide (checks pair
  temperature and salinity of one level by ``row``).

Storage that holds no observation is not a row (CF 9.6): samples outside every feature of a
ragged array, and elements where the value of every quantity and the vertical coordinate (or
the feature's position) are missing.  Any other missing value counts as ``missing_value``,
including a value whose vertical coordinate is missing (it cannot be placed).
"""

from __future__ import annotations

import numpy as np

from obsprep.exceptions import InputFileError
from obsprep.geo.seawater import depth_from_pressure
from obsprep.model.quantities import QUANTITIES
from obsprep.model.table import add_warning, concat_tables
from obsprep.readers import cf, dsg
from obsprep.readers.registry import Reader, register_reader

#: the depth-resolved quantities read from profiles
PROFILE_QUANTITIES = tuple(q for q in QUANTITIES.values() if not q.surface)
#: the quantity of potential temperature, named in a warning of every file that gives it
POTENTIAL_TEMPERATURE = "sea_water_potential_temperature"
#: CF featureType values (compared without regard to case, CF 9.4) of profile collections
PROFILE_FEATURE_TYPES = ("profile", "trajectoryprofile", "timeseriesprofile")
#: standard names of a variable naming the platform (CF standard name table)
PLATFORM_STANDARD_NAMES = ("platform_id", "platform_name")


def quantity_variables(ds) -> list[tuple]:
    """``(quantity, variable name)`` of every variable whose standard_name is accepted by a
    profile quantity, in file order."""
    found = []
    for name, var in ds.variables.items():
        standard_name = str(var.attrs.get("standard_name", "")).strip()
        for q in PROFILE_QUANTITIES:
            if standard_name in q.accepted_standard_names:
                found.append((q, str(name)))
    return found


def _coordinate(ds, name, kind, index) -> str | None:
    """The coordinate of ``kind`` that reaches the values of ``name``: listed in its
    ``coordinates`` attribute first, then one with an ``axis`` attribute."""
    listed = str(ds[name].attrs.get("coordinates", "")).split()
    found = [c for c in cf.find_coordinates(ds, name, kind, anywhere=True)
             if index.reaches(ds[c])]
    found.sort(key=lambda c: (c not in listed, "axis" not in ds[c].attrs))
    return found[0] if found else None


#: the flag meaning of a value the provider did not assess (CF flag_meanings as IOOS, IMOS and
#: OceanSITES files write it); such values are rejected unless good_flag_meanings keeps them
UNASSESSED_MEANING = "no_qc_performed"


def _unassessed_warnings(ds, path, opts, decoded, table, offset: int) -> list[str]:
    """One warning per data variable whose rows rejected by their flag carry the meaning
    "no_qc_performed": the provider gave no verdict, and the option can keep them for
    obsprep's own checks.  ``offset``: the first ``row`` of the layout."""
    if UNASSESSED_MEANING in opts.good_flag_meanings:
        return []
    out = []
    for d in decoded:
        for flag_name in cf.find_flag_variables(ds, d.variable):
            try:
                unassessed = cf.flag_meaning_masks(ds[flag_name], path,
                                                   only=(UNASSESSED_MEANING,))
            except InputFileError:
                continue  # the flag decoding itself reports what is wrong with it
            mask = unassessed.get(UNASSESSED_MEANING)
            if mask is None or ds[flag_name].dims != ds[d.variable].dims:
                continue
            rows = table[table["quantity"] == d.quantity.name]
            flagged = rows["rejected"].astype(object).eq("provider_flag").to_numpy()
            hit = np.asarray(mask).ravel()[rows["row"].to_numpy()[flagged] - offset]
            n = int(hit.sum())
            if n:
                out.append(f"{n} values of '{d.variable}' rejected as provider_flag have the "
                           f"meaning {UNASSESSED_MEANING} in '{flag_name}' (not assessed by "
                           f"the provider); option good_flag_meanings can keep them for "
                           f"obsprep's own checks")
    return out


@register_reader
class ProfileReader(Reader):
    """Profiles of any CF discrete-sampling layout, with depth or sea pressure (converted to
    depth with TEOS-10) as vertical coordinate."""

    kind = "profiles"
    description = ("T/S profiles (CF featureType profile, trajectoryProfile or "
                   "timeSeriesProfile: multidimensional or ragged arrays)")
    Options = cf.CfOptions

    def guess_can_open(self, ds) -> bool:
        feature_type = str(ds.attrs.get("featureType", "")).strip().lower()
        return feature_type in PROFILE_FEATURE_TYPES and bool(quantity_variables(ds))

    def read_dataset(self, ds, path, *, options, leave_out_rejected, reading_part):
        found = quantity_variables(ds)
        if not found:
            raise InputFileError(path, "no profile variables: expected standard_name "
                                       + " or ".join(q.standard_name for q in PROFILE_QUANTITIES))
        quantity_of = {name: q for q, name in found}
        warnings, tables, all_decoded, used, failed = [], [], [], [], []
        offset = 0
        for layout in dsg.layouts(ds, [name for _, name in found]):
            chosen = {}
            for name in layout:
                q = quantity_of[name]
                if q in chosen:
                    warnings.append(f"variable '{name}' not read: '{chosen[q]}' on the same "
                                    f"dimensions already gives {q.name} (the first in the file "
                                    f"is read)")
                else:
                    chosen[q] = name
            try:
                table, decoded, names = self._read_layout(ds, path, options, chosen, offset)
                warnings += _unassessed_warnings(ds, path, options, decoded, table, offset)
            except InputFileError as exc:
                failed.append((layout, exc))
                continue
            finally:
                offset += int(ds[layout[0]].size)
            tables.append(table)
            all_decoded += decoded
            used += names
        if not tables:
            raise failed[0][1]
        for layout, exc in failed:  # a variable the others do not need: read the rest
            warnings.append(f"variable(s) {', '.join(layout)} not read: {exc.reason}")
        cf.require_values(path, all_decoded, reading_part=reading_part)
        for d in all_decoded:
            if d.quantity.name == POTENTIAL_TEMPERATURE:
                warnings.append(f"'{d.variable}' is potential temperature: read as the quantity "
                                f"{POTENTIAL_TEMPERATURE}, not converted to in-situ temperature")
        table = concat_tables(tables)
        for message in warnings:
            add_warning(table, message)
        table.attrs["variables"] = cf.variable_units(ds, list(dict.fromkeys(used)))
        return table

    def _read_layout(self, ds, path, opts, chosen: dict, offset: int):
        """The table of the data variables ``chosen`` ({quantity: name}, same dimensions)."""
        first = ds[next(iter(chosen.values()))]
        index = dsg.SampleIndex(ds, first.name, path)
        shape = first.shape

        def gathered(values, dims):
            return np.asarray(index.gather(values, dims)).reshape(shape)

        coordinates = {}
        for kind in ("latitude", "longitude", "time"):
            coordinates[kind] = _coordinate(ds, first.name, kind, index)
            if coordinates[kind] is None:
                raise InputFileError(path, f"no {kind} coordinate reaching the values of the "
                                           f"profiles (CF 9.5)", variable=first.name)
        lat_var, lon_var, time_var = (ds[coordinates[k]] for k in ("latitude", "longitude", "time"))
        lat = gathered(np.asarray(lat_var.values, dtype=np.float64), lat_var.dims)
        lon = cf.wrap_longitude(gathered(np.asarray(lon_var.values, dtype=np.float64),
                                         lon_var.dims))
        time = gathered(cf.decode_time_variable(time_var, path), time_var.dims)
        depth, vertical = self._depth(ds, first, index, lat, path)
        decoded = [cf.decode_data_variable(ds, n, q, path, opts.good_flag_meanings)
                   for q, n in chosen.items()]

        no_value = np.ones(shape, dtype=bool)
        for d in decoded:
            no_value &= ~np.isfinite(d.values)
        placed = np.isfinite(depth) & (np.isfinite(lat) | np.isfinite(lon))
        not_stored = index.unused.reshape(shape) | (no_value & ~placed)
        # a profile has one time and one position (CF table 9.1): their dimensions number it
        profile_dims = tuple(dict.fromkeys(time_var.dims + lat_var.dims + lon_var.dims))
        group = self._group(ds, index, profile_dims, shape)
        platform = self._platform(ds, opts, index, shape)
        row = offset + np.arange(first.size, dtype=np.int64).reshape(shape)
        table = concat_tables([
            cf.observation_table(path, opts, d, lon=lon, lat=lat, time=time, depth=depth,
                                 group=group, platform=platform, row=row, keep=~not_stored,
                                 missing=~np.isfinite(depth))
            for d in decoded])
        names = list(chosen.values()) + [vertical] + list(coordinates.values())
        for n in chosen.values():
            names += cf.ancillary_variable_names(ds, n)
        names += [str(n) for n, v in ds.variables.items()
                  if "sample_dimension" in v.attrs or "instance_dimension" in v.attrs]
        return table, decoded, names

    @staticmethod
    def _depth(ds, var, index, lat, path):
        """(depth in m positive down at each value, name of the vertical coordinate)."""
        depth_name = _coordinate(ds, var.name, "depth", index)
        if depth_name is not None:
            depth = cf.values_in_units(ds[depth_name], "m", path)
            if str(ds[depth_name].attrs.get("positive", "down")).strip().lower() == "up":
                depth = -depth
            values = index.gather(np.asarray(depth, dtype=np.float64), ds[depth_name].dims)
            return values.reshape(var.shape), depth_name
        pressure_name = _coordinate(ds, var.name, "sea_water_pressure", index)
        if pressure_name is None:
            raise InputFileError(path, "no vertical coordinate: expected a variable with "
                                       "standard_name 'depth' or 'sea_water_pressure'",
                                 variable=var.name)
        pressure = cf.values_in_units(ds[pressure_name], "dbar", path)
        values = index.gather(np.asarray(pressure, dtype=np.float64), ds[pressure_name].dims)
        return depth_from_pressure(values.reshape(var.shape), lat), pressure_name

    @staticmethod
    def _group(ds, index, profile_dims, shape):
        labels, has_profile_id = None, False
        for name in dsg.feature_label_variables(ds, index):
            part = index.gather(cf.labels_as_strings(ds[name].values), ds[name].dims)
            labels = part if labels is None else np.char.add(np.char.add(labels, "_"), part)
            has_profile_id |= ds[name].attrs.get("cf_role") == "profile_id"
        if not has_profile_id:
            number = index.flat_instance(profile_dims).astype(str)
            labels = number if labels is None else np.char.add(np.char.add(labels, "_"), number)
        return np.asarray(labels).reshape(shape)

    @staticmethod
    def _platform(ds, opts, index, shape):
        if opts.platform is not None or "platform" in ds.attrs:
            return cf.platform_attribute(ds, opts)

        def label_of(name):
            values = index.gather(cf.labels_as_strings(ds[name].values), ds[name].dims)
            return np.asarray(values).reshape(shape)

        reaching = [str(n) for n, v in ds.variables.items() if v.ndim <= 1 and index.reaches(v)]
        for name in reaching:
            if str(ds[name].attrs.get("standard_name", "")).strip() in PLATFORM_STANDARD_NAMES:
                return label_of(name)
        for name in reaching:
            if ds[name].attrs.get("cf_role") in ("trajectory_id", "timeseries_id"):
                return label_of(name)
        for name in reaching:
            if ("platform" in str(ds[name].attrs.get("long_name", "")).lower()
                    and ds[name].dtype.kind in "OSU"):
                return label_of(name)
        return ""
