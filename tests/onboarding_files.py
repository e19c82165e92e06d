"""Files for the onboarding and model-output tests, written from the CF conventions (1.8,
from memory): a file no reader claims (no standard_name anywhere), and an SST grid to which a
sign of model output can be added."""

from __future__ import annotations

import numpy as np
from sample_files import var, write_nc

SST = np.array([[[10.0, 11.0, 12.0], [13.0, 14.0, np.nan]]])
QC = np.array([[[0, 0, 1], [0, 2, 0]]], dtype=np.int8)


def unclaimed_grid(path):
    """A gridded SST in degrees Celsius with its uncertainty (kelvin) and a QC flag, but no
    standard_name anywhere: coordinates recognisable only from their units."""
    return write_nc(path, {"t": 1, "row": 2, "col": 3}, {
        "obs_time": var(("t",), [1.3e9], units="seconds since 1981-01-01 00:00:00"),
        "y_lat": var(("row",), [50.0, 51.0], units="degrees_north"),
        "x_lon": var(("col",), [0.0, 1.0, 2.0], units="degrees_east"),
        "surface_temp": var(("t", "row", "col"), SST, fill=-999.0, units="degree_Celsius",
                            long_name="sea surface temperature"),
        "surface_temp_err": var(("t", "row", "col"), np.full((1, 2, 3), 0.3), units="K",
                                long_name="uncertainty"),
        "surface_temp_qc": var(("t", "row", "col"), QC, dtype="i1",
                               flag_values=np.array([0, 1, 2], dtype=np.int8),
                               flag_meanings="good suspect bad"),
        "wind": var(("t", "row", "col"), np.full((1, 2, 3), 5.0), units="m s-1",
                    long_name="wind speed"),
    })


def unclaimed_profiles(path):
    """Two CTD profiles (CF orthogonal multidimensional layout, featureType profile) whose
    variables carry units and long names but no standard_name."""
    return write_nc(path, {"profile": 2, "level": 3}, {
        "TIME": var(("profile",), [27000.0, 27000.5], units="days since 1950-01-01 00:00:00"),
        "LATITUDE": var(("profile",), [-60.0, -61.0], units="degrees_north"),
        "LONGITUDE": var(("profile",), [-30.0, -31.0], units="degrees_east"),
        "PRES": var(("profile", "level"), [[5.0, 50.0, 100.0], [5.0, 50.0, 100.0]],
                    units="dbar"),
        "TEMP": var(("profile", "level"), [[1.0, 0.5, 0.2], [1.5, 0.8, 0.1]],
                    units="degree_Celsius", long_name="sea temperature"),
        "PSAL": var(("profile", "level"), [[34.1, 34.3, 34.6], [34.0, 34.2, 34.5]],
                    units="psu", long_name="practical salinity"),
    }, featureType="profile")


def sst_grid_with(path, *, dims=None, extra=None, sst_attrs=None, **global_attrs):
    """An SST grid on (time, lat, lon), with an optional leading dimension ``dims`` of the SST
    variable, extra variables and attributes."""
    lead = dict(dims or {})
    shape = tuple(lead.values()) + (1, 2, 3)
    variables = {
        "time": var(("time",), [1.3e9], standard_name="time",
                    units="seconds since 1981-01-01 00:00:00"),
        "lat": var(("lat",), [50.0, 51.0], standard_name="latitude", units="degrees_north"),
        "lon": var(("lon",), [0.0, 1.0, 2.0], standard_name="longitude", units="degrees_east"),
        "sst": var(tuple(lead) + ("time", "lat", "lon"), np.full(shape, 290.0), fill=-999.0,
                   standard_name="sea_surface_temperature", units="K", **(sst_attrs or {})),
    }
    variables.update(extra or {})
    return write_nc(path, {**lead, "time": 1, "lat": 2, "lon": 3}, variables, **global_attrs)
