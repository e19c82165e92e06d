"""Satellite SST in the GHRSST Data Specification 2.0 (GDS 2.0): L2P swaths and L3 grids.

Layout [GDS2]: a reference ``time`` (seconds since 1981-01-01 00:00:00) of length 1;
``sea_surface_temperature`` (int16 kelvin, packed with scale_factor/add_offset) on
(time, nj, ni) with 2-D ``lat``/``lon`` for L2P, or on (time, lat, lon) with 1-D ``lat``/``lon``
for L3; per pixel on the same dimensions ``sst_dtime`` (s from the reference time),
``quality_level`` (0 no data, 1 bad data, 2 worst usable, 3 low, 4 acceptable, 5 best),
``sses_bias`` and ``sses_standard_deviation`` (kelvin), ``l2p_flags`` (bit flags with
``flag_masks``/``flag_meanings``, bits 0-4 microwave land ice lake river) and optionally
``wind_speed``.  Global attribute ``gds_version_id = "2.0"``.

The SST type.  GDS 2.0 names the variable ``sea_surface_temperature`` whatever the type and
states the type in its ``standard_name`` ("SST definitions", [GDS2]): SSTskin
``sea_surface_skin_temperature``, SSTsubskin ``sea_surface_subskin_temperature``, SSTfnd
``sea_surface_foundation_temperature``, SSTdepth ``sea_water_temperature`` with a depth.  Each
type is its own quantity (:data:`obsprep.model.quantities.SST_QUANTITY_NAMES`; SSTdepth and an
unstated type are ``sea_surface_temperature``), decided per file by :func:`gds2_sst_type`.

What the readers do with it:

- value = ``sea_surface_temperature`` - ``sses_bias`` (GDS 2.0: the bias is subtracted), in
  degC; option ``subtract_sses_bias = false`` keeps the uncorrected value;
- error = ``sses_standard_deviation`` (used by the error rule ``file``);
- time = reference time + ``sst_dtime``;
- rejections, first wins: ``missing_value`` (SST fill); ``l2p_flag_land``, ``l2p_flag_ice``,
  ``l2p_flag_lake``, ``l2p_flag_river``, ``l2p_flag_other`` for the bits named in option
  ``reject_l2p_flags`` (default land ice lake river), in that order; ``quality_level`` below
  option ``min_quality_level`` (default 4; a fill quality level counts as 0); ``missing_bias``
  (bias correction on and ``sses_bias`` fill); ``diurnal_warming`` (option ``diurnal_guard``,
  skin and subskin SST only, :mod:`obsprep.readers.products.sst_diurnal`).

An absent GDS 2.0 variable never refuses the file (a subset often keeps only the SST); the
reading goes on as :data:`ABSENT_VARIABLE_RULES` says, with a warning in the file's ledger entry.
"""

from __future__ import annotations

import os
import re
from dataclasses import dataclass

import numpy as np

from obsprep.exceptions import InputFileError
from obsprep.model.quantities import SST_STANDARD_NAMES, get_quantity
from obsprep.model.reasons import register_reason
from obsprep.model.table import add_warning
from obsprep.readers import cf
from obsprep.readers.products.sst_diurnal import (
    DiurnalGuardOptions,
    diurnal_warming_rejections,
    parse_choice,
)
from obsprep.readers.products.sst_swath import (
    has_latitude_ndim,
    sst_quantity,
    sst_variable_with_latitude_ndim,
)
from obsprep.readers.registry import Reader, register_reader

