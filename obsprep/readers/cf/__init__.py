"""The shared CF decoding layer: every reader finds and decodes its variables through here.

A reader finds its data variable by ``standard_name``, asks this module for positions, times,
errors and flags, and hands plain numpy arrays to :func:`observation_table`.  Nothing in here
knows about a particular product: only the CF conventions (packing, ``standard_name``,
``coordinates``, ``ancillary_variables``, flags, ``grid_mapping``, ``bounds``, time units and
calendars) as described in ``docs/file-conventions.md``.

Units are converted with the CF/udunits pint registry of :mod:`cf_xarray.units`; times with
:mod:`cftime`; map projections with :mod:`pyproj` (PROJ).

One module per topic: :mod:`~obsprep.readers.cf.open`, :mod:`~obsprep.readers.cf.find`,
:mod:`~obsprep.readers.cf.units`, :mod:`~obsprep.readers.cf.time`,
:mod:`~obsprep.readers.cf.flags`, :mod:`~obsprep.readers.cf.valid` (valid ranges, stored
values), :mod:`~obsprep.readers.cf.quirks` (per-file warnings),
:mod:`~obsprep.readers.cf.groups` (netCDF-4 groups),
:mod:`~obsprep.readers.cf.positions`,
:mod:`~obsprep.readers.cf.overrides` (reader profiles), :mod:`~obsprep.readers.cf.options`,
:mod:`~obsprep.readers.cf.classic` (the size a netCDF-3 header implies)
and :mod:`~obsprep.readers.cf.table`; their public names are re-exported here so readers
write ``cf.<name>``.
"""

from __future__ import annotations

from obsprep.readers.cf.find import (  # noqa: F401
    ancillary_variable_names,
    candidate_variables,
    find_coordinate,
    find_coordinates,
    find_flag_variables,
    find_standard_error,
    find_uncertainty_variable,
    find_variable,
    require_variable,
    rows_dimension,
)
from obsprep.readers.cf.flags import (  # noqa: F401
    FlagAttributesMissing,
    flag_meaning_masks,
    good_flag_mask,
    has_flag_attributes,
    is_filter_meaning,
    meaning_key,
    meaning_matches,
    rejected_by_meanings,
    usable_flag_variable,
)
from obsprep.readers.cf.groups import (  # noqa: F401
    group_paths,
    open_group,
    source_path,
)
from obsprep.readers.cf.open import (  # noqa: F401
    check_declared_sizes,
    open_dataset,
    out_of_memory,
    unreadable_data,
)
from obsprep.readers.cf.options import (  # noqa: F401
    DEFAULT_GOOD_FLAG_MEANINGS,
    CfOptions,
    SourceOptions,
    declared_options,
    option,
    option_meanings,
    parse_lowercase_set,
    parse_names,
    parse_positive_seconds,
    parse_string,
    reader_options,
)
from obsprep.readers.cf.overrides import (  # noqa: F401
    READER_PROFILE_KEYS,
    apply_reader_profile,
    reader_profile_roles,
)
from obsprep.readers.cf.positions import (  # noqa: F401
    broadcast_to_variable,
    crs_for_variable,
    horizontal_position,
    lonlat_from_projection,
    wrap_longitude,
)
from obsprep.readers.cf.quirks import (  # noqa: F401
    FileQuirkWarning,
    collecting_file_warnings,
    file_warning,
)
from obsprep.readers.cf.table import (  # noqa: F401
    NOT_IN_TABLE,
    ROW_VARIABLE,
    DecodedVariable,
    decode_data_variable,
    labels_as_strings,
    observation_table,
    platform_attribute,
    require_values,
    variable_units,
)
from obsprep.readers.cf.time import (  # noqa: F401
    add_seconds,
    decode_time,
    decode_time_variable,
    observation_interval,
    observation_time,
    per_vector_interval,
)
from obsprep.readers.cf.units import (  # noqa: F401
    PRACTICAL_SALINITY_UNITS,
    convert_units,
    convertible_units,
    preload,
    values_in_units,
)
from obsprep.readers.cf.valid import (  # noqa: F401
    outside_valid_range,
    stored_values,
    unpacked_valid_bounds,
    valid_bounds,
)

__all__ = [
    "DEFAULT_GOOD_FLAG_MEANINGS",
    "option",
    "parse_string",
    "parse_names",
    "parse_lowercase_set",
    "parse_positive_seconds",
    "SourceOptions",
    "CfOptions",
    "option_meanings",
    "declared_options",
    "reader_options",
    "open_dataset",
    "group_paths",
    "open_group",
    "source_path",
    "unreadable_data",
    "out_of_memory",
    "check_declared_sizes",
    "find_variable",
    "rows_dimension",
    "require_variable",
    "find_coordinates",
    "find_coordinate",
    "ancillary_variable_names",
    "find_standard_error",
    "find_flag_variables",
    "candidate_variables",
    "find_uncertainty_variable",
    "good_flag_mask",
    "flag_meaning_masks",
    "FlagAttributesMissing",
    "has_flag_attributes",
    "is_filter_meaning",
    "meaning_key",
    "meaning_matches",
    "rejected_by_meanings",
    "usable_flag_variable",
    "FileQuirkWarning",
    "collecting_file_warnings",
    "file_warning",
    "outside_valid_range",
    "stored_values",
    "valid_bounds",
    "unpacked_valid_bounds",
    "convertible_units",
    "decode_time",
    "decode_time_variable",
    "add_seconds",
    "observation_time",
    "observation_interval",
    "per_vector_interval",
    "PRACTICAL_SALINITY_UNITS",
    "preload",
    "convert_units",
    "values_in_units",
    "broadcast_to_variable",
    "crs_for_variable",
    "lonlat_from_projection",
    "horizontal_position",
    "wrap_longitude",
    "labels_as_strings",
    "platform_attribute",
    "DecodedVariable",
    "decode_data_variable",
    "require_values",
    "NOT_IN_TABLE",
    "ROW_VARIABLE",
    "observation_table",
    "variable_units",
    "READER_PROFILE_KEYS",
    "reader_profile_roles",
    "apply_reader_profile",
]
