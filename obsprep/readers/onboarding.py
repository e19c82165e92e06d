"""Onboarding a product no reader claims: its candidate variables, and a reader profile
(``[sources.reader]``, :data:`obsprep.readers.cf.READER_PROFILE_KEYS`) guessed from their
names, units and standard_names, to start from.

The guesses are metadata only and never final: every line of the snippet says what it was
guessed from and is marked ``CHECK``, for a person to confirm against the product's
documentation.  Rules, in order of trust:

1. a CF standard_name a quantity or coordinate accepts (CF standard name table);
2. for coordinates, the CF units of latitude and longitude (CF 1.8 sections 4.1, 4.2: e.g.
   ``degrees_north``), a time unit ``<unit> since <epoch>`` (CF 1.8 section 4.4), a pressure
   in decibar; then common variable names (:data:`COORDINATE_NAMES`);
3. for a quantity, units convertible to its canonical units *and* a name or long_name that
   says what it is (:data:`NAME_HINTS`, common practice);
4. a quantity's error: a variable listed in its ``ancillary_variables`` or named after it with
   an error word, in the same units; its flag: a variable with CF ``flag_meanings`` listed in
   its ``ancillary_variables`` or named after it with a flag word.
"""

from __future__ import annotations

import json
import re
from dataclasses import dataclass

import numpy as np
import xarray as xr

from obsprep.exceptions import InputFileError
from obsprep.model.quantities import QUANTITIES

#: words in a variable's name or long_name that say which quantity it holds (common
#: practice); matched as whole words of the lower-cased name, '_' and '-' read as spaces
NAME_HINTS: dict[str, tuple[str, ...]] = {
    "sea_level_anomaly": ("sla", "ssha", "ssh", "sea level", "sea surface height", "adt"),
    "sea_surface_temperature": ("sst", "sea surface temperature", "surface temperature",
                                "surface temp", "skin temperature", "analysed sst"),
    "sea_ice_concentration": ("sic", "ice conc", "ice concentration", "sea ice concentration",
                              "ice fraction", "ice area fraction", "seaice conc"),
    "sea_ice_drift_east": ("eastward drift", "drift east", "u drift", "dx east"),
    "sea_ice_drift_north": ("northward drift", "drift north", "v drift", "dy north"),
    "sea_ice_drift_x": ("dx", "drift x", "x displacement"),
    "sea_ice_drift_y": ("dy", "drift y", "y displacement"),
    "sea_water_temperature": ("temp", "temperature", "sea water temperature", "t"),
    "sea_water_salinity": ("psal", "sal", "salinity", "practical salinity", "s"),
}
#: words that make a variable an error (uncertainty) of another (common practice)
ERROR_WORDS = ("err", "error", "uncertainty", "std", "sd", "sigma", "stddev", "stdev",
               "standard error", "standard deviation")
#: words that make a variable a quality flag of another (common practice)
FLAG_WORDS = ("qc", "flag", "flags", "quality", "status", "mask")
#: common names of coordinates (lower case), after the standard_name and units rules
COORDINATE_NAMES = {
    "latitude": ("lat", "latitude", "nav_lat"),
    "longitude": ("lon", "long", "longitude", "nav_lon"),
    "time": ("time", "juld", "t", "obs_time", "date_time"),
    "depth": ("depth", "z", "deph"),
    "sea_water_pressure": ("pres", "pressure", "p"),
}
#: CF units of latitude and longitude (CF 1.8 sections 4.1 and 4.2)
LATITUDE_UNITS = ("degrees_north", "degree_north", "degree_n", "degrees_n", "degreen", "degreesn")
LONGITUDE_UNITS = ("degrees_east", "degree_east", "degree_e", "degrees_e", "degreee", "degreese")
#: units of sea pressure (decibar, common practice for profiles)
PRESSURE_UNITS = ("dbar", "decibar", "decibars", "dbars")


#: endings of a guess's reason that call for units set in [sources.reader.attributes]
_FIX_UNITS = ("no units in the file", "fix them")


