"""Rejection reasons: every raw observation that does not reach a super-observation is counted
under exactly one of these codes in the ledger (the first test that rejects it wins)."""

from __future__ import annotations

REASONS: dict[str, str] = {
    "missing_value": "value is fill/NaN in the file",
    "provider_flag": "rejected by the data provider's quality flag",
    "missing_error": "no raw error: NaN (fill in the file, or no value from the error rule)",
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
    # readers and quality-control checks register their own (register_reason)
}


#: the stages in the order their reasons are listed (ledger columns follow this order):
#: these common ones, the readers', the quality-control checks', the raw-error rule's
STAGES = ("common", "reader", "qc", "errors")
_STAGE_OF = {code: "common" for code in REASONS}


def register_reason(code: str, description: str, stage: str = "qc") -> None:
    """Add a rejection reason (used by readers and QC modules that define their own tests).

    ``REASONS`` stays ordered by stage (:data:`STAGES`), then by registration, so a reader's
    reasons come after the common ones and before the quality-control ones whatever the
    order of imports between stages."""
    if stage not in STAGES:
        raise ValueError(f"unknown stage '{stage}' of rejection reason '{code}'; known: {STAGES}")
    if code in REASONS:
        if REASONS[code] != description or _STAGE_OF[code] != stage:
            raise ValueError(f"rejection reason '{code}' is already registered")
        return
    _STAGE_OF[code] = stage
    items = list(REASONS.items()) + [(code, description)]
    REASONS.clear()  # in place: modules hold this dict by name
    for stage_name in STAGES:
        REASONS.update((c, d) for c, d in items if _STAGE_OF[c] == stage_name)
