"""Satellite SST in the GHRSST Data Specification 2.0 (GDS 2.0): L2P swaths and L3 grids.

Layout (GDS 2.0, from memory): a reference ``time`` (seconds since 1981-01-01 00:00:00) of
length 1; ``sea_surface_temperature`` (int16 kelvin, packed with scale_factor/add_offset) on
(time, nj, ni) with 2-D ``lat``/``lon`` for L2P, or on (time, lat, lon) with 1-D ``lat``/``lon``
for L3; per pixel on the same dimensions ``sst_dtime`` (s from the reference time),
``quality_level`` (0 no data, 1 bad data, 2 worst usable, 3 low, 4 acceptable, 5 best),
``sses_bias`` and ``sses_standard_deviation`` (kelvin) and ``l2p_flags`` (bit flags with
``flag_masks``/``flag_meanings``, e.g. microwave land ice lake river).  Global attribute
``gds_version_id = "2.0"``.

What the readers do with it:

- value = ``sea_surface_temperature`` - ``sses_bias`` (GDS 2.0: the bias is subtracted), in
  degC; option ``subtract_sses_bias = false`` keeps the uncorrected value;
- error = ``sses_standard_deviation`` (used by the error rule ``file``);
- time = reference time + ``sst_dtime``;
- rejections, first wins: ``missing_value`` (SST fill); ``l2p_flag_land``, ``l2p_flag_ice``,
  ``l2p_flag_lake``, ``l2p_flag_river``, ``l2p_flag_other`` for the bits named in option
  ``reject_l2p_flags`` (default land ice lake river), in that order; ``quality_level`` below
  option ``min_quality_level`` (default 4; a fill quality level counts as 0); ``missing_bias``
  (bias correction on and ``sses_bias`` fill).
"""

from __future__ import annotations

import os
from dataclasses import dataclass

import numpy as np

from obsprep.exceptions import InputFileError
from obsprep.model.quantities import get_quantity
from obsprep.model.reasons import register_reason
from obsprep.readers import cf
from obsprep.readers.products.sst_swath import sst_variable_with_latitude_ndim
from obsprep.readers.registry import Reader, register_reader

SST = get_quantity("sea_surface_temperature")

#: GDS 2.0 time reference, used when the time variable has no units
GDS2_TIME_UNITS = "seconds since 1981-01-01 00:00:00"
DEFAULT_MIN_QUALITY_LEVEL = 4
DEFAULT_REJECT_L2P_FLAGS = ("land", "ice", "lake", "river")
register_reason("quality_level", "GHRSST quality_level below the source's minimum "
                                 "(GDS 2.0: 0 no data .. 5 best)", stage="reader")
register_reason("missing_bias", "bias correction requested but the file's sses_bias is fill",
                stage="reader")
for _meaning in ("land", "ice", "lake", "river"):
    register_reason(f"l2p_flag_{_meaning}", f"GHRSST l2p_flags bit '{_meaning}' set", stage="reader")
register_reason("l2p_flag_other", "another GHRSST l2p_flags bit named in the source's reject "
                                  "list set", stage="reader")

#: l2p_flags meaning -> rejection reason; other meanings give ``l2p_flag_other``
L2P_FLAG_REASONS = {"land": "l2p_flag_land", "ice": "l2p_flag_ice", "lake": "l2p_flag_lake",
                    "river": "l2p_flag_river"}

def parse_quality_level(name, value) -> int:
    """A GDS 2.0 quality level, an integer 0-5."""
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or not 0 <= value <= 5:
        raise ValueError(f"option '{name}' must be an integer 0-5, got {value!r}")
    return int(value)


def parse_switch(name, value) -> bool:
    """A true/false option."""
    if not isinstance(value, bool):
        raise ValueError(f"option '{name}' must be true or false, got {value!r}")
    return value


