"""Observation noise of the demo: errors correlated within an error group, and the sub-cell
variability that a 10 km model grid cannot resolve.

Errors.  The values of one error group (an altimeter pass, an infrared SST granule, one file of
a gridded SST product) share part of their error: retrieval, orbit and calibration errors of one
overpass.  The demo draws the noise of a group of values as

    eps_i = sqrt(rho) sigma_i c + sqrt(1 - rho) sigma_i e_i,

with c one standard normal draw per group and e_i independent standard normal draws per value,
so each value's error has variance rho sigma_i^2 + (1 - rho) sigma_i^2 = sigma_i^2 (the stated
raw error, what a provider states), every pair in one group the covariance rho sigma_i sigma_j
(a constant correlation rho) and values of different groups are independent.

Sub-cell variability.  Observations sample the truth plus a small-scale field: one independent
value per raw footprint (swath pixel, along-track point, product cell; for profiles one per
profile and model layer), standard deviation ``SUBCELL_SIGMA`` per quantity.  It is not part of
the truth that tests compare with: the truth is the large-scale field.  Independent values per
footprint are what the "sampling" representation-error model of the build configuration assumes
(simple random sampling of footprints in a cell), so the demo's configuration is right for it.
"""

from __future__ import annotations

import numpy as np

#: pairwise error correlation within one error group, per demo sensor (common practice, order
#: of magnitude only): infrared SST within one granule, altimeter within one pass (0.1-0.5 is
#: the usual range; the demo takes the low end, left after along-track corrections, so that its
#: ~100 passes can check the errors statistically).  Sensors not listed (the gridded SST
#: products among them) have independent errors.
ERROR_CORRELATION = {
    "altimeter_a": 0.1,
    "altimeter_b": 0.1,
    "altimeter_c": 0.1,
    "sst_swath_ir": 0.2,
}

#: standard deviation of the sub-cell variability per quantity, canonical units (common
#: practice, order of magnitude only): SST 0.15 K, sea level 0.02 m, and in the water column
#: 0.05 degC and 0.01 PSU.  Ice concentration (0.03 would be typical of a 1-10 km footprint) and
#: ice drift have none here: the demo's products have 25 km and 62.5 km cells, footprints larger
#: than a model cell, which average the sub-cell field out.
SUBCELL_SIGMA = {
    "sea_surface_temperature": 0.15,
    "sea_level_anomaly": 0.02,
    "sea_water_temperature": 0.05,
    "sea_water_salinity": 0.01,
}

#: area (km2) of one raw value's footprint, per quantity, for the "sampling" representation
#: model: the infrared swath pixel (1.2 km at nadir, about 2 km2 averaged over the scan), a
#: small along-track footprint, a point-like profile.
FOOTPRINT_KM2 = {
    "sea_surface_temperature": 2.0,
    "sea_level_anomaly": 1.0,
    "sea_water_temperature": 1.0,
    "sea_water_salinity": 1.0,
}


def grouped_noise(rng, sigma, groups=None, correlation=0.0):
    """Noise eps_i = sigma_i (sqrt(rho) c_g(i) + sqrt(1 - rho) e_i) with one c per group.

    Parameters
    ----------
    rng : numpy.random.Generator
    sigma : array_like
        Standard deviation of each value's error (its units); sets the output shape.
    groups : array_like or None
        Group label of each value (broadcast to the shape of ``sigma``); None = one group.
    correlation : float
        Pairwise error correlation rho within a group, 0..1.

    Returns
    -------
    numpy.ndarray
        The noise, shape of ``sigma``: variance sigma_i^2, correlation rho within a group, 0
        across groups.
    """
    if not 0.0 <= correlation <= 1.0:
        raise ValueError(f"correlation: expected 0..1, got {correlation}")
    sigma = np.asarray(sigma, dtype=np.float64)
    if groups is None:
        common = rng.standard_normal()
    else:
        labels = np.broadcast_to(np.asarray(groups), sigma.shape)
        _, codes = np.unique(labels, return_inverse=True)
        common = rng.standard_normal(int(codes.max(initial=-1)) + 1)[codes.reshape(sigma.shape)]
    independent = rng.standard_normal(sigma.shape)
    return sigma * (np.sqrt(correlation) * common + np.sqrt(1.0 - correlation) * independent)


def sensor_noise(rng, sensor, sigma, groups=None):
    """:func:`grouped_noise` with the sensor's :data:`ERROR_CORRELATION` (0 if not listed)."""
    return grouped_noise(rng, sigma, groups, ERROR_CORRELATION.get(sensor, 0.0))


def subcell_variability(rng, quantity, shape):
    """Independent N(0, SUBCELL_SIGMA[quantity]^2) values, one per raw footprint (zeros for a
    quantity without sub-cell variability)."""
    sigma = SUBCELL_SIGMA.get(quantity, 0.0)
    return sigma * rng.standard_normal(shape) if sigma > 0.0 else np.zeros(shape)
