"""Super-observations: mergeable per-group sums, their errors, and mean positions.

- :mod:`.accumulate`: :class:`Accumulator` (build from raw observations, merge, finalize).
- :mod:`.errors`: errors of equally and inverse-variance weighted means with a common error
  correlation, quadrature sums, floors.
- :mod:`.spherical`: unit vectors and mean positions on the sphere.
"""

from obsprep.superobs.accumulate import (
    MODES,
    OUTPUT_COLUMNS,
    REPRESENTATIVE_FIELDS,
    STATE_FIELDS,
    Accumulator,
    merge_accumulators,
)
from obsprep.superobs.errors import apply_floor, combine_in_quadrature, error_of_mean, error_of_weighted_mean
from obsprep.superobs.spherical import mean_position, unit_vectors

__all__ = [
    "Accumulator", "merge_accumulators", "MODES", "OUTPUT_COLUMNS", "STATE_FIELDS",
    "REPRESENTATIVE_FIELDS", "error_of_mean", "error_of_weighted_mean", "combine_in_quadrature",
    "apply_floor", "mean_position", "unit_vectors",
]
