"""Argo profile netCDF files (core format), single- and multi-profile.

Layout (Argo user's manual, from memory): dimensions ``N_PROF`` x ``N_LEVELS``; per profile
``PLATFORM_NUMBER`` (char), ``CYCLE_NUMBER``, ``DIRECTION`` ('A' ascending, 'D' descending),
``DATA_MODE`` ('R' real time, 'A' adjusted real time, 'D' delayed mode), ``JULD`` (days since
1950-01-01 00:00:00 UTC) with ``JULD_QC``, ``LATITUDE``/``LONGITUDE`` with ``POSITION_QC``; per
level ``PRES`` (decibar), ``TEMP`` (degree_Celsius), ``PSAL`` (psu), each with ``<P>_QC``,
``<P>_ADJUSTED``, ``<P>_ADJUSTED_QC`` and ``<P>_ADJUSTED_ERROR``.  Levels past the end of a
profile are padded with fill values.  QC flags are the characters 0 no QC, 1 good, 2 probably
good, 3 probably bad, 4 bad, 5 value changed, 8 estimated, 9 missing.

What the reader does with it:

- per profile, the ``_ADJUSTED`` value, QC flag and ``_ADJUSTED_ERROR`` (as ``error``) where
  ``DATA_MODE`` is A or D, the raw value and QC flag otherwise (pressure likewise);
- depth from pressure with TEOS-10 (:func:`obsprep.geo.seawater.depth_from_pressure`);
- ``group`` = ``<PLATFORM_NUMBER>_<CYCLE_NUMBER>`` (3 digits), with a ``D`` suffix for a
  descending profile, and ``_2``, ``_3``... for further profiles of the same cycle in the file
  (other vertical sampling schemes); ``platform`` = ``PLATFORM_NUMBER``;
- rejections, first wins: ``missing_value`` (value or pressure fill); ``position_qc``
  (``POSITION_QC`` not kept); ``time_qc`` (``JULD_QC`` not kept); ``argo_qc_flag`` (the value's
  or its pressure's QC flag not kept).  Kept flags: option ``good_qc_flags``, default 1 2 5 8.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from obsprep.exceptions import InputFileError
from obsprep.model.quantities import get_quantity
from obsprep.model.reasons import register_reason
from obsprep.model.table import concat_tables
from obsprep.readers import cf
from obsprep.readers.registry import Reader, register_reader

#: Argo parameter -> quantity
ARGO_PARAMETERS = {"TEMP": get_quantity("sea_water_temperature"),
                   "PSAL": get_quantity("sea_water_salinity")}
#: QC flags kept by default: good, probably good, value changed, estimated (Argo user's manual,
#: from memory)
DEFAULT_GOOD_QC_FLAGS = frozenset("1258")
register_reason("argo_qc_flag", "Argo level QC flag (of the value or its pressure) not in the "
                                "kept set", stage="reader")
register_reason("position_qc", "Argo POSITION_QC not in the kept set", stage="reader")
register_reason("time_qc", "Argo JULD_QC not in the kept set", stage="reader")

#: DATA_MODE -> preference when the same profile comes twice (delayed > adjusted > real time)
DATA_MODE_RANK = {"R": 0, "A": 1, "D": 2}
_PER_PROFILE = ("PLATFORM_NUMBER", "JULD", "LATITUDE", "LONGITUDE", "DATA_MODE")


def good_qc_flags(value) -> frozenset:
    """The kept QC flags as a set of one-character strings."""
    if value is None:
        return DEFAULT_GOOD_QC_FLAGS
    if isinstance(value, str):
        value = value.split() if " " in value.strip() else list(value.strip())
    flags = {str(v).strip() for v in value}
    if not flags or not all(len(f) == 1 and f.isdigit() for f in flags):
        raise ValueError(f"option 'good_qc_flags' must be Argo flags 0-9, got {value!r}")
    return frozenset(flags)


@dataclass(frozen=True)
class ArgoOptions(cf.SourceOptions):
    """Options of the Argo reader (Argo QC flags instead of CF flag meanings)."""

    good_qc_flags: frozenset = cf.option(
        DEFAULT_GOOD_QC_FLAGS, "Argo QC flags kept for levels, POSITION_QC and JULD_QC (list, or "
                               "a str such as \"1258\" or \"1 2 5 8\"; default 1 2 5 8)",
        lambda name, value: good_qc_flags(value))


def _as_bytes(values, width: int) -> np.ndarray:
    """Char data as decoded by xarray (bytes/str, NaN for fill) -> fixed-width bytes."""
    values = np.asarray(values)
    if values.dtype.kind == "O":
        values = np.where(pd.isna(values), b"", values)
    elif values.dtype.kind == "U":
        values = np.char.encode(values, "ascii", errors="replace")
    return values.astype(f"S{width}")


def char_array(da, shape) -> np.ndarray:
    """One character per element, shape ``shape`` ('<U1', fill and padding as " ").

    xarray concatenates a char variable along its last dimension (e.g. ``TEMP_QC``
    (N_PROF, N_LEVELS) arrives as N_PROF strings of N_LEVELS characters); both forms are
    accepted.
    """
    shape = tuple(shape)
    values = np.asarray(da.values)
    if values.shape == shape:
        chars = _as_bytes(values, 1)
    elif values.shape == shape[:-1]:
        chars = np.ascontiguousarray(_as_bytes(values, shape[-1])).view("S1").reshape(shape)
    else:
        raise ValueError(f"variable '{da.name}' has shape {values.shape}, expected {shape}")
    chars = np.char.decode(chars, "ascii", errors="replace")
    return np.where(chars == "", " ", chars).astype("<U1")


def strings(da, n: int) -> np.ndarray:
    """Per-profile strings (e.g. ``PLATFORM_NUMBER``), stripped, shape (n,)."""
    values = np.asarray(da.values)
    if values.ndim == 2:  # not concatenated: join the characters
        values = np.ascontiguousarray(_as_bytes(values, 1)).view(f"S{values.shape[1]}")[:, 0]
    values = np.atleast_1d(values)
    if values.shape != (n,):
        raise ValueError(f"variable '{da.name}' has shape {values.shape}, expected ({n},)")
    if values.dtype.kind in "iuf":
        return cf.labels_as_strings(values)
    return np.char.strip(np.char.decode(_as_bytes(values, max(1, _width(values))), "utf-8",
                                        errors="replace"))


def _width(values) -> int:
    if values.dtype.kind in "SU":
        return values.dtype.itemsize // (4 if values.dtype.kind == "U" else 1)
    lengths = [len(v) for v in values.ravel() if isinstance(v, (bytes, str))]
    return max(lengths, default=1)


def is_argo_profile_file(ds) -> bool:
    """``DATA_TYPE`` says "Argo profile", or the per-profile Argo variables and ``PRES``."""
    if "DATA_TYPE" in ds.variables:
        text = ds["DATA_TYPE"].values
        text = text.tobytes() if isinstance(text, np.ndarray) and text.dtype.kind == "S" else text
        text = text.item() if isinstance(text, np.ndarray) and text.ndim == 0 else text
        if isinstance(text, bytes):
            text = text.decode("ascii", errors="replace")
        if "argo profile" in str(text).lower():
            return True
    return all(v in ds.variables for v in _PER_PROFILE) and "PRES" in ds.variables


class _ArgoFile:
    """The per-profile metadata of one Argo file, decoded once."""

    def __init__(self, ds, path):
        self.ds, self.path = ds, path
        missing = [v for v in _PER_PROFILE + ("PRES",) if v not in ds.variables]
        if missing:
            raise InputFileError(path, f"not a complete Argo profile file: no variable(s) "
                                       f"{', '.join(missing)}", variable=missing[0])
        pres = ds["PRES"]
        if pres.ndim != 2:
            raise InputFileError(path, f"PRES has dimensions {pres.dims}, expected "
                                       f"(N_PROF, N_LEVELS)", variable="PRES")
        self.prof_dim, self.level_dim = pres.dims
        self.n_prof, self.n_levels = pres.shape
        self.mode = char_array(ds["DATA_MODE"], (self.n_prof,))
        bad_modes = sorted(set(self.mode) - set(DATA_MODE_RANK))
        if bad_modes:
            raise InputFileError(path, f"DATA_MODE values {bad_modes} are not R, A or D",
                                 variable="DATA_MODE")
        self.adjusted = np.isin(self.mode, ["A", "D"])
        self.platform = strings(ds["PLATFORM_NUMBER"], self.n_prof)
        self.lat = self._per_profile("LATITUDE")
        self.lon = cf.wrap_longitude(self._per_profile("LONGITUDE"))
        juld = ds["JULD"]
        self.time = cf.decode_time(juld.values, juld.attrs.get("units") or
                                   "days since 1950-01-01 00:00:00", juld.attrs.get("calendar"),
                                   path, variable="JULD")
        self.group = self._groups()

    def _per_profile(self, name):
        values = np.asarray(self.ds[name].values, dtype=np.float64)
        if values.shape != (self.n_prof,):
            raise InputFileError(self.path, f"shape {values.shape}, expected ({self.n_prof},)",
                                 variable=name)
        return values

    def qc(self, name, shape=None):
        """QC characters of ``name`` (all " " when the variable is absent)."""
        shape = (self.n_prof,) if shape is None else shape
        if name not in self.ds.variables:
            return np.full(shape, " ", dtype="<U1")
        return char_array(self.ds[name], shape)

    def _groups(self) -> np.ndarray:
        cycle = (cf.labels_as_strings(self.ds["CYCLE_NUMBER"].values)
                 if "CYCLE_NUMBER" in self.ds.variables else np.full(self.n_prof, ""))
        cycle = np.char.zfill(cycle, 3)
        direction = self.qc("DIRECTION")
        labels = np.char.add(np.char.add(np.char.add(self.platform, "_"), cycle),
                             np.where(direction == "D", "D", ""))
        occurrence = pd.Series(labels).groupby(labels).cumcount().to_numpy()
        suffix = np.where(occurrence > 0, np.char.add("_", (occurrence + 1).astype(str)), "")
        return np.char.add(labels.astype(str), suffix)

    def parameter(self, name, canonical, quantity=None):
        """(values in ``canonical`` units, QC chars, error or None) per (profile, level),
        adjusted where DATA_MODE is A or D."""
        ds, shape = self.ds, (self.n_prof, self.n_levels)

        def values_of(var_name):
            var = ds[var_name]
            if var.shape != shape:
                raise InputFileError(self.path, f"shape {var.shape}, expected {shape}",
                                     variable=var_name)
            return cf.values_in_units(var, canonical, self.path, quantity=quantity)

        values, qc = values_of(name), self.qc(f"{name}_QC", shape)
        error = None
        if self.adjusted.any():
            adjusted_name = f"{name}_ADJUSTED"
            if adjusted_name not in ds.variables:
                raise InputFileError(self.path, f"DATA_MODE is A or D for {int(self.adjusted.sum())}"
                                                f" profile(s) but the file has no "
                                                f"{adjusted_name}", variable=adjusted_name)
            use = self.adjusted[:, None]
            values = np.where(use, values_of(adjusted_name), values)
            qc = np.where(use, self.qc(f"{adjusted_name}_QC", shape), qc)
            error_name = f"{adjusted_name}_ERROR"
            if error_name in ds.variables:
                sigma = cf.values_in_units(ds[error_name], canonical, self.path,
                                           quantity=quantity, difference=True,
                                           default_units=ds[name].attrs.get("units"))
                error = np.where(use, sigma, np.nan)
        return values, qc, error

    def used_variables(self, names) -> list[str]:
        out = list(_PER_PROFILE) + ["CYCLE_NUMBER", "DIRECTION", "JULD_QC", "POSITION_QC"]
        for name in names:
            out += [name, f"{name}_QC"]
            if self.adjusted.any():
                out += [f"{name}_ADJUSTED", f"{name}_ADJUSTED_QC", f"{name}_ADJUSTED_ERROR"]
        return out


@register_reader
class ArgoProfileReader(Reader):
    """Argo core profile files (N_PROF x N_LEVELS), real-time and adjusted data."""

    kind = "argo"
    priority = 10
    description = "Argo profile netCDF (PRES/TEMP/PSAL, DATA_MODE, QC flags, JULD)"
    Options = ArgoOptions

    def guess_can_open(self, ds) -> bool:
        return is_argo_profile_file(ds)

    def read_dataset(self, ds, path, *, options, leave_out_rejected, reading_part):
        opts = options
        good = opts.good_qc_flags
        argo = _ArgoFile(ds, path)
        names = [p for p in ARGO_PARAMETERS if p in ds.variables]
        if not names:
            raise InputFileError(path, "no TEMP or PSAL variable in the Argo file",
                                 variable="TEMP")
        pressure, pressure_qc, _ = argo.parameter("PRES", "dbar")
        decoded, qcs = [], []
        for name in names:
            values, qc, error = argo.parameter(name, ARGO_PARAMETERS[name].units,
                                               ARGO_PARAMETERS[name])
            decoded.append(cf.DecodedVariable(ARGO_PARAMETERS[name], name, values, error))
            qcs.append(qc)
        cf.require_values(path, decoded, reading_part=reading_part)
        shape = (argo.n_prof, argo.n_levels)
        lat = np.broadcast_to(argo.lat[:, None], shape)
        from obsprep.geo.seawater import depth_from_pressure

        depth = depth_from_pressure(pressure, lat)
        padding = ~np.isfinite(pressure)
        for d in decoded:
            padding &= ~np.isfinite(d.values)
        keep = ~padding
        position_bad = ~np.isin(argo.qc("POSITION_QC"), list(good))[:, None]
        time_bad = ~np.isin(argo.qc("JULD_QC"), list(good))[:, None]
        pressure_bad = ~np.isin(pressure_qc, list(good))
        tables = []
        platform = argo.platform if opts.platform is None else opts.platform
        for d, qc in zip(decoded, qcs):
            table = cf.observation_table(
                path, opts, d, lon=argo.lon[:, None], lat=lat, time=argo.time[:, None],
                depth=depth, group=argo.group[:, None],
                platform=platform if np.ndim(platform) == 0 else platform[:, None],
                keep=keep, missing=~np.isfinite(depth),
                rejections=[(position_bad, "position_qc"), (time_bad, "time_qc"),
                            (~np.isin(qc, list(good)) | pressure_bad, "argo_qc_flag")])
            tables.append(table)
        table = concat_tables(tables)
        table.attrs["variables"] = cf.variable_units(ds, argo.used_variables(["PRES"] + names))
        return table

    def identities(self, ds, path, *, options) -> pd.DataFrame:
        """One row per profile for the duplicate check, from the per-profile variables only:
        ``group``, ``platform``, ``time``, ``lon``, ``lat``, ``rank`` (DATA_MODE: D 2, A 1,
        R 0) and ``n_valid`` (levels with a finite pressure).  ``options``: the source's
        parsed :attr:`Options`; none of them changes the identities."""
        argo = _ArgoFile(ds, path)
        pressure = np.asarray(ds["PRES"].values, dtype=np.float64)
        return pd.DataFrame({
            "group": argo.group, "platform": argo.platform, "time": argo.time,
            "lon": argo.lon, "lat": argo.lat,
            "rank": pd.Series(argo.mode).map(DATA_MODE_RANK).to_numpy(dtype=np.int64),
            "n_valid": np.isfinite(pressure).sum(axis=1).astype(np.int64),
        })
