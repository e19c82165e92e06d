"""The quantity vocabulary: CF standard names and units, and the averaging each declares."""

from __future__ import annotations

import pytest
from cf_xarray.units import units as cf_units

from obsprep.model.quantities import AVERAGING_SPACES, QUANTITIES, Quantity


def test_every_quantity_declares_an_implemented_averaging_space():
    assert {q.averaging for q in QUANTITIES.values()} <= set(AVERAGING_SPACES)


def test_an_averaging_space_the_superobs_stage_lacks_is_refused_at_declaration():
    with pytest.raises(ValueError, match="averaging 'log10'"):
        Quantity("mass_concentration_of_chlorophyll_a_in_sea_water",
                 "mass_concentration_of_chlorophyll_a_in_sea_water", "mg m-3", "chlorophyll-a",
                 averaging="log10")


@pytest.mark.parametrize("quantity", list(QUANTITIES.values()), ids=list(QUANTITIES))
def test_canonical_units_parse_as_udunits_strings(quantity):
    # reference: the CF/udunits unit registry of cf_xarray (pint)
    cf_units.Quantity(1.0, quantity.units)