@dataclass(frozen=True)
class Candidate:
    """One variable of the file as onboarding shows it."""

    name: str
    units: str
    long_name: str
    dimensions: tuple
    standard_name: str
    flag_meanings: str = ""
    shape: tuple = ()


@dataclass(frozen=True)
class Guess:
    """A profile role and the variable guessed for it; ``why`` says from what."""

    role: str
    variable: str | None
    why: str


def candidate_variables(ds: xr.Dataset) -> list[Candidate]:
    """The numeric and time variables of ``ds`` with at least one dimension or a standard_name
    (string and character variables are labels, not candidates), in file order."""
    candidates = []
    for name, variable in ds.variables.items():
        if variable.dtype.kind not in "iufcmM":
            continue
        attrs = variable.attrs
        if not variable.dims and "standard_name" not in attrs:
            continue
        candidates.append(Candidate(
            name=str(name), units=str(attrs.get("units", "")).strip(),
            long_name=str(attrs.get("long_name", "")).strip(), dimensions=tuple(variable.dims),
            standard_name=str(attrs.get("standard_name", "")).strip(),
            flag_meanings=str(attrs.get("flag_meanings", "")).strip(),
            shape=tuple(int(n) for n in variable.shape)))
    return candidates


def _words(text: str) -> str:
    """Lower case, separators as single spaces, padded, for whole-word matching."""
    return " " + " ".join(re.split(r"[\s_\-./]+", text.lower())).strip() + " "


def _says(candidate: Candidate, hints) -> str | None:
    """The first hint found as whole words in the candidate's name or long_name."""
    for text in (candidate.name, candidate.long_name):
        words = _words(text)
        for hint in hints:
            if _words(hint) in words:
                return hint
    return None


def _units_fit(units: str, canonical: str) -> bool:
    from obsprep.readers.cf import convert_units

    try:
        convert_units(np.zeros(1), units, canonical, "", difference=True)
    except InputFileError:
        return False
    return True


def _coordinate_guesses(candidates: list[Candidate], data_dimensions=()) -> dict[str, Guess]:
    """Coordinate roles: by standard_name, then by units, then by common names.  Among several
    of one rule (1 Hz and 20 Hz times, a reference time and per-pixel times), the one whose
    dimensions are all the data's (``data_dimensions``), then the one with most dimensions."""
    data_dimensions = set(data_dimensions)

    def units_in(accepted):
        return lambda c: f"units {c.units}" if c.units.lower() in accepted else None

    rules = {
        "latitude": units_in(LATITUDE_UNITS),
        "longitude": units_in(LONGITUDE_UNITS),
        "time": lambda c: f"units '{c.units}'" if " since " in f" {c.units.lower()} " else None,
        "sea_water_pressure": units_in(PRESSURE_UNITS),
        "depth": lambda c: None,  # metres alone do not make a depth: standard_name or name
        "projection_x_coordinate": lambda c: None,  # by standard_name only
        "projection_y_coordinate": lambda c: None,
    }

    def best(matches):
        matches = sorted(matches, key=lambda c: (
            bool(data_dimensions) and not set(c.dimensions) <= data_dimensions,
            -len(c.dimensions)))
        return matches[0] if matches else None

    guesses = {}
    for role, rule in rules.items():
        levels = (
            ([c for c in candidates if c.standard_name == role], lambda c: f"standard_name {role}"),
            ([c for c in candidates if rule(c) is not None], rule),
            ([c for c in candidates if c.name.lower() in COORDINATE_NAMES.get(role, ())],
             lambda c: f"name '{c.name}'"),
        )
        for matches, why in levels:
            chosen = best(matches)
            if chosen is not None:
                guesses[role] = Guess(role, chosen.name, str(why(chosen)))
                break
    return guesses


def _is_profile_file(candidates, coordinates) -> bool:
    """True when a vertical coordinate (depth or pressure) varies along a dimension of more
    than one level (a profile), so that temperature is sea-water, not surface, temperature."""
    vertical = [coordinates[r].variable for r in ("depth", "sea_water_pressure")
                if r in coordinates]
    return any(c.name in vertical and any(n > 1 for n in c.shape) for c in candidates)


