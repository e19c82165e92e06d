"""The README's reference lists hold what the declarations say: the quantities and their
built-in valid ranges (obsprep/model/quantities.py), the SST types, the default flag meanings
and flags of the readers' options (and any DEFAULT_REJECT* constant of a reader module), and
the signs of model output (obsprep/readers/model_output.py)."""

from __future__ import annotations

import dataclasses
import re
from pathlib import Path

import pytest

from obsprep.model.quantities import QUANTITIES
from obsprep.readers import reference, registered_readers
from obsprep.readers.model_output import ENSEMBLE_DIMENSION_NAMES, MODEL_STANDARD_NAMES

README = Path(__file__).parents[2] / "README.md"


def test_readme_blocks_are_what_the_declarations_generate():
    text = README.read_text()
    blocks = reference.generated_blocks(text)
    assert set(blocks) == set(reference.GENERATED)  # every block has its place in the README
    for name, generate in reference.GENERATED.items():
        assert blocks[name] == generate() + "\n", (
            f"README block '{name}' is out of date: run python -m obsprep.readers.reference "
            "README.md")


def _rows(block):
    return [[cell.strip() for cell in line.strip("|").split("|")]
            for line in block.splitlines() if line.startswith("| ") and "---" not in line][1:]


def test_quantity_rows_carry_each_declared_range_and_standard_name():
    rows = {r[0].strip("`"): r for r in _rows(reference.generated_blocks(README.read_text())
                                              ["quantities"])}
    assert list(rows) == list(QUANTITIES)
    for name, q in QUANTITIES.items():
        low, high = (float(x) for x in re.match(r"\[(\S+), (\S+)\]", rows[name][5]).groups())
        assert (low, high) == q.valid_range
        assert rows[name][1] == f"`{q.standard_name}`" and rows[name][2] == f"`{q.units}`"
        assert set(re.findall(r"`([^`]+)`", rows[name][4])) == set(q.accepted_standard_names)


def test_sst_types_follow_the_cf_standard_names_read_as_sst():
    # CF standard name table: sea_surface_{skin,subskin,foundation}_temperature, and plain
    # sea_surface_temperature ([GDS2] "SST definitions": SSTdepth, SSTblend)
    types = dict(reference.sst_types())
    assert len(types) == 4
    for kind, name in types.items():
        assert QUANTITIES[name].standard_name == name
        assert name == (f"sea_surface_{kind}_temperature" if kind in ("skin", "subskin", "foundation")
                        else "sea_surface_temperature")


def test_every_default_flag_list_of_a_reader_option_is_listed():
    listed = {(e["where"].split("`")[1], e["meanings"]) for e in reference.flag_defaults()
              if e["where"].startswith("option")}
    found = set()
    for reader in registered_readers().values():
        for field in dataclasses.fields(reader.Options):
            default = field.default
            if any(w in field.name for w in ("reject", "good", "keep")) and isinstance(
                    default, (tuple, frozenset)) and default:
                found.add((field.name, tuple(sorted(default)) if isinstance(default, frozenset)
                           else tuple(default)))
    assert found and listed == found
    assert ("reject_l2p_flags", ("land", "ice", "lake", "river")) in listed


def test_a_new_default_reject_constant_in_a_reader_module_is_listed(monkeypatch):
    from obsprep.readers.products import ice_concentration

    monkeypatch.setattr(ice_concentration, "DEFAULT_REJECT_EXAMPLE_MEANINGS",
                        ("coast", "lake_x"), raising=False)
    table = reference.flag_meanings_table()
    assert ("| `obsprep.readers.products.ice_concentration.DEFAULT_REJECT_EXAMPLE_MEANINGS` "
            "| rejects these | `coast`, `lake_x` |") in table


def test_model_output_signs_list_names_the_declared_signs():
    text = reference.model_output_signs_list()
    for name in ENSEMBLE_DIMENSION_NAMES + tuple(MODEL_STANDARD_NAMES):
        assert f"`{name}`" in text


def test_rewrite_fills_the_blocks_and_refuses_a_readme_without_them(tmp_path):
    copy = tmp_path / "README.md"
    stale = re.sub(r"(<!-- generated: quantities -->\n).*?(<!-- end generated)", r"\1\2",
                   README.read_text(), flags=re.DOTALL)
    copy.write_text(stale)
    assert reference.main([str(copy)]) == 0
    assert copy.read_text() == README.read_text()
    with pytest.raises(ValueError, match="quantities"):
        reference.rewrite("no blocks here")