#: GDS 2.0 time reference, used when the time variable has no units
GDS2_TIME_UNITS = "seconds since 1981-01-01 00:00:00"
#: the GDS 2.0 name of the SST variable of L2P and L3 files
GDS2_SST_VARIABLE = "sea_surface_temperature"
#: the GDS 2.0 names of an L4 analysis: the field, its error and its surface mask
GDS2_L4_VARIABLE = "analysed_sst"
GDS2_L4_ERROR = "analysis_error"
GDS2_L4_MASK = "mask"
#: GDS 2.0 L4 mask meanings whose cells are kept (bits 1 water, 2 land, 4
#: optional_lake_surface, 8 sea_ice, 16 optional_river_surface, from memory): open water only
DEFAULT_L4_KEEP_MASK = ("water", "open_water")
DEFAULT_MIN_QUALITY_LEVEL = 4
DEFAULT_REJECT_L2P_FLAGS = ("land", "ice", "lake", "river")
#: GDS 2.0 l2p_flags bits 0-4 (the generic bits; higher bits are the provider's), used when the
#: variable lacks its flag attributes
GDS2_L2P_FLAG_BITS = {"microwave": 1, "land": 2, "ice": 4, "lake": 8, "river": 16}
#: option without_quality_level: what a file with no quality_level variable gets
WITHOUT_QUALITY_LEVEL = ("keep", "reject")

#: GDS 2.0 file names carry the SST type: <date>-<RDAC>-<level>_GHRSST-<SST type>-...
_FILE_NAME_TYPES = {"SSTskin": "sea_surface_skin_temperature",
                    "SSTsubskin": "sea_surface_subskin_temperature",
                    "SSTfnd": "sea_surface_foundation_temperature",
                    "SSTdepth": "sea_surface_temperature", "SSTblend": "sea_surface_temperature"}
_FILE_NAME_TYPE = re.compile(r"GHRSST-(SST(?:skin|subskin|fnd|depth|blend))\b")

#: what each absent GDS 2.0 variable means for the reading (documented in
#: docs/file-conventions.md; every one also gives a warning)
ABSENT_VARIABLE_RULES = {
    "sses_bias": "the SST is read without the bias correction",
    "sses_standard_deviation": "no per-pixel error (error rule 'file' finds none: "
                               "missing_error)",
    "sst_dtime": "every pixel gets the reference time",
    "quality_level": "values are kept unscreened by quality (option without_quality_level "
                     "= \"reject\" rejects them as quality_level)",
    "l2p_flags": "no provider screening of land, ice, lake and river (the model grid's "
                 "land mask still applies)",
}

register_reason("quality_level", "GHRSST quality_level below the source's minimum "
                                 "(GDS 2.0: 0 no data .. 5 best)", stage="reader")
register_reason("missing_bias", "bias correction requested but the file's sses_bias is fill",
                stage="reader")
for _meaning in ("land", "ice", "lake", "river"):
    register_reason(f"l2p_flag_{_meaning}", f"GHRSST l2p_flags bit '{_meaning}' set", stage="reader")
register_reason("l2p_flag_other", "another GHRSST l2p_flags bit named in the source's reject "
                                  "list set", stage="reader")
register_reason("l4_mask", "GHRSST L4 mask sets a meaning other than the source's kept ones "
                           "(default water: land, lake, river and sea-ice cells are analysis "
                           "fill, not observations)", stage="reader")

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
class GhrsstOptions(DiurnalGuardOptions):
    """Options of the GDS 2.0 readers (quality levels and l2p_flags instead of flag meanings)."""

    min_quality_level: int = cf.option(
        DEFAULT_MIN_QUALITY_LEVEL, "lowest quality_level kept, 0-5 (default 4: acceptable and "
                                   "best)", parse_quality_level)
    subtract_sses_bias: bool = cf.option(
        True, "subtract sses_bias from the SST (default true, as GDS 2.0 intends; a file "
              "without sses_bias is read uncorrected, with a warning)", parse_switch)
    reject_l2p_flags: tuple = cf.option(
        DEFAULT_REJECT_L2P_FLAGS, "l2p_flags meanings whose rows are rejected (list or "
                                  "space-separated str; default: land ice lake river)",
        lambda name, value: tuple(n.lower() for n in cf.parse_names(name, value)))
    without_quality_level: str = cf.option(
        "keep", "a file with no quality_level variable: keep its values unscreened (default, "
                "with a warning) or reject them all as quality_level", parse_choice(
                    WITHOUT_QUALITY_LEVEL))


