"""The super-observation product: every output variable declared once.

One :class:`OutputVariable` per column of the super-observation table.  The netCDF writer
(:mod:`obsprep.writers.netcdf`) writes, for each quantity ``q`` present, the variables of
:data:`OUTPUT_VARIABLES` in this order (``q`` for the value, ``q_<suffix>`` for the others);
the finalise step (:mod:`obsprep.superobs.finalize`) orders the table, and so the Parquet
copy, by :data:`TABLE_COLUMNS`; the audit (:mod:`obsprep.audit.rundir`) reads back the
variables declared here.  Templates in ``standard_name``, ``long_name`` and the attributes may
use ``{name}`` (the quantity), ``{standard_name}`` and ``{long_name}`` (the quantity's).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

from obsprep.superobs.errors import ERROR_BASIS

#: ``units`` value meaning "the canonical units of the quantity"
QUANTITY_UNITS = "quantity"


@dataclass(frozen=True)
class OutputVariable:
    """One super-observation variable.

    column: column of the super-observation table (and of the Parquet copy).
    suffix: netCDF variable ``<quantity>_<suffix>``; ``""`` for the value itself (``<quantity>``);
        ``None`` for table-only columns, not written to netCDF.
    dtype: stored numpy dtype: ``"float64"``, ``"int32"``, ``"int8"``, ``"str"`` (variable-length
        strings) or ``"datetime64[ns]"`` (written as float64 seconds since the analysis time,
        standard calendar).
    units: ``"quantity"`` (the quantity's canonical units), a fixed unit string, or None.
    standard_name, long_name: CF attributes (templates, see the module docstring); None: absent.
    leading: further attributes written before ``long_name`` (``positive``, ``axis``).
    attributes: further attributes written after ``long_name`` (templates for strings).
    only_for: ``"profile"`` (sub-surface quantities), ``"vector"`` (interval observations, drift)
        or None (every quantity).
    error_part: written only when the table carries the spread-based error parts.
    flag_values: fixed CF flags, meaning -> code; ``flags_from_labels``: CF flags made from the
        text labels of the column (codes 0.. in sorted label order, meanings as CF words).
    undefined_as_nan: NaN where the statistic is undefined (a spread of one value); every other
        float or time column must be finite where it applies before anything is written
        (:func:`obsprep.writers.finite.check_finite`).
    positive: must also be greater than zero (the total error).
    """

    column: str
    suffix: str | None
    dtype: str
    long_name: str | None = None
    units: str | None = None
    standard_name: str | None = None
    leading: tuple = ()
    attributes: tuple = ()
    only_for: str | None = None
    error_part: bool = False
    flag_values: Mapping[str, int] | None = None
    flags_from_labels: bool = False
    undefined_as_nan: bool = False
    positive: bool = False

    def variable_name(self, quantity: str) -> str:
        """The netCDF variable name of this column for ``quantity``."""
        return f"{quantity}_{self.suffix}" if self.suffix else quantity

    def applies_to(self, quantity) -> bool:
        """Whether a :class:`~obsprep.model.quantities.Quantity` has this variable."""
        if self.only_for == "profile":
            return quantity.surface is False
        if self.only_for == "vector":
            return quantity.vector is not None
        return True

    def netcdf_attributes(self, name: str, quantity) -> dict:
        """The attributes of the variable for quantity ``quantity`` named ``name`` (None left out)."""
        fill = {"name": name, "standard_name": quantity.standard_name,
                "long_name": quantity.long_name}

        def text(value):
            return value.format(**fill) if isinstance(value, str) else value

        units = quantity.units if self.units == QUANTITY_UNITS else self.units
        attrs = {"standard_name": text(self.standard_name), "units": units}
        attrs.update((key, text(value)) for key, value in self.leading)
        attrs["long_name"] = text(self.long_name)
        attrs.update((key, text(value)) for key, value in self.attributes)
        return {k: v for k, v in attrs.items() if v is not None}


_Q = QUANTITY_UNITS

#: every super-observation variable, in the order the netCDF file holds them
OUTPUT_VARIABLES: tuple[OutputVariable, ...] = (
    OutputVariable("value", "", "float64", "super-observation of {long_name}", _Q, "{standard_name}",
                   attributes=(("coordinates", "{name}_time {name}_lat {name}_lon {name}_depth"),
                               ("ancillary_variables", "{name}_error {name}_count {name}_spread"))),
    OutputVariable("error", "error", "float64",
                   "total super-observation error (1-sigma): max(floor, sqrt(observation part^2 + "
                   "representation^2)), the observation part being the instrument or the spread "
                   "part (see error_basis)", _Q, "{standard_name} standard_error", positive=True),
    OutputVariable("error_instrument", "error_instrument", "float64",
                   "instrument part of the super-observation error (1-sigma), from the raw errors "
                   "and the within-sensor correlation", _Q),
    OutputVariable("error_representation", "error_representation", "float64",
                   "representation error added in quadrature (1-sigma)", _Q),
    OutputVariable("spread", "spread", "float64",
                   "sample standard deviation of the raw values in the group (ddof=1)", _Q,
                   undefined_as_nan=True),
    OutputVariable("error_spread", "error_spread", "float64",
                   "spread-based error (1-sigma): error_instrument * sqrt(R / E[R]), R the "
                   "(weighted) residual sum of squares of the raw values and E[R] its expectation "
                   "under the assigned errors; NaN where undefined", _Q, error_part=True,
                   undefined_as_nan=True),
    OutputVariable("error_raw_rms", "error_raw_rms", "float64",
                   "root mean square of the assigned raw errors in the group, sqrt(sum sigma_i^2 / n)",
                   _Q, error_part=True),
    OutputVariable("spread_detrended", "spread_detrended", "float64",
                   "standard deviation of the raw values about their fit in depth (quadratic, "
                   "line or mean; ddof = the fitted parameters)",
                   _Q, only_for="profile", error_part=True, undefined_as_nan=True),
    OutputVariable("error_basis", "error_basis", "int8", "which term set the total error", "1",
                   error_part=True, flag_values=ERROR_BASIS),
    OutputVariable("error_origin", "error_origin", "int8",
                   "raw error rule of the values in the group (origin of their errors)", "1",
                   error_part=True, flags_from_labels=True),
    OutputVariable("count", "count", "int32", "number of raw observations in the super-observation",
                   "1", "number_of_observations"),
    OutputVariable("lon", "lon", "float64", "mean position on the sphere, longitude", "degrees_east",
                   "longitude"),
    OutputVariable("lat", "lat", "float64", "mean position on the sphere, latitude", "degrees_north",
                   "latitude"),
    OutputVariable("depth", "depth", "float64", "mean depth", "m", "depth",
                   leading=(("positive", "down"), ("axis", "Z"))),
    OutputVariable("time", "time", "datetime64[ns]", "mean observation time (an interval: its "
                   "start)", None, "time"),
    OutputVariable("time_offset", "time_offset", "float64",
                   "mean time minus the analysis time (an interval: its start, middle or end, "
                   "superobs.interval_time)", "s"),
    OutputVariable("slot", "slot", "int32", "time-slot index counted from the window start "
                   "(of the time_offset)", "1"),
    OutputVariable("i", "i", "int32", "model grid column index (0-based)", "1"),
    OutputVariable("j", "j", "int32", "model grid row index (0-based)", "1"),
    OutputVariable("k", "k", "int32", "model layer index (0-based, from the surface)", "1"),
    OutputVariable("sensor", "sensor", "str", "sensor (source name, after merging)"),
    OutputVariable("profile", "profile", "str",
                   "profile identifier (empty when averaged across profiles)", only_for="profile"),
    OutputVariable("time_end", "time_end", "datetime64[ns]",
                   "end of the displacement interval (start is the time variable)", None, "time",
                   only_for="vector"),
    OutputVariable("error_correlation", "error_correlation", "float64",
                   "correlation of this component's total error with the other component's of "
                   "the same cell, slot and interval (drift x with drift y, east with north); "
                   "NaN where the other component is absent", "1", only_for="vector",
                   undefined_as_nan=True),
    # table (and Parquet) only
    OutputVariable("quantity", None, "str", "quantity name"),
    OutputVariable("value_min", None, "float64", "lowest raw value in the group", _Q),
    OutputVariable("value_max", None, "float64", "highest raw value in the group", _Q),
)

#: the netCDF variables (those with a suffix), in file order
NETCDF_VARIABLES: tuple[OutputVariable, ...] = tuple(v for v in OUTPUT_VARIABLES if v.suffix is not None)

#: column order of the super-observation table and of its Parquet copy
TABLE_COLUMNS: tuple[str, ...] = (
    "quantity", "sensor", "slot", "i", "j", "k", "profile", "count", "value", "spread", "value_min",
    "value_max", "error", "error_instrument", "error_representation", "lon", "lat", "depth",
    "error_spread", "error_basis", "error_raw_rms", "spread_detrended", "error_origin",
    "time_offset", "time", "time_end", "error_correlation",
)

BY_COLUMN: dict[str, OutputVariable] = {v.column: v for v in OUTPUT_VARIABLES}

if sorted(TABLE_COLUMNS) != sorted(BY_COLUMN) or len(BY_COLUMN) != len(OUTPUT_VARIABLES):
    raise RuntimeError("obsprep.model.product: TABLE_COLUMNS must name each declared column once")

__all__ = ["OutputVariable", "OUTPUT_VARIABLES", "NETCDF_VARIABLES", "TABLE_COLUMNS", "BY_COLUMN",
           "QUANTITY_UNITS"]
