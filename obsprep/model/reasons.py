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
    # format-specific reader verdicts (issue 3)
    "quality_level": "GHRSST quality_level below the source's minimum (GDS 2.0: 0 no data .. 5 best)",
    "missing_bias": "bias correction requested but the file's sses_bias is fill",
    "l2p_flag_land": "GHRSST l2p_flags bit 'land' set",
    "l2p_flag_ice": "GHRSST l2p_flags bit 'ice' set",
    "l2p_flag_lake": "GHRSST l2p_flags bit 'lake' set",
    "l2p_flag_river": "GHRSST l2p_flags bit 'river' set",
    "l2p_flag_other": "another GHRSST l2p_flags bit named in the source's reject list set",
    "missing_correction": "a correction named in the configuration is fill for this value",
    "argo_qc_flag": "Argo level QC flag (of the value or its pressure) not in the kept set",
    "position_qc": "Argo POSITION_QC not in the kept set",
    "time_qc": "Argo JULD_QC not in the kept set",
    # the quality-control checks register theirs (obsprep.qc.registry)
}


def register_reason(code: str, description: str) -> None:
    """Add a rejection reason (used by QC modules that define their own tests)."""
    if code in REASONS and REASONS[code] != description:
        raise ValueError(f"rejection reason '{code}' is already registered")
    REASONS[code] = description