@dataclass(frozen=True)
class GhrsstOptions(cf.SourceOptions):
    """Options of the GDS 2.0 readers (quality levels and l2p_flags instead of flag meanings)."""

    min_quality_level: int = cf.option(
        DEFAULT_MIN_QUALITY_LEVEL, "lowest quality_level kept, 0-5 (default 4: acceptable and "
                                   "best)", parse_quality_level)
    subtract_sses_bias: bool = cf.option(
        True, "subtract sses_bias from the SST (default true, as GDS 2.0 intends)", parse_switch)
    reject_l2p_flags: tuple = cf.option(
        DEFAULT_REJECT_L2P_FLAGS, "l2p_flags meanings whose rows are rejected (list or "
                                  "space-separated str; default: land ice lake river)",
        lambda name, value: tuple(n.lower() for n in cf.parse_names(name, value)))


def is_gds2(ds) -> bool:
    """True for a GDS 2.0 file: global ``gds_version_id`` starting with "2", or, without
    that attribute, per-pixel ``sst_dtime`` and ``quality_level`` variables."""
    version = str(ds.attrs.get("gds_version_id", "")).strip().lower().lstrip("v")
    if version:
        return version.startswith("2")
    return "sst_dtime" in ds.variables and "quality_level" in ds.variables


def reference_time(ds, name, path) -> np.ndarray:
    """UTC reference time of the granule broadcast to variable ``name`` (``time`` variable;
    units default to the GDS 2.0 "seconds since 1981-01-01 00:00:00")."""
    candidates = [v for v in ds.variables if v == "time" or
                  (ds[v].attrs.get("standard_name") == "time"
                   and " since " in str(ds[v].attrs.get("units", "")))]
    candidates = [v for v in candidates if set(ds[v].dims) <= set(ds[name].dims)]
    if not candidates:
        raise InputFileError(path, "no reference 'time' variable on the SST's dimensions "
                                   f"{ds[name].dims} (GDS 2.0)", variable=name)
    tvar = ds[candidates[0]]
    units = tvar.attrs.get("units") or GDS2_TIME_UNITS
    decoded = cf.decode_time(tvar.values, units, tvar.attrs.get("calendar"), path,
                             variable=tvar.name)
    return cf.broadcast_to_variable(decoded, tvar.dims, ds[name], path=path)


