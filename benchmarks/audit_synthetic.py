"""Synthetic super-observation tables of known error, for calibrating the error audit.

An invented scenario: a 60 x 60 model grid of 0.1-degree cells, four time slots, one surface
quantity seen by three sensors (``a``, ``b``, ``c``) and by an ensemble of model states.  Every
part of the error budget is drawn with numpy, so the right answer of the audit is known:
the factor F by which each sensor's assigned super-observation error should be multiplied.

What is drawn, per slot (cell c, super-observation of n raw values, sensor s, granule g):

- background errors: a Gaussian random field of unit variance and Gaussian correlation
  exp(-r^2 / (2 L^2)), L = ``correlation_cells`` (white noise convolved by FFT with the kernel
  exp(-r^2 / L^2) normalised to unit sum of squares; the convolution of two Gaussians is a
  Gaussian of the summed variances, any probability text), times an amplitude sigma_b(c) that
  grows from south to north.  The truth and each of the N members are the common mean plus
  an independent draw of this field, so members and truth are exchangeable: the ensemble mean
  misses the truth with variance (1 + 1/N) sigma_b^2 and the ensemble variance (ddof 1) has
  expectation sigma_b^2;
- representation error r(c), white, standard deviation sigma_r, common to all sensors: the
  truth the sensors see is truth(c) + r(c), the model represents truth(c);
- sub-cell variability: each raw value sees its own point of the cell, deviating from the cell
  truth by a draw of standard deviation sigma_s (independent between raw values and sensors);
- the raw error of sensor s in granule g, standard deviation sigma_sg (the sensor's sigma
  times a factor 0.8-1.25 per granule): a part shared by the granule's raw values, variance
  rho_s sigma_sg^2, plus independent pixel noise, variance (1 - rho_s) sigma_sg^2.  Granules
  are tiles of ``granule_cells`` x ``granule_cells`` cells at a random offset per sensor and
  slot, so one super-observation's raw values share one granule and nearby super-observations
  of a sensor share its error too.

The super-observation is the mean of its n raw values; its spread the sample standard
deviation (ddof 1) of the raw values.  Both are drawn from their exact sampling distributions
(mean: normal; (n - 1) s^2 / v: chi-square with n - 1 degrees of freedom, independent of the
mean, any statistics textbook) instead of drawing each raw value.

The error a correctly configured sensor is assigned (error of the mean with within-granule
correlation rho, [Cochran1977] for the sampling term):

.. math::
    \\sigma_o^2 = \\sigma_{sg}^2 \\frac{1 + (n - 1)\\rho_s}{n} + \\frac{\\sigma_s^2}{n}
                 + \\sigma_r^2

with ``error_raw_rms`` = sigma_sg and ``error_representation`` = sigma_r.  A misassigned
sensor of factor F is assigned sigma_o / F (and sigma_sg / F, sigma_r / F) while its data are
drawn as for a correct one: its true error is F times the assigned one.  The innovation d = value - ensemble mean then has

.. math::
    E[d^2] = F^2 \\sigma_o^2 + (1 + 1/N)\\, \\sigma_b^2

(sigma_o the assigned error) and the difference of two sensors in one cell and slot
E[(x_a - x_b)^2] = (F sigma_o)_a^2 + (F sigma_o)_b^2 - 2 sigma_r^2 (the common representation
error cancels); the spread has E[s^2] = (1 - rho_s) sigma_sg^2 + sigma_s^2.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

QUANTITY = "sea_surface_temperature"
UNITS = "degC"


@dataclass(frozen=True)
class SensorModel:
    """One sensor's true raw error: sigma (degC, rms over granules) and the within-granule
    correlation rho."""

    name: str
    sigma: float
    rho: float


@dataclass
class Scenario:
    """Sizes and error magnitudes of a synthetic night (degC, cells)."""

    nx: int = 60
    ny: int = 60
    slots: int = 4
    correlation_cells: float = 5.0
    background_sigma: float = 0.3           # at mid-grid; 0.6x to 1.4x from south to north
    representation_sigma: float = 0.15
    subcell_sigma: float = 0.3
    granule_cells: int = 12
    max_raw: int = 40                       # n per super-observation: uniform 1..max_raw
    coverage: float = 0.6                   # chance that a sensor sees a candidate cell-slot
    sensors: tuple = field(default_factory=lambda: (
        SensorModel("a", 0.25, 0.2), SensorModel("b", 0.4, 0.3), SensorModel("c", 0.6, 0.1)))


def gaussian_random_field(rng, shape, correlation_cells, count=1) -> np.ndarray:
    """``count`` independent fields of ``shape`` with unit variance and correlation
    exp(-r^2 / (2 L^2)) (r in cells): white noise convolved (FFT, on a grid padded by 4 L so
    the periodic wrap does not correlate opposite edges) with exp(-r^2 / L^2), normalised to
    unit sum of squares."""
    pad = int(np.ceil(4 * correlation_cells))
    ny, nx = shape[0] + pad, shape[1] + pad
    dy = np.minimum(np.arange(ny), ny - np.arange(ny))[:, None]
    dx = np.minimum(np.arange(nx), nx - np.arange(nx))[None, :]
    kernel = np.exp(-(dx ** 2 + dy ** 2) / correlation_cells ** 2)
    kernel /= np.sqrt(np.sum(kernel ** 2))
    spectrum = np.fft.rfft2(kernel)
    noise = rng.standard_normal((count, ny, nx))
    fields = np.fft.irfft2(np.fft.rfft2(noise) * spectrum, s=(ny, nx))
    return fields[:, :shape[0], :shape[1]]


def background_amplitude(scenario: Scenario) -> np.ndarray:
    """sigma_b per cell (ny, nx), degC: 0.6 to 1.4 times background_sigma from south to
    north."""
    rows = (np.arange(scenario.ny) + 0.5) / scenario.ny
    return scenario.background_sigma * np.broadcast_to(
        (0.6 + 0.8 * rows)[:, None], (scenario.ny, scenario.nx))


def expected_subcell_sampling(scenario: Scenario, n) -> np.ndarray:
    """sigma_s^2 / n, degC^2."""
    return scenario.subcell_sigma ** 2 / np.asarray(n, dtype=float)


def assigned_error(sigma_raw, rho, n, scenario: Scenario) -> np.ndarray:
    """The error of a correctly configured sensor, degC (module docstring formula)."""
    n = np.asarray(n, dtype=float)
    return np.sqrt(sigma_raw ** 2 * (1.0 + (n - 1.0) * rho) / n
                   + expected_subcell_sampling(scenario, n) + scenario.representation_sigma ** 2)


def synthetic_table(rng, size: int, factors: dict | None = None, members: int = 30,
                    scenario: Scenario | None = None) -> pd.DataFrame:
    """A super-observation table of ``size`` rows per sensor (the columns of the audit's
    input, with ``model``, ``model_variance`` and ``innovation`` when ``members`` > 0), and
    the true values used: ``true_error`` (F sigma_o), ``true_factor`` (F),
    ``true_background_variance`` (sigma_b^2) and ``truth`` (the cell truth).

    ``factors``: sensor name -> F (default 1 for every sensor).
    """
    scenario = scenario or Scenario()
    factors = factors or {}
    cells = scenario.nx * scenario.ny
    total = cells * scenario.slots
    # candidate cell-slots, each seen by each sensor with probability `coverage`: sensors
    # overlap often enough for pairs and triplets; each sensor then keeps exactly `size`
    candidates = min(total, int(np.ceil(size / scenario.coverage)))
    pool = rng.choice(total, candidates, replace=False)
    amplitude = background_amplitude(scenario)
    mean_state = 15.0 + 3.0 * np.sin(np.linspace(0.0, np.pi, scenario.nx))[None, :] \
        + np.linspace(0.0, -6.0, scenario.ny)[:, None]
    fields = gaussian_random_field(rng, (scenario.ny, scenario.nx), scenario.correlation_cells,
                                   count=scenario.slots * (members + 1))
    fields = fields.reshape(scenario.slots, members + 1, scenario.ny, scenario.nx)
    truth = mean_state + amplitude * fields[:, 0]                        # (slots, ny, nx)
    representation = scenario.representation_sigma * rng.standard_normal(truth.shape)
    if members > 1:
        states = mean_state + amplitude * fields[:, 1:]
        model_mean = states.mean(axis=1)
        model_variance = states.var(axis=1, ddof=1)
    frames = []
    for sensor in scenario.sensors:
        factor = float(factors.get(sensor.name, 1.0))
        seen = np.sort(rng.choice(pool, min(size, candidates), replace=False))
        slot, cell = np.divmod(seen, cells)
        j, i = np.divmod(cell, scenario.nx)
        n = rng.integers(1, scenario.max_raw + 1, seen.size)
        # granules: tiles at a random offset per slot; own sigma factor and shared error each
        offset = rng.integers(0, scenario.granule_cells, (scenario.slots, 2))
        tiles = -(-max(scenario.nx, scenario.ny) // scenario.granule_cells) + 1
        granule = (slot * tiles + (j + offset[slot, 0]) // scenario.granule_cells) * tiles \
            + (i + offset[slot, 1]) // scenario.granule_cells
        granule_ids, granule_index = np.unique(granule, return_inverse=True)
        granule_sigma = sensor.sigma * rng.uniform(0.8, 1.25, granule_ids.size)
        granule_error = np.sqrt(sensor.rho) * granule_sigma * rng.standard_normal(
            granule_ids.size)
        sigma_raw = granule_sigma[granule_index]
        # the world does not depend on F: only the assigned numbers are divided by it
        independent = (1.0 - sensor.rho) * sigma_raw ** 2 + scenario.subcell_sigma ** 2
        cell_truth = truth[slot, j, i]
        value = (cell_truth + representation[slot, j, i] + granule_error[granule_index]
                 + np.sqrt(independent / n) * rng.standard_normal(n.size))
        spread = np.full(n.size, np.nan)
        many = n >= 2
        spread[many] = np.sqrt(independent[many] * rng.chisquare(n[many] - 1)
                               / (n[many] - 1))
        correct = assigned_error(sigma_raw, sensor.rho, n, scenario)
        frame = pd.DataFrame({
            "sensor": sensor.name, "quantity": QUANTITY, "value": value,
            "error": correct / factor, "error_raw_rms": sigma_raw / factor,
            "error_representation": scenario.representation_sigma / factor,
            "count": n, "spread": spread, "spread_detrended": np.nan,
            "lon": -20.0 + 0.1 * (i + 0.5), "lat": 40.0 + 0.1 * (j + 0.5),
            "i": i, "j": j, "k": 0, "slot": slot,
            "time": np.datetime64("2026-11-19T00:00", "ns")
            + (slot * 6 + 3).astype("timedelta64[h]"),
            "time_end": np.datetime64("NaT", "ns"), "profile": "",
            "true_error": correct, "true_factor": factor,
            "true_background_variance": amplitude[j, i] ** 2, "truth": cell_truth,
        })
        if members > 1:
            frame["model"] = model_mean[slot, j, i]
            frame["model_variance"] = model_variance[slot, j, i]
            frame["innovation"] = frame["value"] - frame["model"]
        frames.append(frame)
    return pd.concat(frames, ignore_index=True)
