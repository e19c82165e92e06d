"""Gridded SST (L3/L4): SST on (time, lat, lon) with 1-D latitude/longitude; one row per cell
and time, fill cells included as ``missing_value``.  Same decoding as the swath reader."""

from __future__ import annotations

from obsprep.readers.products.sst_swath import SstSwathReader
from obsprep.readers.registry import register_reader


@register_reader
class SstGridReader(SstSwathReader):
    """Regular latitude/longitude SST grid."""

    kind = "sst_grid"
    description = "gridded SST (1-D latitude/longitude)"
    latitude_ndim = 1

    def group(self, ds, path) -> str:
        return ""
