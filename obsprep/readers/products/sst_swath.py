"""Satellite SST swath (L2): SST on two spatial dimensions with 2-D latitude/longitude.

The SST type (skin, subskin, foundation, at a depth) is the quantity of the variable's CF
standard_name (:data:`obsprep.model.quantities.SST_QUANTITY_NAMES`)."""

from __future__ import annotations

import os
from dataclasses import dataclass

from obsprep.model.quantities import SST_QUANTITY_NAMES, SST_STANDARD_NAMES, quantity_for_standard_name
from obsprep.model.table import add_warning
from obsprep.readers import cf
from obsprep.readers.products.sst_diurnal import DiurnalGuardOptions, diurnal_warming_rejections
from obsprep.readers.registry import Reader, register_reader


@dataclass(frozen=True)
class SstOptions(cf.CfOptions, DiurnalGuardOptions):
    """Options of the CF-generic SST readers: flag meanings and the diurnal-warming guard."""


def has_latitude_ndim(ds, name: str, latitude_ndim: int) -> bool:
    """True when variable ``name`` has a latitude coordinate of ``latitude_ndim`` dimensions
    and a longitude coordinate."""
    lat = cf.find_coordinate(ds, name, "latitude")
    return lat is not None and ds[lat].ndim == latitude_ndim \
        and cf.find_coordinate(ds, name, "longitude") is not None


def sst_variable_with_latitude_ndim(ds, latitude_ndim: int) -> str | None:
    """The variable with an SST standard name (any type: skin, subskin, foundation, at a
    depth) whose latitude coordinate has ``latitude_ndim`` dimensions, or None."""
    for standard_name in SST_STANDARD_NAMES:
        name = cf.find_variable(ds, [standard_name])
        if name is not None and has_latitude_ndim(ds, name, latitude_ndim):
            return name
    return None


def sst_quantity(ds, name: str):
    """The SST type of variable ``name`` (a :class:`~obsprep.model.quantities.Quantity`) from
    its standard_name, or None when that is not an SST standard name."""
    quantity = quantity_for_standard_name(str(ds[name].attrs.get("standard_name", "")).strip())
    return quantity if quantity is not None and quantity.name in SST_QUANTITY_NAMES else None


@register_reader
class SstSwathReader(Reader):
    """SST granule: pixel time from a 2-D ``standard_name = "time"`` variable when present
    (absolute, or an offset in seconds from the reference time), else the scalar/length-1
    time; ``group`` is the global ``id`` attribute, else the file name."""

    kind = "sst_swath"
    description = "satellite SST swath (2-D latitude/longitude, per-pixel time)"
    Options = SstOptions
    #: dimensions of the latitude coordinate that tell this layout from the others
    latitude_ndim = 2

    def guess_can_open(self, ds) -> bool:
        return sst_variable_with_latitude_ndim(ds, self.latitude_ndim) is not None

    def group(self, ds, path) -> str:
        """The granule identifier: global ``id`` attribute, else the file name."""
        return str(ds.attrs.get("id", "")).strip() or os.path.basename(path)

    def slice_dimension(self, ds):
        """Rows of the swath or grid (pixels are independent observations)."""
        return cf.rows_dimension(ds, sst_variable_with_latitude_ndim(ds, self.latitude_ndim))

    def read_dataset(self, ds, path, *, options, leave_out_rejected, reading_part):
        opts = options
        name = sst_variable_with_latitude_ndim(ds, self.latitude_ndim) or cf.require_variable(
            ds, path, SST_STANDARD_NAMES, "sea surface temperature")
        decoded = cf.decode_data_variable(ds, name, sst_quantity(ds, name), path,
                                          opts.good_flag_meanings)
        cf.require_values(path, [decoded], reading_part=reading_part)
        lon, lat = cf.horizontal_position(ds, name, path, reading_part=reading_part)
        time = cf.observation_time(ds, name, path)
        warnings, used = [], _used_variables(ds, name)
        rejections = diurnal_warming_rejections(ds, name, path, opts, decoded.quantity, time,
                                                lon, lat, warnings, used)
        table = cf.observation_table(path, opts, decoded, lon=lon, lat=lat, time=time,
                                     group=self.group(ds, path),
                                     platform=cf.platform_attribute(ds, opts),
                                     rejections=rejections,
                                     leave_out_rejected=leave_out_rejected)
        for line in warnings:
            add_warning(table, line)
        table.attrs["variables"] = cf.variable_units(ds, used)
        return table


def _used_variables(ds, name) -> list:
    """The data variable, its ancillary variables and its coordinates (for reporting)."""
    used = [name] + cf.ancillary_variable_names(ds, name)
    for kind in ("latitude", "longitude", "time", "projection_x_coordinate",
                 "projection_y_coordinate", "depth", "sea_water_pressure"):
        used += cf.find_coordinates(ds, name, kind, anywhere=kind in ("depth",
                                                                        "sea_water_pressure"))
    return list(dict.fromkeys(used))
