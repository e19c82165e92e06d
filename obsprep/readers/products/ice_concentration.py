"""Sea-ice concentration on a grid; positions from 2-D latitude/longitude or the CF
grid_mapping.  One row per cell and time, fill cells included as ``missing_value``.

Flags, in order:

- values outside the variable's valid range are missing (CF 2.5.1); flag values carried in
  the data variable itself beyond its valid range (land, coast, lake, pole hole, ...) are the
  provider's flags: ``provider_flag``;
- the flag ancillary variables (``status_flag``/``quality_flag``) reject a cell when a set
  state or bit has a meaning in option ``reject_flag_meanings``
  (:data:`DEFAULT_REJECT_ICE_FLAG_MEANINGS`; compared without case or separators, each word a
  prefix: ``lake`` matches ``lakes``, ``coast`` ``coastal``).  A meaning naming a filter
  (``open_water_filtered``, ``land_spill_over_filtered``, ``weather_filter_applied``) is never
  rejected: the provider's filter set a valid value (zero at the ice edge), and the open-water
  side of the edge is where concentration observations matter most.  Other meanings
  (``nominal``, interpolation notes) keep the cell.
- percent or fraction: converted from the variable's ``units`` ("%" or "1") to a fraction.
  Dimensionless units on percent numbers are read as percent, with a per-file warning: when
  the valid range (unpacked) ends between 1.5 and 100.5, or, without a valid range, when the
  finite values reach above 1.5 and none exceeds 100.5 (:func:`percent_in_dimensionless_units`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from obsprep.model.quantities import get_quantity
from obsprep.readers import cf
from obsprep.readers.products.sst_swath import _used_variables
from obsprep.readers.registry import Reader, register_reader

SEA_ICE_CONCENTRATION = get_quantity("sea_ice_concentration")

#: flag meanings (terms) that reject a cell by default: a surface other than sea, or no data
DEFAULT_REJECT_ICE_FLAG_MEANINGS = frozenset((
    "land", "lake", "coast", "missing", "invalid", "no_data", "nodata", "fill", "pole_hole",
    "unused"))


#: the largest fraction a concentration retrieval delivers unclipped (the quantity's range ends
#: at 1.25); numbers beyond it in dimensionless units are percent
_LARGEST_FRACTION = 1.5


def percent_in_dimensionless_units(var, values) -> bool:
    """True when variable ``var`` says its concentration is a fraction (units "1" or none) but
    holds percent: its valid range (unpacked) ends in (1.5, 100.5], or, without a valid range,
    the finite ``values`` (as decoded, fraction units) exceed 1.5 and none exceeds 100.5."""
    units = str(var.attrs.get("units", "1")).strip().lower()
    if units not in ("1", "", "fraction", "none"):
        return False
    bounds = cf.unpacked_valid_bounds(var)
    if bounds is not None:
        return _LARGEST_FRACTION < bounds[1] <= 100.5
    finite = values[np.isfinite(values)]
    return bool(finite.size) and _LARGEST_FRACTION < finite.max() <= 100.5


@dataclass(frozen=True)
class IceConcentrationOptions(cf.CfOptions):
    """Options of the ice-concentration reader (``good_flag_meanings`` is not used: cells are
    rejected by meaning, kept otherwise)."""

    reject_flag_meanings: frozenset = cf.option(
        DEFAULT_REJECT_ICE_FLAG_MEANINGS,
        "flag meanings that reject a cell, matched without case or separators, each word a "
        "prefix (list of str, or one space-separated str; default: "
        + " ".join(sorted(DEFAULT_REJECT_ICE_FLAG_MEANINGS))
        + "); meanings naming a filter are never rejected", cf.parse_lowercase_set)


@register_reader
class IceConcentrationReader(Reader):
    """``sea_ice_area_fraction`` in "%" or "1", converted to a fraction."""

    kind = "ice_concentration"
    description = "gridded sea-ice concentration (lat/lon or projected grid)"
    Options = IceConcentrationOptions

    def guess_can_open(self, ds) -> bool:
        return cf.find_variable(ds, SEA_ICE_CONCENTRATION.accepted_standard_names) is not None

    def slice_dimension(self, ds):
        """Rows of the grid (cells are independent observations)."""
        return cf.rows_dimension(ds, cf.find_variable(ds, SEA_ICE_CONCENTRATION.accepted_standard_names))

    def read_dataset(self, ds, path, *, options, leave_out_rejected, reading_part):
        opts = options
        name = cf.require_variable(ds, path, SEA_ICE_CONCENTRATION.accepted_standard_names,
                                   "sea-ice concentration")
        decoded = cf.decode_data_variable(ds, name, SEA_ICE_CONCENTRATION, path,
                                          reject_flag_meanings=opts.reject_flag_meanings)
        cf.require_values(path, [decoded], reading_part=reading_part)
        judged = decoded.values if decoded.good is None else \
            np.where(decoded.good, decoded.values, np.nan)  # the provider's flags are no data
        if percent_in_dimensionless_units(ds[name], judged):
            cf.file_warning(f"units '{ds[name].attrs.get('units', '')}' (a fraction) on values "
                            f"in percent (valid range or values up to 100); read as percent",
                            variable=name)
            decoded = decoded.replace(
                values=decoded.values / 100.0,
                error=None if decoded.error is None else decoded.error / 100.0)
        lon, lat = cf.horizontal_position(ds, name, path, reading_part=reading_part)
        time = cf.observation_time(ds, name, path)
        table = cf.observation_table(path, opts, decoded, lon=lon, lat=lat, time=time,
                                     platform=cf.platform_attribute(ds, opts),
                                     leave_out_rejected=leave_out_rejected)
        table.attrs["variables"] = cf.variable_units(ds, _used_variables(ds, name))
        return table
