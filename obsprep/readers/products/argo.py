"""Argo profile netCDF files: core, BGC synthetic and Argo-like (animal-borne CTD) files,
single- and multi-profile.

Layout (Argo user's manual, from memory): dimensions ``N_PROF`` x ``N_LEVELS``; per profile
``PLATFORM_NUMBER`` (char), ``CYCLE_NUMBER``, ``DIRECTION`` ('A' ascending, 'D' descending),
``DATA_MODE`` ('R' real time, 'A' adjusted real time, 'D' delayed mode), ``JULD`` (days since
1950-01-01 00:00:00 UTC) with ``JULD_QC``, ``LATITUDE``/``LONGITUDE`` with ``POSITION_QC``; per
level ``PRES`` (decibar), ``TEMP`` (degree_Celsius), ``PSAL`` (psu), each with ``<P>_QC``,
``<P>_ADJUSTED``, ``<P>_ADJUSTED_QC`` and ``<P>_ADJUSTED_ERROR``.  Levels past the end of a
profile are padded with fill values.  QC flags are the characters 0 no QC, 1 good, 2 probably
good, 3 probably bad, 4 bad, 5 value changed, 8 estimated, 9 missing.  A BGC synthetic file
gives the data mode per parameter instead: ``PARAMETER_DATA_MODE`` (N_PROF, N_PARAM), in the
order of the parameter names of ``STATION_PARAMETERS`` (N_PROF, N_PARAM).

What the reader does with it:

- per profile and parameter, the ``_ADJUSTED`` value, QC flag and ``_ADJUSTED_ERROR`` (as
  ``error``) where that parameter's data mode is A or D, the raw value and QC flag otherwise
  (pressure likewise).  The parameter's mode is its ``PARAMETER_DATA_MODE`` entry where the file
  has one for it, else the profile's ``DATA_MODE``; a file with neither (Argo-like files) uses
  the adjusted value where the ``_ADJUSTED`` variable holds one, with a warning;
- depth from pressure with TEOS-10 (:func:`obsprep.geo.seawater.depth_from_pressure`);
- ``group`` = ``<PLATFORM_NUMBER>_<CYCLE_NUMBER>`` (3 digits), with a ``D`` suffix for a
  descending profile (so the descent and ascent profiles of one cycle are two profiles), and
  ``_2``, ``_3``... for further profiles of the same cycle and direction in the file (other
  vertical sampling schemes); ``platform`` = ``PLATFORM_NUMBER`` (else the option, else the
  ``platform`` global attribute);
- rejections, first wins: ``missing_value`` (value or pressure fill); ``position_qc``
  (``POSITION_QC`` not kept); ``time_qc`` (``JULD_QC`` not kept); ``argo_qc_flag`` (the value's
  or its pressure's QC flag not kept).  Kept flags: option ``good_qc_flags``, default 1 2 5 8.
  A QC variable the file does not have rejects nothing and is named in a warning (Argo-like
  files without some Argo variables); a QC variable present but blank (fill) is not a good flag.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from obsprep.exceptions import InputFileError
from obsprep.geo.seawater import depth_from_pressure
from obsprep.model.quantities import get_quantity
from obsprep.model.reasons import register_reason
from obsprep.model.table import add_warning, concat_tables
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
#: per-profile variables a file needs
_PER_PROFILE = ("JULD", "LATITUDE", "LONGITUDE")
#: per-profile variables used where the file has them
_OPTIONAL_PER_PROFILE = ("PLATFORM_NUMBER", "DATA_MODE", "PARAMETER_DATA_MODE",
                         "STATION_PARAMETERS", "CYCLE_NUMBER", "DIRECTION", "JULD_QC",
                         "POSITION_QC")


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
    """``DATA_TYPE`` says "Argo profile", or the file has the per-profile Argo variables
    (``JULD``, ``LATITUDE``, ``LONGITUDE``), ``PRES`` on (N_PROF, N_LEVELS) and ``TEMP`` or
    ``PSAL`` (Argo-like files: BGC synthetic, animal-borne CTD)."""
    if "DATA_TYPE" in ds.variables:
        text = ds["DATA_TYPE"].values
        text = text.tobytes() if isinstance(text, np.ndarray) and text.dtype.kind == "S" else text
        text = text.item() if isinstance(text, np.ndarray) and text.ndim == 0 else text
        if isinstance(text, bytes):
            text = text.decode("ascii", errors="replace")
        if "argo profile" in str(text).lower():
            return True
    return (all(v in ds.variables for v in _PER_PROFILE + ("PRES",))
            and ds["PRES"].ndim == 2 and any(p in ds.variables for p in ARGO_PARAMETERS))


class _ArgoFile:
    """The per-profile metadata of one Argo file, decoded once."""

    def __init__(self, ds, path, platform_default: str = ""):
        self.ds, self.path = ds, path
        self.warnings: list[str] = []
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
        self.profile_mode = None
        if "DATA_MODE" in ds.variables:
            self.profile_mode = char_array(ds["DATA_MODE"], (self.n_prof,))
        self.parameter_modes = self._parameter_modes()
        if "PLATFORM_NUMBER" in ds.variables:
            self.platform = strings(ds["PLATFORM_NUMBER"], self.n_prof)
        else:
            self.platform = np.full(self.n_prof, platform_default)
        self.lat = self._per_profile("LATITUDE")
        self.lon = cf.wrap_longitude(self._per_profile("LONGITUDE"))
        juld = ds["JULD"]
        self.time = cf.decode_time(juld.values, juld.attrs.get("units") or
                                   "days since 1950-01-01 00:00:00", juld.attrs.get("calendar"),
                                   path, variable="JULD")
        self.group = self._groups()

    def _parameter_modes(self) -> dict:
        """{parameter name: (N_PROF,) modes} from ``PARAMETER_DATA_MODE`` and
        ``STATION_PARAMETERS`` (BGC synthetic files); empty without them."""
        ds = self.ds
        if "PARAMETER_DATA_MODE" not in ds.variables or "STATION_PARAMETERS" not in ds.variables:
            return {}
        modes_var, names_var = ds["PARAMETER_DATA_MODE"], ds["STATION_PARAMETERS"]
        n_param = modes_var.shape[-1] if modes_var.ndim == 2 else None
        if n_param is None or modes_var.shape[0] != self.n_prof:
            raise InputFileError(self.path, f"shape {modes_var.shape}, expected (N_PROF, N_PARAM)",
                                 variable="PARAMETER_DATA_MODE")
        modes = char_array(modes_var, (self.n_prof, n_param))
        names = np.asarray(names_var.values)
        if names.shape != (self.n_prof, n_param):
            raise InputFileError(self.path, f"shape {names.shape}, expected ({self.n_prof}, "
                                            f"{n_param}) like PARAMETER_DATA_MODE",
                                 variable="STATION_PARAMETERS")
        names = cf.labels_as_strings(names.ravel()).reshape(names.shape)
        out: dict[str, np.ndarray] = {}
        for name in np.unique(names):
            if not name:
                continue
            where = names == name
            has = where.any(axis=1)
            # the column of that parameter in each profile that lists it
            column = np.argmax(where, axis=1)
            out[str(name)] = np.where(has, modes[np.arange(self.n_prof), column], " ")
        return out

    def mode_of(self, name) -> np.ndarray | None:
        """Data mode of parameter ``name`` per profile ('R', 'A', 'D'), or None when the file
        gives none (no DATA_MODE, no PARAMETER_DATA_MODE entry)."""
        mode = self.parameter_modes.get(name)
        if mode is not None and self.profile_mode is not None:
            mode = np.where(mode == " ", self.profile_mode, mode)
        elif mode is None:
            mode = self.profile_mode
        if mode is None:
            return None
        listed = mode != " "
        bad = sorted(set(mode[listed]) - set(DATA_MODE_RANK))
        source = "PARAMETER_DATA_MODE" if name in self.parameter_modes else "DATA_MODE"
        if bad:
            raise InputFileError(self.path, f"data mode values {bad} of {name} are not R, A or D",
                                 variable=source)
        return np.where(listed, mode, "R")

    def rank(self) -> np.ndarray:
        """Preference of each profile for the duplicate check: the rank of its data mode
        (D 2, A 1, R 0), the lowest over pressure, temperature and salinity for per-parameter
        modes; 0 without any."""
        ranks = [pd.Series(m).map(DATA_MODE_RANK).to_numpy(dtype=np.int64)
                 for m in (self.mode_of(p) for p in ("PRES",) + tuple(ARGO_PARAMETERS)
                           if p in self.ds.variables) if m is not None]
        return np.min(ranks, axis=0) if ranks else np.zeros(self.n_prof, dtype=np.int64)

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

    def qc_failing(self, name, good, shape=None) -> np.ndarray:
        """True where QC variable ``name`` holds a flag not in ``good``; all False, with a
        warning, when the file has no such variable (nothing to apply)."""
        shape = (self.n_prof,) if shape is None else shape
        if name not in self.ds.variables:
            self.warnings.append(f"no {name} variable: its check is not applied")
            return np.zeros(shape, dtype=bool)
        return ~np.isin(self.qc(name, shape), list(good))

    def _groups(self) -> np.ndarray:
        cycle = (cf.labels_as_strings(self.ds["CYCLE_NUMBER"].values)
                 if "CYCLE_NUMBER" in self.ds.variables
                 else np.arange(1, self.n_prof + 1).astype(str))
        cycle = np.char.zfill(cycle, 3)
        direction = self.qc("DIRECTION")
        labels = np.char.add(np.char.add(np.char.add(self.platform, "_"), cycle),
                             np.where(direction == "D", "D", ""))
        occurrence = pd.Series(labels).groupby(labels).cumcount().to_numpy()
        suffix = np.where(occurrence > 0, np.char.add("_", (occurrence + 1).astype(str)), "")
        return np.char.add(labels.astype(str), suffix)

    def parameter(self, name, canonical, quantity=None):
        """(values in ``canonical`` units, QC chars, error or None, QC variable names) per
        (profile, level), adjusted where the parameter's data mode is A or D."""
        ds, shape = self.ds, (self.n_prof, self.n_levels)

        def values_of(var_name):
            var = ds[var_name]
            if var.shape != shape:
                raise InputFileError(self.path, f"shape {var.shape}, expected {shape}",
                                     variable=var_name)
            return cf.values_in_units(var, canonical, self.path, quantity=quantity)

        values = values_of(name)
        qc_name, adjusted_name = f"{name}_QC", f"{name}_ADJUSTED"
        qc = self.qc(qc_name, shape)
        qc_present = np.full(shape, qc_name in ds.variables)
        mode = self.mode_of(name)
        if mode is None:
            if adjusted_name not in ds.variables:
                return values, qc, None, qc_present
            adjusted_values = values_of(adjusted_name)
            use = np.isfinite(adjusted_values)
            if use.any():
                self.warnings.append(f"no DATA_MODE or PARAMETER_DATA_MODE: {adjusted_name} used "
                                     f"where it holds a value ({int(use.sum())} levels)")
        else:
            use = np.broadcast_to(np.isin(mode, ["A", "D"])[:, None], shape)
            if not use.any():
                return values, qc, None, qc_present
            if adjusted_name not in ds.variables:
                raise InputFileError(self.path, f"data mode is A or D for "
                                                f"{int(use[:, 0].sum())} profile(s) but the "
                                                f"file has no {adjusted_name}",
                                     variable=adjusted_name)
            adjusted_values = values_of(adjusted_name)
        values = np.where(use, adjusted_values, values)
        adjusted_qc_name = f"{adjusted_name}_QC"
        qc = np.where(use, self.qc(adjusted_qc_name, shape), qc)
        qc_present = np.where(use, adjusted_qc_name in ds.variables, qc_present)
        error = None
        error_name = f"{adjusted_name}_ERROR"
        if error_name in ds.variables:
            sigma = cf.values_in_units(ds[error_name], canonical, self.path,
                                       quantity=quantity, difference=True,
                                       default_units=ds[name].attrs.get("units"))
            error = np.where(use, sigma, np.nan)
        return values, qc, error, qc_present

    def used_variables(self, names) -> list[str]:
        out = list(_PER_PROFILE) + [v for v in _OPTIONAL_PER_PROFILE if v in self.ds.variables]
        for name in names:
            out += [name, f"{name}_QC", f"{name}_ADJUSTED", f"{name}_ADJUSTED_QC",
                    f"{name}_ADJUSTED_ERROR"]
        return [v for v in out if v in self.ds.variables]


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
        argo = _ArgoFile(ds, path, cf.platform_attribute(ds, opts))
        names = [p for p in ARGO_PARAMETERS if p in ds.variables]
        if not names:
            raise InputFileError(path, "no TEMP or PSAL variable in the Argo file",
                                 variable="TEMP")
        pressure, pressure_qc, _, pressure_qc_present = argo.parameter("PRES", "dbar")
        decoded, qcs = [], []
        for name in names:
            values, qc, error, qc_present = argo.parameter(name, ARGO_PARAMETERS[name].units,
                                                           ARGO_PARAMETERS[name])
            decoded.append(cf.DecodedVariable(ARGO_PARAMETERS[name], name, values, error))
            qcs.append((qc, qc_present))
        cf.require_values(path, decoded, reading_part=reading_part)
        shape = (argo.n_prof, argo.n_levels)
        lat = np.broadcast_to(argo.lat[:, None], shape)
        depth = depth_from_pressure(pressure, lat)
        padding = ~np.isfinite(pressure)
        for d in decoded:
            padding &= ~np.isfinite(d.values)
        keep = ~padding
        position_bad = argo.qc_failing("POSITION_QC", good)[:, None]
        time_bad = argo.qc_failing("JULD_QC", good)[:, None]
        pressure_bad = pressure_qc_present & ~np.isin(pressure_qc, list(good))
        if not pressure_qc_present.all():
            argo.warnings.append("no QC variable for some pressures (PRES_QC or "
                                 "PRES_ADJUSTED_QC): their check is not applied")
        tables = []
        platform = argo.platform if opts.platform is None else opts.platform
        for d, (qc, qc_present) in zip(decoded, qcs):
            if not qc_present.all():
                argo.warnings.append(f"no QC variable for some {d.variable} values "
                                     f"({d.variable}_QC or {d.variable}_ADJUSTED_QC): their "
                                     f"check is not applied")
            value_bad = qc_present & ~np.isin(qc, list(good))
            table = cf.observation_table(
                path, opts, d, lon=argo.lon[:, None], lat=lat, time=argo.time[:, None],
                depth=depth, group=argo.group[:, None],
                platform=platform if np.ndim(platform) == 0 else platform[:, None],
                keep=keep, missing=~np.isfinite(depth),
                rejections=[(position_bad, "position_qc"), (time_bad, "time_qc"),
                            (value_bad | pressure_bad, "argo_qc_flag")])
            tables.append(table)
        table = concat_tables(tables)
        for message in argo.warnings:
            add_warning(table, message)
        table.attrs["variables"] = cf.variable_units(ds, argo.used_variables(["PRES"] + names))
        return table

    def identities(self, ds, path, *, options) -> pd.DataFrame:
        """One row per profile for the duplicate check, from the per-profile variables only:
        ``group``, ``platform``, ``time``, ``lon``, ``lat``, ``rank`` (DATA_MODE: D 2, A 1,
        R 0; the lowest over the parameters of per-parameter modes) and ``n_valid`` (levels
        with a finite pressure).  ``options``: the source's parsed :attr:`Options`; only
        ``platform`` (for files without PLATFORM_NUMBER) changes the identities."""
        argo = _ArgoFile(ds, path, cf.platform_attribute(ds, options))
        pressure = np.asarray(ds["PRES"].values, dtype=np.float64)
        return pd.DataFrame({
            "group": argo.group, "platform": argo.platform, "time": argo.time,
            "lon": argo.lon, "lat": argo.lat,
            "rank": argo.rank(),
            "n_valid": np.isfinite(pressure).sum(axis=1).astype(np.int64),
        })
