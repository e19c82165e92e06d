"""Sea-ice concentration on a grid; positions from 2-D latitude/longitude or the CF
grid_mapping.  One row per cell and time, fill cells included as ``missing_value``."""

from __future__ import annotations

from obsprep.model.quantities import get_quantity
from obsprep.readers import cf
from obsprep.readers.products.sst_swath import _used_variables
from obsprep.readers.registry import Reader, register_reader

SEA_ICE_CONCENTRATION = get_quantity("sea_ice_concentration")


@register_reader
class IceConcentrationReader(Reader):
    """``sea_ice_area_fraction`` in "%" or "1", converted to a fraction."""

    kind = "ice_concentration"
    description = "gridded sea-ice concentration (lat/lon or projected grid)"
    Options = cf.CfOptions

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
                                          opts.good_flag_meanings)
        cf.require_values(path, [decoded], reading_part=reading_part)
        lon, lat = cf.horizontal_position(ds, name, path, reading_part=reading_part)
        time = cf.observation_time(ds, name, path)
        table = cf.observation_table(path, opts, decoded, lon=lon, lat=lat, time=time,
                                     platform=cf.platform_attribute(ds, opts),
                                     leave_out_rejected=leave_out_rejected)
        table.attrs["variables"] = cf.variable_units(ds, _used_variables(ds, name))
        return table
