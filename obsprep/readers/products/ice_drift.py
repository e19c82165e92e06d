"""Sea-ice drift: displacement vectors over an interval, east/north or along projection axes.

The table holds two rows per vector, ``sea_ice_drift_east`` and ``sea_ice_drift_north``, with
the same ``row`` (the vector's flat index), ``time`` and ``time_end`` and the start position.
The interval is per vector where the file stores a start and an end time for each vector, with
their own units and epochs (:func:`obsprep.readers.cf.per_vector_interval`), else the nominal
one from the time ``bounds``.  The uncertainty is the ``standard_error`` ancillary variable, else
an unnamed ancillary variable in the data's units without flag attributes
(:func:`obsprep.readers.cf.find_uncertainty_variable`).  Components along a grid_mapping's x/y axes are rotated to east/north
with the CRS (:func:`obsprep.geo.rotation.projection_to_east_north`); after rotation
each output component depends on both inputs, so it is missing when either is missing and
flagged when either is flagged.

Map or ground metres: the CF standard names ``sea_ice_x/y_displacement`` say along which axis
a component lies, not whether it is a difference of projected coordinates (map metres, the
usual way a product on its own grid gives it) or a ground distance along the axis' local
direction.  The option ``axis_displacements`` says which: ``"map"`` (the default) applies the
map scale factor through the end position on the ellipsoid
(:func:`obsprep.geo.rotation.map_displacement_to_east_north`) and divides the errors by the
point scale factor (:func:`obsprep.geo.rotation.projection_scale_factor`); ``"ground"``
rotates the components as they are.  East/north components are always ground metres.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from obsprep.exceptions import InputFileError
from obsprep.geo.rotation import (
    map_displacement_to_east_north,
    projection_axis_angles,
    projection_scale_factor,
    projection_to_east_north,
)
from obsprep.model.quantities import get_quantity
from obsprep.model.table import concat_tables
from obsprep.readers import cf
from obsprep.readers.products.sst_swath import _used_variables
from obsprep.readers.registry import Reader, register_reader

EAST, NORTH = get_quantity("sea_ice_drift_east"), get_quantity("sea_ice_drift_north")
GRID_X, GRID_Y = get_quantity("sea_ice_drift_x"), get_quantity("sea_ice_drift_y")


def _component_variables(ds):
    """((east, north) quantities, variable names, along projection axes?) or None."""
    for pair, projected in (((EAST, NORTH), False), ((GRID_X, GRID_Y), True)):
        names = [cf.find_variable(ds, q.accepted_standard_names) for q in pair]
        if any(names):
            return pair, names, projected
    return None


#: what the x/y components along a projection's axes measure (option ``axis_displacements``)
AXIS_DISPLACEMENT_MEASURES = {
    "map": "differences of projected coordinates (map metres; the scale factor is applied)",
    "ground": "ground distances along the local direction of each axis",
}


def _parse_axis_displacements(name, value) -> str:
    if value not in AXIS_DISPLACEMENT_MEASURES:
        raise ValueError(f"option '{name}' must be one of {sorted(AXIS_DISPLACEMENT_MEASURES)}, "
                         f"got {value!r}")
    return value


@dataclass(frozen=True)
class IceDriftOptions(cf.CfOptions):
    """Options of the sea-ice drift reader."""

    axis_displacements: str = cf.option(
        "map", "what sea_ice_x/y_displacement components measure: 'map' (default), differences "
               "of projected coordinates, divided by the map scale factor to ground metres; "
               "'ground', ground distances along each axis", _parse_axis_displacements)


@register_reader
class IceDriftReader(Reader):
    """Vectors as a 1-D list or a 2-D grid (flattened), with an interval from time bounds."""

    kind = "ice_drift"
    description = "sea-ice drift vectors (east/north or projection x/y displacements)"
    Options = IceDriftOptions

    def guess_can_open(self, ds) -> bool:
        return _component_variables(ds) is not None

    def read_dataset(self, ds, path, *, options, leave_out_rejected, reading_part):
        opts = options
        found = _component_variables(ds)
        if found is None:
            raise InputFileError(path, "no sea-ice drift variables: expected standard_name "
                                       "eastward/northward_sea_ice_displacement or "
                                       "sea_ice_x/y_displacement")
        quantities, names, projected = found
        for q, n in zip(quantities, names):
            if n is None:
                raise InputFileError(path, f"one drift component found ({[x for x in names if x]}) "
                                           f"but no variable with standard_name "
                                           f"'{q.accepted_standard_names[0]}'")
        if ds[names[0]].dims != ds[names[1]].dims:
            raise InputFileError(path, f"drift components have different dimensions "
                                       f"{ds[names[0]].dims} and {ds[names[1]].dims}",
                                 variable=names[1])
        u, v = (cf.decode_data_variable(ds, n, q, path, opts.good_flag_meanings)
                for n, q in zip(names, quantities))
        cf.require_values(path, [u, v], reading_part=reading_part)
        lon, lat = cf.horizontal_position(ds, names[0], path, reading_part=reading_part)
        start, end = cf.observation_interval(ds, names[0], path)
        if projected:
            crs = cf.crs_for_variable(ds, names[0], path)
            angle_x, angle_y = projection_axis_angles(crs, lon, lat)
            errors = (u.error, v.error) if u.error is not None or v.error is not None else ()
            if opts.axis_displacements == "map" and errors:
                # an error in map metres is the ground error times k (a conformal map)
                scale = projection_scale_factor(crs, lon, lat)
                errors = tuple(None if e is None else e / scale for e in errors)
            east, north, *sigma = projection_to_east_north(
                u.values, v.values, angle_x, angle_y, *errors)
            if opts.axis_displacements == "map":
                east, north = map_displacement_to_east_north(crs, lon, lat, u.values, v.values)
            good = None if u.good is None and v.good is None else (
                (True if u.good is None else u.good) & (True if v.good is None else v.good))
            u = u.replace(quantity=EAST, values=east, error=sigma[0] if sigma else None,
                          good=good)
            v = v.replace(quantity=NORTH, values=north, error=sigma[1] if sigma else None,
                          good=good)
        platform = cf.platform_attribute(ds, opts)
        # a displacement needs both ends of its interval: a missing or unrepresentable bound
        # (NaT) is a bad time, not a displacement over no interval
        no_interval = np.isnat(start) | np.isnat(end)
        table = concat_tables([
            cf.observation_table(path, opts, component, lon=lon, lat=lat, time=start,
                                 time_end=end, platform=platform,
                                 rejections=[(no_interval, "bad_time")])
            for component in (u, v)])
        table.attrs["variables"] = cf.variable_units(
            ds, _used_variables(ds, names[0]) + _used_variables(ds, names[1]))
        return table