def is_gds2(ds) -> bool:
    """True for a GDS 2.0 file: global ``gds_version_id`` whose number starts with 2 ("2.0",
    "02.0", "v2.0"), or, without that attribute, per-pixel ``sst_dtime`` and
    ``quality_level`` variables."""
    version = str(ds.attrs.get("gds_version_id", "")).strip().lower().lstrip("v")
    if version:
        try:
            return int(float(version.split()[0])) == 2
        except ValueError:
            return version.startswith("2")
    return "sst_dtime" in ds.variables and "quality_level" in ds.variables


def is_gds2_l4(ds) -> bool:
    """True for a GDS 2.0 L4 analysis: its field is the GDS 2.0 variable ``analysed_sst``."""
    return GDS2_L4_VARIABLE in ds.variables


def gds2_sst_variable(ds, latitude_ndim: int) -> str | None:
    """The SST variable of a GDS 2.0 file: one with an SST standard name, else the GDS 2.0
    variable ``sea_surface_temperature`` whatever its standard_name; None when neither has a
    latitude coordinate of ``latitude_ndim`` dimensions."""
    name = sst_variable_with_latitude_ndim(ds, latitude_ndim)
    if name is None and GDS2_SST_VARIABLE in ds.variables \
            and has_latitude_ndim(ds, GDS2_SST_VARIABLE, latitude_ndim):
        name = GDS2_SST_VARIABLE
    return name


def gds2_sst_type(ds, name: str, path) -> tuple:
    """The SST type of the GDS 2.0 SST variable ``name``: ``(quantity, warning)``, warning None
    when the standard_name states the type.

    Rule, first that applies: an SST standard name gives its type; ``sea_water_temperature``
    is GDS 2.0 SSTdepth (``sea_surface_temperature``); else the SST type of the GDS 2.0 file
    name (``...-L2P_GHRSST-SSTsubskin-...``); else the words subskin, skin or foundation in the
    ``long_name``; else an unstated type (``sea_surface_temperature``)."""
    quantity = sst_quantity(ds, name)
    if quantity is not None:
        return quantity, None
    attrs = ds[name].attrs
    found = attrs.get("standard_name")
    found_text = f"standard_name '{found}'" if found is not None else "no standard_name"
    long_name = str(attrs.get("long_name", "")).lower()
    by_name = _FILE_NAME_TYPE.search(os.path.basename(str(path)))
    if found == "sea_water_temperature":
        depth = attrs.get("depth")
        basis = "GDS 2.0 SSTdepth" + (f", depth '{depth}'" if depth is not None else "")
        quantity = get_quantity("sea_surface_temperature")
    elif by_name:
        basis = f"the GDS 2.0 file name's SST type {by_name.group(1)}"
        quantity = get_quantity(_FILE_NAME_TYPES[by_name.group(1)])
    else:
        word = next((w for w in ("subskin", "skin", "foundation") if w in long_name.split()), None)
        if word is not None:
            basis = f"long_name '{attrs.get('long_name')}'"
            quantity = get_quantity(f"sea_surface_{word}_temperature")
        else:
            basis = "the type is not stated"
            quantity = get_quantity("sea_surface_temperature")
    return quantity, (f"variable '{name}' has {found_text}, not an SST standard name; read as "
                      f"GDS 2.0 SST of type {quantity.name} ({basis})")


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


def l2p_flags_with_meanings(flags_var):
    """``l2p_flags`` as CF flags: the variable itself when it has ``flag_masks`` and
    ``flag_meanings``, else a copy given the GDS 2.0 bits 0-4 (:data:`GDS2_L2P_FLAG_BITS`),
    and a warning (None when none is needed)."""
    if flags_var.attrs.get("flag_meanings") and flags_var.attrs.get("flag_masks") is not None:
        return flags_var, None
    copy = flags_var.copy()
    copy.attrs["flag_meanings"] = " ".join(GDS2_L2P_FLAG_BITS)
    copy.attrs["flag_masks"] = np.array(list(GDS2_L2P_FLAG_BITS.values()))
    return copy, (f"variable '{flags_var.name}' has no flag_masks/flag_meanings; the GDS 2.0 "
                  f"bits 0-4 ({', '.join(GDS2_L2P_FLAG_BITS)}) assumed")


def _absent(table_warnings: list, variable: str) -> None:
    table_warnings.append(f"no {variable} variable: {ABSENT_VARIABLE_RULES[variable]}")


