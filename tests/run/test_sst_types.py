"""SST types (skin, subskin, foundation, at a depth) are averaged apart unless
``superobs.merge_quantities`` merges them (GDS 2.0 "SST definitions" [GDS2]: the types differ by
up to a few kelvin by day)."""

from __future__ import annotations

import numpy as np
import pytest
from sample_files import GDS2_EPOCH, write_gds2

from obsprep.exceptions import ConfigError
from obsprep.run.build import build
from obsprep.settings.config import load_config

REFERENCE = int((np.datetime64("2026-11-19T12:00:00") - GDS2_EPOCH) // np.timedelta64(1, "s"))


def _config(tmp_path, merge=None):
    skin = write_gds2(tmp_path / "skin.nc", np.full((2, 2), 290.0), reference_seconds=REFERENCE,
                      sst_standard_name="sea_surface_skin_temperature")
    fnd = write_gds2(tmp_path / "fnd.nc", np.full((2, 2), 289.0), reference_seconds=REFERENCE,
                     sst_standard_name="sea_surface_foundation_temperature")
    superobs = {"merge_sensors": {"sst": ["ir", "analysis"]}}
    if merge is not None:
        superobs["merge_quantities"] = merge
    return {
        "window": {"analysis_time": "2026-11-20T00:00:00", "start_hours": -24.0, "end_hours": 0.0},
        # one cell holding every pixel (-60..-59 N, 350..351 E)
        "grid": {"type": "regular", "lon_min": -10.5, "lat_min": -60.5, "dlon": 2.0, "dlat": 2.0,
                 "nlon": 1, "nlat": 1},
        "sources": [{"sensor": "ir", "paths": [skin], "error": {"rule": "constant", "value": 0.5}},
                    {"sensor": "analysis", "paths": [fnd], "error": {"rule": "constant", "value": 0.5}}],
        "superobs": superobs,
        "output": {"directory": str(tmp_path / "out")},
    }


def test_types_are_never_averaged_together_by_default(tmp_path):
    superobs = build(_config(tmp_path)).superobs
    by_quantity = superobs.set_index("quantity")
    assert sorted(by_quantity.index) == ["sea_surface_foundation_temperature",
                                         "sea_surface_skin_temperature"]
    assert by_quantity.loc["sea_surface_skin_temperature", "value"] == pytest.approx(290.0 - 273.15, abs=1e-6)
    assert by_quantity.loc["sea_surface_foundation_temperature", "value"] == pytest.approx(289.0 - 273.15, abs=1e-6)


def test_merged_types_are_averaged_under_the_output_quantity(tmp_path):
    merge = {"sea_surface_temperature": ["sea_surface_skin_temperature",
                                         "sea_surface_foundation_temperature"]}
    superobs = build(_config(tmp_path, merge)).superobs
    (row,) = superobs.itertuples()
    assert row.quantity == "sea_surface_temperature" and row.count == 8
    # equal weights: the mean of four 290 K and four 289 K values
    assert row.value == pytest.approx(289.5 - 273.15, abs=1e-6)


@pytest.mark.parametrize("merge, message", [
    ({"sea_surface_temperature": ["sea_level_anomaly"]}, "cannot be averaged"),
    ({"sea_surface_temperature": ["sea_water_temperature"]}, "profile"),
    ({"sea_surface_temperature": ["sea_surface_skin"]}, "unknown quantity"),
    ({"sea_surface_temperature": ["sea_surface_skin_temperature"],
      "sea_surface_foundation_temperature": ["sea_surface_skin_temperature"]}, "also merged"),
    ({"sea_surface_temperature": ["sea_surface_skin_temperature"],
      "sea_surface_foundation_temperature": ["sea_surface_temperature"]}, "itself merged"),
])
def test_merge_quantities_mistakes_name_the_key(tmp_path, merge, message):
    with pytest.raises(ConfigError, match=message) as info:
        load_config(_config(tmp_path, merge))
    assert "superobs.merge_quantities" in str(info.value)
