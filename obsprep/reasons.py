"""Rejection reasons: every raw observation that does not reach a super-observation is counted
under exactly one of these codes in the ledger (the first test that rejects it wins)."""

from __future__ import annotations

REASONS: dict[str, str] = {
    "missing_value": "value is fill/NaN in the file",
    "provider_flag": "rejected by the data provider's quality flag",
    "missing_error": "no usable error (NaN or not positive) after the error rule",
    "bad_position": "latitude/longitude missing or impossible",
    "bad_time": "time missing or impossible",
    "outside_window": "time outside the assimilation window",
    "out_of_range": "value outside the physically possible range",
    "outside_grid": "position outside the model grid",
    "land": "position on a land cell of the model grid",
    "below_bathymetry": "deeper than the model bathymetry",
    "below_deepest_layer": "deeper than the deepest model layer interface",
    "vector_incomplete": "the other component of the vector was missing or rejected",
    "quantity_not_selected": "quantity not selected for this source in the configuration",
}


def register_reason(code: str, description: str) -> None:
    """Add a rejection reason (used by QC modules that define their own tests)."""
    if code in REASONS and REASONS[code] != description:
        raise ValueError(f"rejection reason '{code}' is already registered")
    REASONS[code] = description