def _name_score(candidate: Candidate, quantity) -> tuple[int, str] | None:
    """How surely the candidate's name says it holds ``quantity``: 3 named exactly after the
    quantity or one of its standard names, 2 a hint in the name, 1 a hint in the long_name
    only; None when neither says so, or when it reads as an error or a flag."""
    if _says(candidate, ERROR_WORDS + FLAG_WORDS) is not None:
        return None
    if candidate.name.lower() in (quantity.name, *quantity.accepted_standard_names):
        return 3, f"name '{candidate.name}'"
    hints = NAME_HINTS.get(quantity.name, ())
    in_name = _says(Candidate(candidate.name, "", "", (), ""), hints)
    if in_name is not None:
        return 2, f"name '{in_name}'"
    in_long_name = _says(candidate, hints)
    return (1, f"long_name '{in_long_name}'") if in_long_name is not None else None


def _quantity_guesses(candidates, coordinates) -> dict[str, Guess]:
    used = {g.variable for g in coordinates.values()}
    profile_file = _is_profile_file(candidates, coordinates)
    # surface quantities in surface files, profile quantities in profile files: a surface
    # file's "sea_water_temperature at 1 m" is its SST; other quantities only when none fits
    fitting = [q for q in QUANTITIES.values() if q.surface != profile_file]
    others = [q for q in QUANTITIES.values() if q.surface == profile_file]
    guesses = _by_standard_name(fitting, candidates, used)
    for quantity in fitting:
        if quantity.name in guesses:
            continue
        scored = []
        for index, c in enumerate(candidates):
            if c.name in used or c.flag_meanings or not c.dimensions:
                continue
            score = _name_score(c, quantity)
            if score is None:
                continue
            fits = not c.units or _units_fit(c.units, quantity.units)
            if not fits and score[0] < 2:
                continue  # units of something else, and only the long_name says otherwise
            if not c.units:
                why = score[1] + ", but " + _FIX_UNITS[0]
            elif fits:
                why = f"{score[1]} and units {c.units}"
            else:
                why = f"{score[1]}, but units '{c.units}' are not {quantity.units}: " + _FIX_UNITS[1]
            scored.append((not fits, -score[0], index, Guess(quantity.name, c.name, why)))
        if scored:
            best = min(scored, key=lambda item: item[:3])[3]
            guesses[quantity.name] = best
            used.add(best.variable)
    if not guesses:
        guesses = _by_standard_name(others, candidates, used)
    return guesses


def _by_standard_name(quantities, candidates, used: set) -> dict:
    """{quantity: Guess} of the first unused candidate carrying one of each quantity's
    accepted standard names (``used`` is updated)."""
    guesses = {}
    for quantity in quantities:
        for c in candidates:
            if c.name not in used and c.standard_name in quantity.accepted_standard_names:
                guesses[quantity.name] = Guess(quantity.name, c.name, f"standard_name {c.standard_name}")
                used.add(c.name)
                break
    return guesses