class _GhrsstReader(Reader):
    Options = GhrsstOptions
    latitude_ndim = 2
    priority = 10

    def guess_can_open(self, ds) -> bool:
        return is_gds2(ds) and sst_variable_with_latitude_ndim(ds, self.latitude_ndim) is not None

    def group(self, ds, path) -> str:
        return ""

    def slice_dimension(self, ds):
        """Rows of the swath (``nj``) or of the grid (``lat``)."""
        return cf.rows_dimension(ds, sst_variable_with_latitude_ndim(ds, self.latitude_ndim))

    def _pixel(self, ds, name, variable, path):
        """A per-pixel variable broadcast to the SST's shape, or None if absent."""
        if variable not in ds.variables:
            return None
        var = ds[variable]
        if not set(var.dims) <= set(ds[name].dims):
            raise InputFileError(path, f"dimensions {var.dims} are not among the SST's "
                                       f"{ds[name].dims}", variable=variable)
        return var

    def read_dataset(self, ds, path, *, options, leave_out_rejected, reading_part):
        opts = options
        min_level, subtract_bias, reject_flags = (opts.min_quality_level, opts.subtract_sses_bias,
                                                  opts.reject_l2p_flags)
        name = sst_variable_with_latitude_ndim(ds, self.latitude_ndim) or cf.require_variable(
            ds, path, SST.accepted_standard_names, "sea surface temperature")
        sst = ds[name]
        values = cf.values_in_units(sst, SST.units, path, quantity=SST)
        used = [name]

        def broadcast(var):
            return np.asarray(cf.broadcast_to_variable(var.values, var.dims, sst, path=path))

        def kelvin_difference(var):
            # GDS 2.0 SSES are kelvin differences; units default to the SST's
            converted = cf.values_in_units(var, SST.units, path, quantity=SST, difference=True,
                                           default_units=sst.attrs.get("units"))
            return np.asarray(cf.broadcast_to_variable(converted, var.dims, sst, path=path))

        bias_missing = None
        bias_var = self._pixel(ds, name, "sses_bias", path)
        if subtract_bias:
            if bias_var is None:
                raise InputFileError(path, "option subtract_sses_bias is on but the file has no "
                                           "sses_bias variable; set subtract_sses_bias = false "
                                           "to read the uncorrected SST", variable="sses_bias")
            bias = kelvin_difference(bias_var)
            bias_missing = np.isfinite(values) & ~np.isfinite(bias)
            values = np.where(bias_missing, values, values - bias)  # GDS 2.0: SST - sses_bias
            used.append("sses_bias")
        error = None
        sd_var = self._pixel(ds, name, "sses_standard_deviation", path)
        if sd_var is not None:
            error = kelvin_difference(sd_var)
            used.append("sses_standard_deviation")
        decoded = cf.DecodedVariable(SST, name, values, error)
        cf.require_values(path, [decoded], reading_part=reading_part)

        lon, lat = cf.horizontal_position(ds, name, path, reading_part=reading_part)
        time = reference_time(ds, name, path)
        dtime_var = self._pixel(ds, name, "sst_dtime", path)
        if dtime_var is not None:
            seconds = cf.values_in_units(dtime_var, "s", path, default_units="s")
            # NaN or out of range -> NaT -> bad_time later
            time = cf.add_seconds(time, cf.broadcast_to_variable(seconds, dtime_var.dims, sst, path=path))
            used.append("sst_dtime")
        # the reader's own rejections, in this order (a pixel counts under the first)
        rejections = []
        flags_var = self._pixel(ds, name, "l2p_flags", path)
        if flags_var is not None and reject_flags:
            masks = cf.flag_meaning_masks(flags_var, path, only=reject_flags)
            used.append("l2p_flags")
            chosen = set(masks)
            ordered = [m for m in L2P_FLAG_REASONS if m in chosen] + sorted(
                chosen - set(L2P_FLAG_REASONS))
            for meaning in ordered:
                mask = cf.broadcast_to_variable(masks[meaning], flags_var.dims, sst, path=path)
                rejections.append((mask, L2P_FLAG_REASONS.get(meaning, "l2p_flag_other")))
        level_var = self._pixel(ds, name, "quality_level", path)
        if level_var is not None:
            level = broadcast(level_var)
            # a fill level (NaN) counts as level 0, "no data"
            too_low = ~(level >= min_level) if min_level > 0 else level < min_level
            rejections.append((too_low, "quality_level"))
            used.append("quality_level")
        if bias_missing is not None:
            rejections.append((bias_missing, "missing_bias"))
        table = cf.observation_table(path, opts, decoded, lon=lon, lat=lat, time=time,
                                     group=self.group(ds, path),
                                     platform=cf.platform_attribute(ds, opts),
                                     rejections=rejections,
                                     leave_out_rejected=leave_out_rejected)
        lat_name = cf.find_coordinate(ds, name, "latitude")
        lon_name = cf.find_coordinate(ds, name, "longitude")
        table.attrs["variables"] = cf.variable_units(ds, used + [lat_name, lon_name, "time"])
        return table


@register_reader
class GhrsstL2pReader(_GhrsstReader):
    """GDS 2.0 L2P swath: 2-D lat/lon; ``group`` is the granule (global ``id``, else the file
    name)."""

    kind = "ghrsst_l2p"
    description = "GHRSST GDS 2.0 L2P SST swath (2-D lat/lon, sst_dtime, quality_level, SSES)"
    latitude_ndim = 2

    def group(self, ds, path) -> str:
        return str(ds.attrs.get("id", "")).strip() or os.path.basename(path)


@register_reader
class GhrsstL3Reader(_GhrsstReader):
    """GDS 2.0 L3 gridded/collated SST: 1-D lat/lon."""

    kind = "ghrsst_l3"
    description = "GHRSST GDS 2.0 L3 gridded SST (1-D lat/lon, sst_dtime, quality_level, SSES)"
    latitude_ndim = 1