class _GhrsstReader(Reader):
    Options = GhrsstOptions
    latitude_ndim = 2
    priority = 10

    def guess_can_open(self, ds) -> bool:
        return is_gds2(ds) and not is_gds2_l4(ds) \
            and gds2_sst_variable(ds, self.latitude_ndim) is not None

    def group(self, ds, path) -> str:
        return ""

    def slice_dimension(self, ds):
        """Rows of the swath (``nj``) or of the grid (``lat``)."""
        return cf.rows_dimension(ds, gds2_sst_variable(ds, self.latitude_ndim))

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
        warnings: list = []
        name = gds2_sst_variable(ds, self.latitude_ndim) or cf.require_variable(
            ds, path, SST_STANDARD_NAMES, "sea surface temperature")
        sst = ds[name]
        quantity, type_warning = gds2_sst_type(ds, name, path)
        if type_warning:
            warnings.append(type_warning)
        values = cf.values_in_units(sst, quantity.units, path, quantity=quantity)
        outside = cf.outside_valid_range(sst)
        if outside is not None and outside.any():
            values = np.where(outside, np.nan, values)  # CF 2.5.1: outside the valid range is missing
        used = [name]

        def broadcast(var):
            return np.asarray(cf.broadcast_to_variable(var.values, var.dims, sst, path=path))

        def kelvin_difference(var):
            # GDS 2.0 SSES are kelvin differences; units default to the SST's
            converted = cf.values_in_units(var, quantity.units, path, quantity=quantity,
                                           difference=True, default_units=sst.attrs.get("units"))
            return np.asarray(cf.broadcast_to_variable(converted, var.dims, sst, path=path))

        bias_missing = None
        bias_var = self._pixel(ds, name, "sses_bias", path)
        if subtract_bias and bias_var is None:
            _absent(warnings, "sses_bias")
        elif subtract_bias:
            bias = kelvin_difference(bias_var)
            bias_missing = np.isfinite(values) & ~np.isfinite(bias)
            values = np.where(bias_missing, values, values - bias)  # GDS 2.0: SST - sses_bias
            used.append("sses_bias")
        error = None
        sd_var = self._pixel(ds, name, "sses_standard_deviation", path)
        if sd_var is not None:
            error = kelvin_difference(sd_var)
            used.append("sses_standard_deviation")
        else:
            _absent(warnings, "sses_standard_deviation")
        decoded = cf.DecodedVariable(quantity, name, values, error)
        cf.require_values(path, [decoded], reading_part=reading_part)

        lon, lat = cf.horizontal_position(ds, name, path, reading_part=reading_part)
        time = reference_time(ds, name, path)
        dtime_var = self._pixel(ds, name, "sst_dtime", path)
        if dtime_var is not None:
            seconds = cf.values_in_units(dtime_var, "s", path, default_units="s")
            # NaN or out of range -> NaT -> bad_time later
            time = cf.add_seconds(time, cf.broadcast_to_variable(seconds, dtime_var.dims, sst, path=path))
            used.append("sst_dtime")
        else:
            _absent(warnings, "sst_dtime")
        # the reader's own rejections, in this order (a pixel counts under the first)
        rejections = []
        flags_var = self._pixel(ds, name, "l2p_flags", path)
        if flags_var is None and reject_flags:
            _absent(warnings, "l2p_flags")
        elif flags_var is not None and reject_flags:
            flags_var, flags_warning = l2p_flags_with_meanings(flags_var)
            if flags_warning:
                warnings.append(flags_warning)
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
        elif min_level > 0:
            _absent(warnings, "quality_level")
            if opts.without_quality_level == "reject":
                rejections.append((np.ones(values.shape, dtype=bool), "quality_level"))
        if bias_missing is not None:
            rejections.append((bias_missing, "missing_bias"))
        rejections += diurnal_warming_rejections(ds, name, path, opts, quantity, time, lon, lat,
                                                 warnings, used)
        table = cf.observation_table(path, opts, decoded, lon=lon, lat=lat, time=time,
                                     group=self.group(ds, path),
                                     platform=cf.platform_attribute(ds, opts),
                                     rejections=rejections,
                                     leave_out_rejected=leave_out_rejected)
        for line in warnings:
            add_warning(table, line)
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


