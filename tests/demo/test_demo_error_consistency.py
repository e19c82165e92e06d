"""The demo's super-observation errors against its known truth, with realistic errors.

The demo (obsprep.demo.noise) draws raw errors correlated within each error group (an
altimeter pass, an infrared SST granule) and a sub-cell variability per raw
footprint; its configuration tells the build both (sources' ``correlation``, the "sampling"
representation model, ``layer_value = "fit"`` for the curved thermocline).  If the build's
errors are right, z = (super-observation - truth) / error is N(0, 1) for every quantity: mean
within +-0.1, std within [0.9, 1.1].

Tolerances come from the error groups (cluster-robust standard errors, tests/demo/superobs_z.py):
2 standard errors (about 95 % for a normal sampling distribution; common practice), which must
be below 0.1 for the bounds to mean anything (so the check can fail).
"""

from __future__ import annotations

import pytest
import xarray as xr
from superobs_z import z_statistics

from obsprep.demo import write_demo
from obsprep.run.build import build

QUANTITIES = ["sea_level_anomaly", "sea_surface_temperature", "sea_ice_concentration",
              "sea_ice_drift_x", "sea_ice_drift_y", "sea_water_temperature", "sea_water_salinity"]
MEAN_BOUND, STD_BOUNDS, TOLERANCE_LIMIT = 0.1, (0.9, 1.1), 0.1
STANDARD_ERRORS = 2.0


class TooFewErrorGroups(Exception):
    """The effective count of independent error groups cannot resolve the +-0.1 bounds."""


@pytest.fixture(scope="module")
def superobs(tmp_path_factory):
    paths = write_demo(tmp_path_factory.mktemp("demo_errors"))     # the default demo
    result = build(paths["config"])
    return xr.open_dataset(result.outputs["netcdf"])


@pytest.mark.parametrize("quantity", QUANTITIES)
def test_z_of_superobs_against_truth_is_standard_normal(superobs, quantity):
    s = z_statistics(superobs, quantity, STANDARD_ERRORS)
    print(quantity, s)
    if max(s["mean_tolerance"], s["std_tolerance"]) >= TOLERANCE_LIMIT:
        raise TooFewErrorGroups(f"{quantity}: tolerances {s['mean_tolerance']:.3f} (mean), "
                                f"{s['std_tolerance']:.3f} (std) from {s['groups']} groups")
    assert abs(s["mean"]) < MEAN_BOUND, s
    assert STD_BOUNDS[0] < s["std"] < STD_BOUNDS[1], s


def test_sst_z_within_what_its_error_groups_resolve(superobs):
    """SST with the tolerance its few error groups allow: 2 standard errors of a mean and of a
    std of Kish's effective number of groups k of independent N(0, 1) values, 1 / sqrt(k) and
    1 / sqrt(2 (k - 1)) (textbook sampling distributions), as if all z of one group were equal.
    Weak, but it fails if the build ignored the within-granule correlation (errors about
    sqrt(rho n) times too small: a z std of several) or the sub-cell variability."""
    s = z_statistics(superobs, "sea_surface_temperature", STANDARD_ERRORS)
    print(s)
    k = s["kish_groups"]
    assert s["groups"] >= 24, s
    assert abs(s["mean"]) < STANDARD_ERRORS / k ** 0.5, s
    assert abs(s["std"] - 1.0) < STANDARD_ERRORS / (2.0 * (k - 1.0)) ** 0.5, s
