"""Gridded SST (L3/L4): SST on (time, lat, lon) with 1-D latitude/longitude; one row per cell
and time, fill cells included as ``missing_value``."""

from __future__ import annotations

from . import cf
from .base import Reader, register_reader
from .sst_swath import SST, sst_variable_with_latitude_ndim


@register_reader
class SstGridReader(Reader):
    """Regular latitude/longitude SST grid."""

    kind = "sst_grid"
    description = "gridded SST (1-D latitude/longitude)"
    options = dict(cf.COMMON_OPTIONS)

    def guess_can_open(self, ds) -> bool:
        return sst_variable_with_latitude_ndim(ds, 1) is not None

    def read_dataset(self, ds, path, **options):
        opts = cf.reader_options(self, options)
        name = sst_variable_with_latitude_ndim(ds, 1) or cf.require_variable(
            ds, path, SST.accepted_standard_names, "sea surface temperature")
        decoded = cf.decode_data_variable(ds, name, SST, path, opts.good_flag_meanings)
        cf.require_values(path, [decoded])
        lon, lat = cf.horizontal_position(ds, name, path)
        time = cf.observation_time(ds, name, path)
        return cf.observation_table(path, opts, decoded, lon=lon, lat=lat, time=time,
                                    platform=cf.platform_attribute(ds, opts))
