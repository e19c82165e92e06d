"""The SST types as quantities, and the README's quantity table kept equal to the declarations."""

from __future__ import annotations

from pathlib import Path

from obsprep.model.quantities import (
    QUANTITIES,
    SST_QUANTITY_NAMES,
    SST_STANDARD_NAMES,
    quantity_for_standard_name,
)

README = Path(__file__).parents[2] / "README.md"


def test_each_sst_type_is_its_own_quantity_under_its_cf_standard_name():
    # CF standard names of the GDS 2.0 SST types ([GDS2] "SST definitions"; [CF])
    for name in ("sea_surface_skin_temperature", "sea_surface_subskin_temperature",
                 "sea_surface_foundation_temperature", "sea_surface_temperature"):
        assert name in SST_QUANTITY_NAMES
        assert quantity_for_standard_name(name).name == name
        assert QUANTITIES[name].standard_name == name and QUANTITIES[name].units == "degC"
    # no standard name is read as two types
    assert len(set(SST_STANDARD_NAMES)) == len(SST_STANDARD_NAMES) == len(SST_QUANTITY_NAMES)


def test_readme_lists_every_quantity_with_its_standard_name_units_and_range():
    section = README.read_text().split("## Quantities", 1)[1].split("\n## ", 1)[0]
    rows = {}
    for line in section.splitlines():
        if line.startswith("| `"):
            cells = [c.strip() for c in line.strip("|").split("|")]
            rows[cells[0].strip("`")] = cells[1:]
    assert set(rows) == set(QUANTITIES)
    for name, q in QUANTITIES.items():
        low, high = q.valid_range
        assert rows[name] == [f"`{q.standard_name}`", q.units, f"{low:g} .. {high:g}",
                              "surface" if q.surface else "profile"], name
