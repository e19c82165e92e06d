"""The quantity vocabulary: the one place where obsprep's quantities are named.

Each quantity has a short name used in the observation table and the output, the CF
standard_name written to the output, the canonical units every reader converts to, the CF
standard names a reader accepts as this quantity, and a physically possible range used by the
basic range check, and the super-observation error settings used when the configuration gives
none: a default representation error and a default floor of the super-observation error.

The defaults (canonical units) are typical values of the trade, recalled rather than looked up
(from memory): the representation error is the typical unresolved variability of a model cell
of about 10 km (a layer for profiles); the floor is a third of the smaller typical error of one
raw value (rounded down), the most that averaging a cell's values can gain when their errors
are partly shared within a pass, granule or profile (about ten independent values; common
practice).  A
configuration that knows better sets ``superobs.representation_error`` / ``superobs.error_floor``.
"""

from __future__ import annotations

from dataclasses import dataclass, field


@dataclass(frozen=True)
class Quantity:
    """One observed quantity.

    Attributes
    ----------
    name : str
        Short name used in the observation table (``quantity`` column) and output.
    standard_name : str
        CF standard_name written to the output.
    units : str
        Canonical units (CF/udunits string); values in the table are in these units.
    long_name : str
        Human-readable description.
    accepted_standard_names : tuple of str
        CF standard names that a reader maps onto this quantity.
    valid_range : tuple of float
        Physically possible values in canonical units (a generous gross check).
    vector : str or None
        For vector components: the name of the vector ("sea_ice_drift") it belongs to.
    component : str or None
        "east"/"north" (geographic) or "x"/"y" (model grid axes).
    surface : bool
        True for quantities of the sea surface (one value per cell), False for profile
        quantities (one value per cell and model layer).
    averaging : str
        How super-observations average the quantity, one of :data:`AVERAGING_SPACES`:
        ``"linear"``, the (equal- or inverse-variance-weighted) mean of the values as they are.
    default_representation_error : float
        Representation error (1 sigma, canonical units, >= 0) used when
        ``superobs.representation_error`` does not give one.
    default_error_floor : float
        Floor of the super-observation error (canonical units, > 0) used when
        ``superobs.error_floor`` does not give one; it keeps every error positive.
    """

    name: str
    standard_name: str
    units: str
    long_name: str
    accepted_standard_names: tuple = field(default_factory=tuple)
    valid_range: tuple = (float("-inf"), float("inf"))
    vector: str | None = None
    component: str | None = None
    surface: bool = True
    averaging: str = "linear"
    default_representation_error: float = float("nan")
    default_error_floor: float = float("nan")

    def __post_init__(self):
        if self.averaging not in AVERAGING_SPACES:
            raise ValueError(f"quantity '{self.name}': averaging '{self.averaging}' is not one of "
                             f"{', '.join(AVERAGING_SPACES)}")
        # declared with every quantity: no super-observation error may collapse to zero
        if not self.default_representation_error >= 0.0:
            raise ValueError(f"quantity '{self.name}': default_representation_error must be a "
                             f"number >= 0, got {self.default_representation_error!r}")
        if not (0.0 < self.default_error_floor < float("inf")):
            raise ValueError(f"quantity '{self.name}': default_error_floor must be a finite "
                             f"number > 0, got {self.default_error_floor!r}")


#: the averaging spaces the super-observation stage implements.  A quantity averaged in a
#: transformed space (chlorophyll-a in log10, say) needs its forward and inverse maps, and the
#: propagation of its errors, added to obsprep/superobs before it can be declared here.
AVERAGING_SPACES = ("linear",)

# Default super-observation error settings shared by several quantities (see the module
# docstring; typical values from memory).
#: SST of every type: one infrared pixel 0.3-0.5 K, microwave 0.5-0.8 K; sub-cell variability
#: of a few tenths of a kelvin at fronts and eddies
_SST_ERROR_DEFAULTS = {"default_representation_error": 0.2, "default_error_floor": 0.1}
#: sea-ice drift components: one vector 1-5 km over 48 h; sub-cell deformation about 1 km
_DRIFT_ERROR_DEFAULTS = {"default_representation_error": 1000.0, "default_error_floor": 300.0}
#: in-situ and potential temperature: instrument 0.002-0.005 degC; the variability a layer
#: mean does not resolve is 0.1-0.5 degC in the thermocline, less below it
_PROFILE_TEMPERATURE_ERROR_DEFAULTS = {"default_representation_error": 0.1,
                                       "default_error_floor": 0.0006}