def _ancillary_guesses(ds, candidates, quantities) -> dict[str, Guess]:
    by_name = {c.name: c for c in candidates}
    guesses = {}
    taken = {g.variable for g in quantities.values()}
    for quantity_name, data_guess in quantities.items():
        data = by_name[data_guess.variable]
        listed = str(ds[data.name].attrs.get("ancillary_variables", "")).split()
        related = [by_name[n] for n in listed if n in by_name]
        # named after the data: its whole name, or its first word ("sst_err" of "sst_foo")
        first_word = _words(data.name).split()[0] if _words(data.name).strip() else ""
        named_after = [c for c in candidates if c.name != data.name
                       and (_words(data.name) in _words(c.name)
                            or _words(c.name).startswith(f" {first_word} "))]
        for kind, words in (("error", ERROR_WORDS), ("flag", FLAG_WORDS)):
            role = f"{quantity_name}_{kind}"
            for c in related + named_after:
                if c.name in taken or set(c.dimensions) - set(data.dimensions):
                    continue
                if kind == "error":
                    # same units as the data, or its quantity's where the data's are broken
                    fits = ((not c.flag_meanings or _says(c, words)) and c.units
                            and (_units_fit(c.units, data.units or "?")
                                 or _units_fit(c.units, QUANTITIES[quantity_name].units))
                            and (c in related or _says(c, words)))
                    why = f"units {c.units}"
                else:
                    fits = (bool(c.flag_meanings) and _says(c, ERROR_WORDS) is None
                            and (c in related or _says(c, words)))
                    meanings = c.flag_meanings.split()
                    why = "flag_meanings " + " ".join(meanings[:4]) + (
                        " ..." if len(meanings) > 4 else "") + "; kept: good_flag_meanings"
                if fits:
                    source = (f"in {data.name}'s ancillary_variables" if c in related
                              else f"named after {data.name}")
                    guesses[role] = Guess(role, c.name, f"{source}, {why}")
                    taken.add(c.name)
                    break
    return guesses


def guess_profile_roles(ds: xr.Dataset) -> list[Guess]:
    """Profile roles guessed for ``ds``: coordinates, then quantities, then their errors and
    flags (see the module docstring for the rules).  Roles of the coordinates a reader needs
    that nothing fits come with ``variable`` None."""
    candidates = candidate_variables(ds)
    coordinates = _coordinate_guesses(candidates)
    quantities = _quantity_guesses(candidates, coordinates)
    if quantities:  # again, preferring coordinates on the dimensions of the data
        by_name = {c.name: c for c in candidates}
        first = by_name[next(iter(quantities.values())).variable]
        coordinates = _coordinate_guesses(candidates, first.dimensions)
    ancillary = _ancillary_guesses(ds, candidates, quantities)
    guesses = list(quantities.values()) + list(ancillary.values())
    projected = all(r in coordinates for r in ("projection_x_coordinate",
                                               "projection_y_coordinate"))
    horizontal = ("latitude", "longitude")
    if projected and not any(r in coordinates for r in horizontal):
        # a projected grid: positions from x, y and the grid_mapping (CF 1.8 section 5.6)
        horizontal = ("projection_x_coordinate", "projection_y_coordinate")
    for role in (*horizontal, "time"):
        guesses.append(coordinates.get(role, Guess(role, None, "no candidate found")))
    guesses.extend(coordinates[r] for r in ("depth", "sea_water_pressure") if r in coordinates)
    return guesses


def profile_snippet(ds: xr.Dataset, path) -> str:
    """A ``[sources.reader]`` profile for ``ds`` (opened from ``path``) as TOML text, each
    guessed line marked ``CHECK`` with what it was guessed from; roles with no guess are
    commented out.  Pasted under a ``[[sources]]`` entry of a configuration it applies to
    that source; it also parses alone (``tomllib``)."""
    guesses = guess_profile_roles(ds)
    lines = [f"# reader profile guessed by obsprep inspect from the metadata of {path}",
             "# CHECK every line against the product's documentation before use",
             "[sources.reader.variables]"]
    width = max((len(f"{g.role} = {json.dumps(g.variable)}") for g in guesses), default=0)
    if not any(g.variable for g in guesses if g.role in QUANTITIES):
        lines.append("# <quantity> = \"?\"  # CHECK: no variable looks like one of "
                     + ", ".join(QUANTITIES))
    for g in guesses:
        if g.variable is None:
            lines.append(f"# {g.role} = \"?\"  # CHECK: {g.why}")
        else:
            line = f"{g.role} = {json.dumps(g.variable)}"
            lines.append(f"{line:<{width}}  # CHECK: {g.why}")
    units_to_fix = [g for g in guesses if g.variable and g.why.endswith(_FIX_UNITS)]
    if units_to_fix:
        lines.append("[sources.reader.attributes]")
        lines.extend(f"# {json.dumps(g.variable)} = {{ units = \"?\" }}  # CHECK: {g.why}"
                     for g in units_to_fix)
    return "\n".join(lines) + "\n"
