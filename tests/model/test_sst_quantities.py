"""The SST types as quantities (the README's quantity table is generated from the declarations,
tests/readers/test_reference_lists.py)."""

from __future__ import annotations

from obsprep.model.quantities import (
    QUANTITIES,
    SST_QUANTITY_NAMES,
    SST_STANDARD_NAMES,
    quantity_for_standard_name,
)


def test_each_sst_type_is_its_own_quantity_under_its_cf_standard_name():
    # CF standard names of the GDS 2.0 SST types ([GDS2] "SST definitions"; [CF])
    for name in ("sea_surface_skin_temperature", "sea_surface_subskin_temperature",
                 "sea_surface_foundation_temperature", "sea_surface_temperature"):
        assert name in SST_QUANTITY_NAMES
        assert quantity_for_standard_name(name).name == name
        assert QUANTITIES[name].standard_name == name and QUANTITIES[name].units == "degC"
    # no standard name is read as two types
    assert len(set(SST_STANDARD_NAMES)) == len(SST_STANDARD_NAMES) == len(SST_QUANTITY_NAMES)
