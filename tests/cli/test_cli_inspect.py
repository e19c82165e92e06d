"""``obsprep inspect --kinds``: the reader list comes from the readers' own declarations."""

from __future__ import annotations

import dataclasses

import numpy as np
from click.testing import CliRunner

from obsprep.cli.main import cli
from obsprep.readers import registered_readers


def test_kinds_lists_every_registered_reader_with_its_declared_options():
    result = CliRunner().invoke(cli, ["inspect", "--kinds"])
    assert result.exit_code == 0, result.output
    lines = result.output.splitlines()
    kinds = [line.split(":")[0] for line in lines if not line.startswith(" ")]
    assert kinds == list(registered_readers())  # guessing order
    for kind, reader in registered_readers().items():
        block = lines[lines.index(f"{kind}: {reader.description}") + 1:]
        listed = []
        for line in block:
            if not line.startswith("  option "):
                break
            listed.append(line[len("  option "):].split(":")[0])
        # reference: the fields of the reader's own options dataclass
        assert listed == [f.name for f in dataclasses.fields(reader.Options)], kind


def test_inspect_without_files_or_kinds_is_a_usage_error():
    result = CliRunner().invoke(cli, ["inspect"])
    assert result.exit_code == 2
    assert "--kinds" in result.output


# --------------------------------------------------------------------------------------------
# onboarding a file no reader claims, model output, warnings
# --------------------------------------------------------------------------------------------

SNIPPET_START = "# reader profile guessed by obsprep inspect"


def snippet_of(output):
    """The profile snippet inspect printed: from its first comment to the next indented line."""
    lines = output.splitlines()
    start = next(i for i, line in enumerate(lines) if line.startswith(SNIPPET_START))
    end = next(i for i in range(start, len(lines)) if lines[i].startswith("  "))
    return "\n".join(lines[start:end]) + "\n"


def test_inspect_of_an_unclaimed_file_lists_candidates_and_a_profile_that_reads_it(tmp_path):
    import tomllib

    from onboarding_files import unclaimed_grid
    from sample_files import to_toml

    path = unclaimed_grid(tmp_path / "new_product.nc")
    result = CliRunner().invoke(cli, ["inspect", path])
    assert result.exit_code == 1  # not read as given
    assert "no reader recognises" in result.stderr
    out = result.stdout
    assert "no reader claims this file; candidate variables" in out
    # every candidate with name, units, dimensions, standard_name and long_name, as written
    assert "    surface_temp [degree_Celsius] (t, row, col) -: sea surface temperature" in out
    assert "    y_lat [degrees_north] (row) -: -" in out
    assert "surface_temp_qc [-] (t, row, col) -: - (flag_meanings: good suspect bad)" in out
    assert "    wind [m s-1] (t, row, col) -: wind speed" in out
    snippet = snippet_of(out)
    profile = tomllib.loads(snippet)["sources"]["reader"]  # the snippet is TOML
    assert profile["variables"]["sea_surface_temperature"] == "surface_temp"
    assert "  with this profile:\n    kind: sst_grid" in out

    # pasted under a source of a configuration, the file reads through that source
    cfg = {"window": {"analysis_time": "2022-03-14T00:00:00"},
           "grid": {"type": "regular", "lon_min": -1.0, "lat_min": 49.0, "dlon": 1.0,
                    "dlat": 1.0, "nlon": 5, "nlat": 4},
           "sources": [{"sensor": "new_sst", "paths": ["new_product*.nc"], "kind": "auto",
                        "error": {"rule": "file"}}]}
    config = tmp_path / "nightly.toml"
    config.write_text(to_toml(cfg) + snippet)
    read_back = CliRunner().invoke(cli, ["inspect", path, "--config", str(config),
                                         "--source", "new_sst"])
    assert read_back.exit_code == 0, read_back.output
    assert "kind: sst_grid" in read_back.stdout
    # 6 cells: one fill, flags 'suspect' and 'bad' (not a good meaning): 3 valid
    assert "rows: 6, valid 3" in read_back.stdout
    assert SNIPPET_START not in read_back.stdout


def test_inspect_of_model_output_says_not_observations_in_one_line(tmp_path):
    from onboarding_files import sst_grid_with

    path = sst_grid_with(tmp_path / "ens.nc", dims={"member": 3})
    for extra in ([], ["--kind", "sst_grid"]):
        result = CliRunner().invoke(cli, ["inspect", path, *extra])
        assert result.exit_code == 1
        errors = result.stderr.splitlines()
        assert errors[0].startswith(f"error: {path}: not observations: dimension 'member'")
        assert SNIPPET_START not in result.stdout  # no profile offered for model output


def test_inspect_shows_the_files_warnings(tmp_path):
    from sample_files import sst_grid_file

    from obsprep.cli.inspect import describe_table
    from obsprep.model.table import add_warning
    from obsprep.readers import read

    # SST in kelvin declared as degC: every value beyond the physical range, so the file
    # gets the units warning of the range check (obsprep.qc.basic)
    path = sst_grid_file(tmp_path / "k.nc", np.full(6, 290.0), units="degC")
    result = CliRunner().invoke(cli, ["inspect", path])
    assert result.exit_code == 0, result.output
    assert ("  warning: more than 10% of the values of sea_surface_temperature are outside "
            "its physical range") in result.stdout
    # a reader's own warning (obsprep.model.table.add_warning) is shown too, once
    table = read(sst_grid_file(tmp_path / "c.nc", np.full(6, 290.0)))
    assert not any(line.startswith("  warning:") for line in describe_table("c.nc", table))
    add_warning(table, "flag_masks and flag_meanings differ in length; used 3 pairs")
    add_warning(table, "flag_masks and flag_meanings differ in length; used 3 pairs")
    warned = [line for line in describe_table("c.nc", table) if line.startswith("  warning:")]
    assert warned == ["  warning: flag_masks and flag_meanings differ in length; used 3 pairs"]