QUANTITIES: dict[str, Quantity] = {
    q.name: q
    for q in [
        Quantity(
            "sea_level_anomaly", "sea_surface_height_above_sea_level", "m",
            "sea level anomaly",
            ("sea_surface_height_above_sea_level", "sea_surface_height_above_mean_sea_level",
             "sea_surface_height_anomaly"),
            (-3.0, 3.0),
            # one along-track value 0.03 m; unresolved variability of similar size or more
            # (from memory)
            default_representation_error=0.03, default_error_floor=0.01,
        ),
        # The SST types (GDS 2.0 "SST definitions", [GDS2]; CF standard names) differ by up to
        # a few kelvin by day (diurnal warming) and a few tenths at night (cool skin), so each
        # is its own quantity; superobs.merge_quantities averages types together on purpose.
        Quantity(
            "sea_surface_temperature", "sea_surface_temperature", "degC",
            "sea surface temperature at a depth, or of unstated type (GDS 2.0 SSTdepth, "
            "SSTblend)",
            ("sea_surface_temperature",),
            (-2.5, 40.0), **_SST_ERROR_DEFAULTS,
        ),
        Quantity(
            "sea_surface_skin_temperature", "sea_surface_skin_temperature", "degC",
            "sea surface skin temperature (about 10-20 micrometres; infrared radiometers)",
            ("sea_surface_skin_temperature",),
            (-2.5, 40.0), **_SST_ERROR_DEFAULTS,
        ),
        Quantity(
            "sea_surface_subskin_temperature", "sea_surface_subskin_temperature", "degC",
            "sea surface subskin temperature (about 1 mm; microwave radiometers)",
            ("sea_surface_subskin_temperature",),
            (-2.5, 40.0), **_SST_ERROR_DEFAULTS,
        ),
        Quantity(
            "sea_surface_foundation_temperature", "sea_surface_foundation_temperature", "degC",
            "sea surface foundation temperature (free of diurnal warming; analyses)",
            ("sea_surface_foundation_temperature",),
            (-2.5, 40.0), **_SST_ERROR_DEFAULTS,
        ),
        Quantity(
            "sea_ice_concentration", "sea_ice_area_fraction", "1",
            "sea-ice concentration (fraction 0-1)",
            ("sea_ice_area_fraction",),
            # retrievals are noisy and often delivered unclipped; clipping them to 0..1 would bias
            # averages near open water and full ice (common practice)
            (-0.25, 1.25),
            # one retrieval 0.05-0.15, more near the ice edge and in the melt season; the
            # unresolved variability of a cell is largest at the edge (from memory)
            default_representation_error=0.05, default_error_floor=0.015,
        ),
        Quantity(
            "sea_ice_drift_east", "eastward_sea_ice_displacement", "m",
            "eastward sea-ice displacement over [time, time_end]",
            ("eastward_sea_ice_displacement",),
            (-1.0e6, 1.0e6), vector="sea_ice_drift", component="east", **_DRIFT_ERROR_DEFAULTS,
        ),
        Quantity(
            "sea_ice_drift_north", "northward_sea_ice_displacement", "m",
            "northward sea-ice displacement over [time, time_end]",
            ("northward_sea_ice_displacement",),
            (-1.0e6, 1.0e6), vector="sea_ice_drift", component="north", **_DRIFT_ERROR_DEFAULTS,
        ),
        Quantity(
            "sea_ice_drift_x", "sea_ice_x_displacement", "m",
            "sea-ice displacement along the model grid i (x) axis over [time, time_end]",
            ("sea_ice_x_displacement",),
            (-1.0e6, 1.0e6), vector="sea_ice_drift", component="x", **_DRIFT_ERROR_DEFAULTS,
        ),
        Quantity(
            "sea_ice_drift_y", "sea_ice_y_displacement", "m",
            "sea-ice displacement along the model grid j (y) axis over [time, time_end]",
            ("sea_ice_y_displacement",),
            (-1.0e6, 1.0e6), vector="sea_ice_drift", component="y", **_DRIFT_ERROR_DEFAULTS,
        ),
        Quantity(
            "sea_water_temperature", "sea_water_temperature", "degC",
            "in-situ sea-water temperature",
            ("sea_water_temperature",),
            (-2.5, 40.0), surface=False, **_PROFILE_TEMPERATURE_ERROR_DEFAULTS,
        ),
        Quantity(
            "sea_water_salinity", "sea_water_practical_salinity", "1",
            "sea-water practical salinity (PSU)",
            ("sea_water_practical_salinity", "sea_water_salinity"),
            (2.0, 41.0), surface=False,
            # instrument 0.01; unresolved variability in the halocline a few hundredths (from
            # memory)
            default_representation_error=0.02, default_error_floor=0.003,
        ),
        # its own quantity, never averaged with in-situ temperature: the two differ by about
        # 0.1 K at 2000 dbar and 0.3 K at 4000 dbar ([TEOS10], from memory), more than the
        # error of a profile; readers do not convert one into the other
        Quantity(
            "sea_water_potential_temperature", "sea_water_potential_temperature", "degC",
            "sea-water potential temperature (reference pressure 0 dbar)",
            ("sea_water_potential_temperature",),
            (-2.5, 40.0), surface=False, **_PROFILE_TEMPERATURE_ERROR_DEFAULTS,
        ),
    ]
}

#: share of a file's values (or raw errors) of a quantity beyond its physical range above which
#: the file gets a warning that its units or scale may be wrong: the ranges are generous, so a
#: sound product has only rare glitches beyond them, while a wrong unit (percent declared as
#: "1", centimetres as "m") puts a large part of the values there (common practice)
SUSPICIOUS_OUT_OF_RANGE_SHARE = 0.10

#: the quantity names in declaration order; a name's position is its code in the group keys
QUANTITY_NAMES: tuple = tuple(QUANTITIES)

#: the sea surface temperature types, one quantity each (CF standard names; GDS 2.0 SSTdepth
#: and SSTblend are ``sea_surface_temperature``)
SST_QUANTITY_NAMES: tuple = ("sea_surface_skin_temperature", "sea_surface_subskin_temperature",
                             "sea_surface_foundation_temperature", "sea_surface_temperature")

#: every CF standard name read as one of the SST types
SST_STANDARD_NAMES: tuple = tuple(n for q in SST_QUANTITY_NAMES
                                  for n in QUANTITIES[q].accepted_standard_names)


def get_quantity(name: str) -> Quantity:
    """Return the :class:`Quantity` called ``name``; raise KeyError listing the known names."""
    try:
        return QUANTITIES[name]
    except KeyError:
        raise KeyError(
            f"unknown quantity '{name}'; known quantities: {', '.join(QUANTITIES)}"
        ) from None


def quantity_for_standard_name(standard_name: str) -> Quantity | None:
    """Return the quantity that accepts CF ``standard_name``, or None."""
    for q in QUANTITIES.values():
        if standard_name in q.accepted_standard_names:
            return q
    return None