@dataclass(frozen=True)
class GhrsstL4Options(cf.SourceOptions):
    """Options of the GDS 2.0 L4 reader."""

    keep_mask_meanings: tuple = cf.option(
        DEFAULT_L4_KEEP_MASK, "mask meanings of the cells kept: a cell with any other bit set "
                              "is rejected as l4_mask (list or space-separated str; default "
                              "water open_water)",
        lambda name, value: tuple(n.lower() for n in cf.parse_names(name, value)))


@register_reader
class GhrsstL4Reader(Reader):
    """GDS 2.0 L4 analysis: ``analysed_sst`` on (time, lat, lon) with 1-D lat/lon, error
    ``analysis_error``, cells kept where the ``mask`` sets only a meaning of option
    ``keep_mask_meanings``; time the reference (nominal) time.  The SST type is that of
    :func:`gds2_sst_type` (GDS 2.0 L4: usually foundation)."""

    kind = "ghrsst_l4"
    description = "GHRSST GDS 2.0 L4 SST analysis (analysed_sst, analysis_error, mask)"
    Options = GhrsstL4Options
    priority = 10

    def guess_can_open(self, ds) -> bool:
        return is_gds2(ds) and is_gds2_l4(ds) and has_latitude_ndim(ds, GDS2_L4_VARIABLE, 1)

    def slice_dimension(self, ds):
        """Rows of the grid (``lat``)."""
        return cf.rows_dimension(ds, GDS2_L4_VARIABLE)

    def read_dataset(self, ds, path, *, options, leave_out_rejected, reading_part):
        name = GDS2_L4_VARIABLE
        sst = ds[name]
        quantity, type_warning = gds2_sst_type(ds, name, path)
        warnings = [type_warning] if type_warning else []
        values = cf.values_in_units(sst, quantity.units, path, quantity=quantity)
        used = [name]
        error = None
        if GDS2_L4_ERROR in ds.variables and set(ds[GDS2_L4_ERROR].dims) <= set(sst.dims):
            sigma = cf.values_in_units(ds[GDS2_L4_ERROR], quantity.units, path, quantity=quantity,
                                       difference=True, default_units=sst.attrs.get("units"))
            error = np.asarray(cf.broadcast_to_variable(sigma, ds[GDS2_L4_ERROR].dims, sst, path=path))
            used.append(GDS2_L4_ERROR)
        else:
            warnings.append(f"no {GDS2_L4_ERROR} variable: no per-cell error (error rule "
                            "'file' finds none: missing_error)")
        decoded = cf.DecodedVariable(quantity, name, values, error)
        cf.require_values(path, [decoded], reading_part=reading_part)
        lon, lat = cf.horizontal_position(ds, name, path, reading_part=reading_part)
        time = reference_time(ds, name, path)
        rejections = []
        if GDS2_L4_MASK in ds.variables and set(ds[GDS2_L4_MASK].dims) <= set(sst.dims):
            mask_var = ds[GDS2_L4_MASK]
            other = np.zeros(mask_var.shape, dtype=bool)
            for meaning, is_set in cf.flag_meaning_masks(mask_var, path).items():
                if meaning not in options.keep_mask_meanings:
                    other |= is_set
            rejections.append((cf.broadcast_to_variable(other, mask_var.dims, sst, path=path),
                               "l4_mask"))
            used.append(GDS2_L4_MASK)
        else:
            warnings.append(f"no {GDS2_L4_MASK} variable: cells not screened for land, lake, "
                            "river and sea ice (the model grid's land mask still applies)")
        table = cf.observation_table(path, options, decoded, lon=lon, lat=lat, time=time,
                                     platform=cf.platform_attribute(ds, options),
                                     rejections=rejections, leave_out_rejected=leave_out_rejected)
        for line in warnings:
            add_warning(table, line)
        table.attrs["variables"] = cf.variable_units(
            ds, used + [cf.find_coordinate(ds, name, "latitude"),
                        cf.find_coordinate(ds, name, "longitude"), "time"])
        return table
