"""Temperatures below the freezing point of seawater (TEOS-10, :mod:`obsprep.geo.seawater`)."""

from __future__ import annotations

import numpy as np
import pandas as pd

from obsprep.geo.seawater import freezing_temperature, pressure_from_depth
from obsprep.model.quantities import SST_QUANTITY_NAMES
from obsprep.model.table import kept, reject
from obsprep.qc.check import QcCheck, QcSetting, declare_reasons


def below_freezing_test(table: pd.DataFrame, quantities, tolerance: float,
                        default_salinity: float) -> np.ndarray:
    """Rows whose temperature is below the freezing point minus ``tolerance`` (degC).

    Applies to the kept rows of ``quantities`` (``sea_water_temperature``,
    ``sea_surface_temperature``).  The salinity is the kept ``sea_water_salinity`` row of the
    same file, group and ``row`` (the same level of the same profile) where there is one, else
    ``default_salinity``; the pressure comes from the depth (0 at the surface) with
    :func:`obsprep.geo.seawater.pressure_from_depth`.
    """
    fail = np.zeros(len(table), dtype=bool)
    live = kept(table)
    temperature = live & table["quantity"].isin(list(quantities)).to_numpy() & np.isfinite(
        table["value"].to_numpy())
    if not temperature.any():
        return fail
    idx = np.flatnonzero(temperature)
    salinity = np.full(idx.size, float(default_salinity))
    salinity_rows = live & table["quantity"].isin(["sea_water_salinity"]).to_numpy() & np.isfinite(
        table["value"].to_numpy())
    if salinity_rows.any():
        keys = ["file_id", "group", "row"]
        left = pd.DataFrame({k: table[k].to_numpy()[idx] for k in keys})
        left["file_id"] = left["file_id"].astype(str)
        left["group"] = left["group"].astype(str)
        right = pd.DataFrame({k: table[k].to_numpy()[salinity_rows] for k in keys})
        right["file_id"] = right["file_id"].astype(str)
        right["group"] = right["group"].astype(str)
        right["salinity"] = table["value"].to_numpy()[salinity_rows]
        right = right.drop_duplicates(keys)
        matched = left.merge(right, on=keys, how="left")["salinity"].to_numpy()
        salinity = np.where(np.isfinite(matched), matched, salinity)
    lat = table["lat"].to_numpy()[idx]
    lon = table["lon"].to_numpy()[idx]
    pressure = np.clip(pressure_from_depth(table["depth"].to_numpy()[idx], lat), 0.0, None)
    t_freeze = freezing_temperature(salinity, pressure, lon, lat)
    fail[idx] = table["value"].to_numpy()[idx] < t_freeze - tolerance
    return fail


#: temperature quantities the freezing point check can apply to (every SST type among them)
TEMPERATURE_QUANTITIES = ("sea_water_temperature", *SST_QUANTITY_NAMES)


def _apply_below_freezing(table: pd.DataFrame, context, settings) -> dict:
    return {"below_freezing_point": reject(
        table, below_freezing_test(table, settings.freezing_point_quantities,
                                   settings.freezing_point_tolerance,
                                   settings.freezing_point_salinity),
        "below_freezing_point")}


BELOW_FREEZING_CHECK = QcCheck(
    name="below_freezing_point",
    reasons={"below_freezing_point": "temperature below the TEOS-10 freezing point minus the "
                                     "tolerance"},
    apply=_apply_below_freezing,
    settings=(
        QcSetting("freezing_point_quantities", "choices", ("sea_water_temperature",),
                  "temperature quantities checked against the TEOS-10 freezing point; [] off",
                  choices=TEMPERATURE_QUANTITIES),
        QcSetting("freezing_point_tolerance", "non_negative_number", 0.1,
                  "degC below the freezing point still accepted"),
        QcSetting("freezing_point_salinity", "non_negative_number", 35.0,
                  "practical salinity used where no salinity was measured at the same level"),
    ),
    enabled=lambda settings: bool(settings.freezing_point_quantities))
declare_reasons(BELOW_FREEZING_CHECK)
