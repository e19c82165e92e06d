"""PNG figures of the audit (matplotlib, non-interactive Agg backend).

- ``counts_map.png``: super-observations per grid cell, one panel per sensor (grid indices);
- ``innovation_map.png``: mean innovation per grid cell, one panel per quantity;
- ``normalised_innovations.png``: histograms of d / sqrt(sigma_o^2 + sigma_ens^2) per sensor and
  quantity against the standard normal density;
- ``spread_vs_error.png``: within-cell spread against the assigned raw error, per sensor and
  quantity, with the 1:1 line.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd


def _pyplot():
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    return plt


def _panels(plt, n, width=4.0, height=3.4):
    columns = min(n, 3)
    rows = int(np.ceil(n / columns))
    fig, axes = plt.subplots(rows, columns, figsize=(width * columns, height * rows),
                             squeeze=False, constrained_layout=True)
    for ax in axes.flat[n:]:
        ax.set_visible(False)
    return fig, list(axes.flat[:n])


def _grid_axes(ax, title):
    """Title and grid-index axes of a map panel (cells drawn at their (i, j))."""
    ax.set_title(title)
    ax.set_xlabel("grid column i")
    ax.set_ylabel("grid row j")
    ax.set_aspect("equal")


def _save(plt, fig, path, title=None) -> Path:
    if title:
        fig.suptitle(title)
    fig.savefig(path, dpi=80)
    plt.close(fig)
    return Path(path)


def _cell_grid(frame, value=None, statistic="count", shape=None):
    j = frame["j"].to_numpy().astype(int)
    i = frame["i"].to_numpy().astype(int)
    ny, nx = shape or (j.max() + 1, i.max() + 1)
    flat = j * nx + i
    counts = np.bincount(flat, minlength=ny * nx).reshape(ny, nx).astype(float)
    if statistic == "count":
        return np.where(counts > 0, counts, np.nan)
    sums = np.bincount(flat, weights=frame[value].to_numpy(float), minlength=ny * nx)
    with np.errstate(invalid="ignore"):
        return np.where(counts > 0, sums.reshape(ny, nx) / counts, np.nan)


def counts_map(superobs: pd.DataFrame, path, shape=None) -> Path:
    """Map of the number of super-observations per cell (all slots, layers, quantities)."""
    plt = _pyplot()
    sensors = sorted(superobs["sensor"].unique())
    shape = shape or (int(superobs["j"].max()) + 1, int(superobs["i"].max()) + 1)
    fig, axes = _panels(plt, len(sensors))
    for ax, sensor in zip(axes, sensors):
        grid = _cell_grid(superobs[superobs["sensor"] == sensor], shape=shape)
        image = ax.pcolormesh(grid, cmap="viridis", shading="auto", rasterized=True)
        fig.colorbar(image, ax=ax, label="super-observations")
        _grid_axes(ax, sensor)
    return _save(plt, fig, path, "super-observations per model grid cell")


def innovation_map(table: pd.DataFrame, path, shape=None) -> Path | None:
    """Mean innovation per cell, one panel per quantity; None without innovations."""
    plt = _pyplot()
    usable = table[np.isfinite(table["innovation"])]
    if usable.empty:
        return None
    quantities = sorted(usable["quantity"].unique())
    shape = shape or (int(table["j"].max()) + 1, int(table["i"].max()) + 1)
    fig, axes = _panels(plt, len(quantities))
    for ax, quantity in zip(axes, quantities):
        sub = usable[usable["quantity"] == quantity]
        grid = _cell_grid(sub, "innovation", "mean", shape)
        limit = float(np.nanpercentile(np.abs(grid), 98)) or 1.0
        image = ax.pcolormesh(grid, cmap="RdBu_r", vmin=-limit, vmax=limit, shading="auto",
                              rasterized=True)
        fig.colorbar(image, ax=ax, label="observation - model")
        _grid_axes(ax, quantity)
    return _save(plt, fig, path, "mean innovation per model grid cell")


def normalised_innovation_histograms(table: pd.DataFrame, path) -> Path | None:
    """Histograms of normalised innovations with the N(0, 1) density; None without them."""
    plt = _pyplot()
    usable = table[np.isfinite(table["normalised_innovation"])]
    if usable.empty:
        return None
    groups = list(usable.groupby(["sensor", "quantity"], sort=True))
    fig, axes = _panels(plt, len(groups), 3.6, 2.8)
    x = np.linspace(-5, 5, 201)
    for ax, ((sensor, quantity), group) in zip(axes, groups):
        z = np.clip(group["normalised_innovation"].to_numpy(), -5, 5)
        ax.hist(z, bins=50, range=(-5, 5), density=True, color="0.6")
        ax.plot(x, np.exp(-0.5 * x * x) / np.sqrt(2 * np.pi), "k-", lw=1, label="N(0, 1)")
        ax.set_title(f"{sensor}\n{quantity} (std {np.std(group['normalised_innovation']):.2f})",
                     fontsize=9)
        ax.set_xlabel("d / sqrt(sigma_o² + sigma_ens²)")
    axes[0].legend(fontsize=8)
    return _save(plt, fig, path)


def spread_vs_error(superobs: pd.DataFrame, path) -> Path | None:
    """Within-cell spread against the assigned raw error (groups of 2 or more raw values)."""
    plt = _pyplot()
    spread = superobs["spread"].where(superobs["spread_detrended"].isna(), superobs["spread_detrended"])
    frame = superobs.assign(spread_used=spread)
    frame = frame[np.isfinite(frame["spread_used"]) & np.isfinite(frame["error_raw_rms"])
                  & (frame["count"] >= 2)]
    if frame.empty:
        return None
    groups = list(frame.groupby(["sensor", "quantity"], sort=True))
    fig, axes = _panels(plt, len(groups), 3.6, 3.2)
    for ax, ((sensor, quantity), group) in zip(axes, groups):
        raw = group["error_raw_rms"].to_numpy()
        ax.scatter(raw, group["spread_used"].to_numpy(), s=3, alpha=0.3, rasterized=True)
        top = float(np.nanmax([raw.max(), np.nanpercentile(group["spread_used"], 99)]))
        ax.plot([0, top], [0, top], "k--", lw=1, label="spread = error")
        ax.set_xlim(0, top * 1.05)
        ax.set_ylim(0, top * 1.05)
        ax.set_title(f"{sensor}\n{quantity}", fontsize=9)
        ax.set_xlabel("assigned raw error (rms)")
        ax.set_ylabel("within-cell spread")
    axes[0].legend(fontsize=8)
    return _save(plt, fig, path)
