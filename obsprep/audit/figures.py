"""PNG figures of the audit (matplotlib, non-interactive Agg backend), for people to read.

- ``factors.png``: the factor F of each sensor and quantity with its interval and the tolerance;
- ``counts_map.png``: super-observations per model grid cell, one panel per sensor;
- ``innovation_map.png``: mean innovation per cell, one panel per sensor and quantity;
- ``normalised_innovations.png``: histograms of d / sqrt(sigma_o^2 + sigma_ens^2) per sensor and
  quantity against the standard normal density;
- ``spread_vs_error.png``: within-cell spread against the assigned raw error as binned means,
  per sensor and quantity, with the 1:1 line and the fitted factor.

Maps are drawn on the model grid's own plane: longitude/latitude for a regular grid, the grid's
projected x/y (km) for a projected grid, and a local azimuthal equidistant plane about the
grid's centre for a curvilinear grid, each with a longitude/latitude graticule.  Land from the
grid's sea mask is dark grey, sea cells without data light grey, so that a zero of the
diverging innovation colour map (near white) is never taken for "no data".  Without the grid
(its files not found) maps fall back to grid indices and say so in their title.  Nothing is
dropped silently: values beyond an axis or colour range are counted in the panel text.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from obsprep.audit.presentation import factor_of, format_value
from obsprep.model.quantities import QUANTITIES
from obsprep.writers.atomic import atomic_path

#: resolution of every figure (dots per inch)
DPI = 130
LAND_COLOUR = "0.45"
NO_DATA_COLOUR = "0.83"
#: fields with fewer filled cells than this also get a dot per cell on maps
SPARSE_CELLS = 400
#: most bins of assigned raw error in the spread-versus-error figure
SPREAD_BINS = 8
#: fewest super-observations a spread bin needs to be drawn
MIN_BIN_COUNT = 5
#: normalised innovations beyond this magnitude are outside the histogram's axis (counted)
HISTOGRAM_LIMIT = 5.0
#: share of the largest |mean innovation| inside the colour range (the rest saturates, counted)
COLOUR_PERCENTILE = 98.0


def _pyplot():
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    return plt


def units_label(quantity: str) -> str:
    """Readable units of ``quantity`` (its canonical CF units; "1" shown as dimensionless)."""
    spec = QUANTITIES.get(quantity)
    units = spec.units if spec is not None else "unknown units"
    return {"degC": "°C", "1": "dimensionless"}.get(units, units)


def _panels(plt, n, width=4.4, height=3.8):
    columns = min(n, 3)
    rows = int(np.ceil(n / columns))
    fig, axes = plt.subplots(rows, columns, figsize=(width * columns, height * rows),
                             squeeze=False, constrained_layout=True)
    for ax in axes.flat[n:]:
        ax.set_visible(False)
    return fig, list(axes.flat[:n])


def _save(plt, fig, path, title=None) -> Path:
    """Save ``fig`` as PNG at :data:`DPI`, atomically (a killed run leaves no half file)."""
    if title:
        fig.suptitle(title)
    path = Path(path)
    with atomic_path(path) as tmp:
        fig.savefig(tmp, dpi=DPI, format="png", bbox_inches="tight", pad_inches=0.1)
    plt.close(fig)
    return path


# --- the map plane of a grid ------------------------------------------------------------------

def _nice_step(span: float) -> float:
    """A graticule step (degrees) giving about four to eight lines over ``span`` degrees."""
    for step in (0.25, 0.5, 1, 2, 5, 10, 15, 20, 30, 45, 60):
        if span / step <= 8:
            return float(step)
    return 90.0


class MapPlane:
    """Where the cells of a grid are drawn: cell corners in the plane, land, graticule.

    ``corners_x``, ``corners_y``: (ny + 1, nx + 1) cell corners in plot units (km or degrees);
    ``to_plane(lon, lat)``: positions in degrees to plot units (None without a grid);
    ``xlabel``, ``ylabel``, ``note``: axis labels and a note for the figure title.
    """

    def __init__(self, grid, shape):
        self.grid = grid
        self.ny, self.nx = shape
        self.land = None
        self.to_plane = None
        self.lonlat = None
        if grid is None:
            self.corners_x, self.corners_y = np.meshgrid(np.arange(self.nx + 1) - 0.5,
                                                         np.arange(self.ny + 1) - 0.5)
            self.xlabel, self.ylabel = "grid column i", "grid row j"
            self.note = "grid files not found: grid-index axes, land not shown"
            return
        self.land = ~np.asarray(grid.sea_mask, dtype=bool)
        kind = getattr(grid, "grid_type", "")
        if kind == "regular":
            self._regular(grid)
        elif kind == "projected":
            self._projected(grid)
        else:
            self._curvilinear(grid)
        self.lonlat = (np.asarray(grid.lon_center, float), np.asarray(grid.lat_center, float))

    def _regular(self, grid):
        # longitudes unwrapped from lon_min, so a grid across the dateline stays in one piece
        lon = grid.lon_min + np.arange(self.nx + 1) * grid.dlon
        lat = grid.lat_min + np.arange(self.ny + 1) * grid.dlat
        self.corners_x, self.corners_y = np.meshgrid(lon, lat)
        self.xlabel, self.ylabel = "longitude (degrees east)", "latitude (degrees north)"
        self.note = ""
        lon_min = grid.lon_min

        def to_plane(lon_deg, lat_deg):
            return lon_min + (np.asarray(lon_deg, float) - lon_min) % 360.0, \
                np.asarray(lat_deg, float)

        self.to_plane = to_plane

    def _projected(self, grid):
        x = (grid.x_min + np.arange(self.nx + 1) * grid.dx) / 1000.0
        y = (grid.y_min + np.arange(self.ny + 1) * grid.dy) / 1000.0
        self.corners_x, self.corners_y = np.meshgrid(x, y)
        name = grid.crs.name if grid.crs.name and grid.crs.name != "unknown" else "grid's CRS"
        self.xlabel, self.ylabel = f"x (km, {name})", "y (km)"
        self.note = "grey lines: longitude/latitude"

        def to_plane(lon_deg, lat_deg):
            px, py = grid.lonlat_to_xy(lon_deg, lat_deg)
            return px / 1000.0, py / 1000.0

        self.to_plane = to_plane

    def _curvilinear(self, grid):
        from pyproj import CRS, Transformer

        lon = np.asarray(grid.lon_center, float)
        lat = np.asarray(grid.lat_center, float)
        # centre of the grid: mean of the unit vectors of the cell centres
        lam, phi = np.radians(lon), np.radians(lat)
        vx, vy, vz = (np.cos(phi) * np.cos(lam)).mean(), (np.cos(phi) * np.sin(lam)).mean(), \
            np.sin(phi).mean()
        lon0 = float(np.degrees(np.arctan2(vy, vx)))
        lat0 = float(np.degrees(np.arctan2(vz, np.hypot(vx, vy))))
        crs = CRS.from_proj4(f"+proj=aeqd +lat_0={lat0:.6f} +lon_0={lon0:.6f} +datum=WGS84 "
                             "+units=m +no_defs")
        forward = Transformer.from_crs(CRS.from_epsg(4326), crs, always_xy=True)

        def to_plane(lon_deg, lat_deg):
            px, py = forward.transform(np.asarray(lon_deg, float), np.asarray(lat_deg, float),
                                       errcheck=False)
            return np.asarray(px, float) / 1000.0, np.asarray(py, float) / 1000.0

        cx, cy = to_plane(lon, lat)
        self.corners_x, self.corners_y = _corners_from_centres(cx), _corners_from_centres(cy)
        self.xlabel = (f"x (km, azimuthal equidistant about {_lon_text(round(lon0, 1))} "
                       f"{_lat_text(round(lat0, 1))})")
        self.ylabel = "y (km)"
        self.note = "curvilinear grid, cell corners interpolated; grey lines: longitude/latitude"
        self.to_plane = to_plane

    def draw_background(self, ax):
        """Sea without data light grey (axes background), land dark grey from the sea mask."""
        from matplotlib.colors import ListedColormap

        ax.set_facecolor(NO_DATA_COLOUR)
        if self.land is not None and self.land.any():
            ax.pcolormesh(self.corners_x, self.corners_y,
                          np.ma.masked_where(~self.land, np.ones(self.land.shape)),
                          cmap=ListedColormap([LAND_COLOUR]), vmin=0, vmax=1, shading="flat",
                          rasterized=True, zorder=2)

    def draw_cells(self, ax, field, **kwargs):
        """pcolormesh of a (ny, nx) field (NaN = no data, shows the background); cells of a
        sparse field (fewer than :data:`SPARSE_CELLS`) are also marked by a dot of their
        colour, so that single cells stay visible on a large grid."""
        image = ax.pcolormesh(self.corners_x, self.corners_y, np.ma.masked_invalid(field),
                              shading="flat", rasterized=True, zorder=1, **kwargs)
        filled = np.isfinite(field)
        if 0 < filled.sum() < SPARSE_CELLS:
            cx = 0.25 * (self.corners_x[:-1, :-1] + self.corners_x[1:, :-1]
                         + self.corners_x[:-1, 1:] + self.corners_x[1:, 1:])
            cy = 0.25 * (self.corners_y[:-1, :-1] + self.corners_y[1:, :-1]
                         + self.corners_y[:-1, 1:] + self.corners_y[1:, 1:])
            ax.scatter(cx[filled], cy[filled], c=field[filled], s=10, edgecolors="0.1",
                       linewidths=0.3, zorder=4, cmap=image.cmap, norm=image.norm)
        return image

    def finish(self, ax):
        """Axis labels, limits to the grid, equal aspect, graticule."""
        ax.set_xlim(np.nanmin(self.corners_x), np.nanmax(self.corners_x))
        ax.set_ylim(np.nanmin(self.corners_y), np.nanmax(self.corners_y))
        ax.set_aspect("equal" if self.grid is None or self.grid.grid_type != "regular" else
                      1.0 / max(np.cos(np.radians(np.nanmean(self.corners_y))), 0.05))
        ax.set_xlabel(self.xlabel, fontsize=8)
        ax.set_ylabel(self.ylabel, fontsize=8)
        ax.tick_params(labelsize=7)
        if self.to_plane is not None and self.grid.grid_type != "regular":
            self._graticule(ax)

    def _graticule(self, ax):
        lon, lat = self.lonlat
        reference = float(np.degrees(np.angle(np.exp(1j * np.radians(lon)).mean())))
        relative = (lon - reference + 180.0) % 360.0 - 180.0
        lat_low, lat_high = float(lat.min()), float(lat.max())
        pole = self._contains_pole()
        lon_span = 360.0 if pole else float(relative.max() - relative.min())
        lon_step, lat_step = _nice_step(lon_span), _nice_step(lat_high - lat_low)
        if pole:
            lat_low, lat_high = (lat_low, 90.0) if pole > 0 else (-90.0, lat_high)
        xlim, ylim = ax.get_xlim(), ax.get_ylim()
        style = {"color": "0.25", "lw": 0.5, "alpha": 0.7, "zorder": 3}
        text = {"fontsize": 6, "color": "0.15", "zorder": 4, "clip_on": True}
        if pole:
            meridians = np.arange(-180.0, 180.0, lon_step)
        else:
            first = np.ceil((reference + relative.min()) / lon_step) * lon_step
            meridians = np.arange(first, reference + relative.max() + 1e-9, lon_step)
        along = np.linspace(max(lat_low - lat_step, -89.9), min(lat_high + lat_step, 89.9), 200)
        for meridian in meridians:
            x, y = self.to_plane(np.full_like(along, meridian), along)
            self._line_with_label(ax, x, y, _lon_text(meridian), xlim, ylim, style, text)
        parallels = np.arange(np.ceil(lat_low / lat_step) * lat_step, lat_high + 1e-9, lat_step)
        if pole:
            around = np.linspace(-180.0, 180.0, 361)
        else:
            around = reference + np.linspace(relative.min() - lon_step, relative.max() + lon_step,
                                             200)
        for parallel in parallels:
            if abs(parallel) >= 90.0:
                continue
            x, y = self.to_plane(around, np.full_like(around, parallel))
            self._line_with_label(ax, x, y, _lat_text(parallel), xlim, ylim, style, text,
                                  at_end=False)

    def _contains_pole(self) -> int:
        """+1 / -1 when the north / south pole lies inside the drawn area, else 0."""
        for sign in (1, -1):
            x, y = self.to_plane(np.array([0.0]), np.array([90.0 * sign]))
            if np.isfinite(x[0]) and np.nanmin(self.corners_x) <= x[0] <= np.nanmax(self.corners_x) \
                    and np.nanmin(self.corners_y) <= y[0] <= np.nanmax(self.corners_y):
                return sign
        return 0

    @staticmethod
    def _line_with_label(ax, x, y, label, xlim, ylim, style, text, at_end=True):
        x, y = np.asarray(x, float), np.asarray(y, float)
        ok = np.isfinite(x) & np.isfinite(y)
        if ok.sum() < 2:
            return
        ax.plot(x[ok], y[ok], **style)
        # labels sit a little inside the frame, so that they are not cut by it
        dx, dy = 0.06 * (xlim[1] - xlim[0]), 0.04 * (ylim[1] - ylim[0])
        inside = ok & (x >= xlim[0] + dx) & (x <= xlim[1] - dx) & (y >= ylim[0] + dy) \
            & (y <= ylim[1] - dy)
        if inside.any():
            # at the end of the visible part (near the frame), where lines cross least
            visible = np.flatnonzero(inside)
            k = visible[-1] if at_end else visible[0]
            ax.text(x[k], y[k], label, ha="center", va="center",
                    bbox={"boxstyle": "round,pad=0.1", "fc": "white", "ec": "none", "alpha": 0.6},
                    **text)


def _lon_text(lon: float) -> str:
    lon = (lon + 180.0) % 360.0 - 180.0
    return f"{abs(lon):g}°{'E' if lon > 0 else 'W' if lon < 0 else ''}"


def _lat_text(lat: float) -> str:
    return f"{abs(lat):g}°{'N' if lat > 0 else 'S' if lat < 0 else ''}"


def _corners_from_centres(centres: np.ndarray) -> np.ndarray:
    """(ny + 1, nx + 1) corners of cells from (ny, nx) centres: midpoints inside, linear
    extrapolation at the edges (adequate for drawing smooth curvilinear grids)."""
    c = np.asarray(centres, float)
    padded = np.empty((c.shape[0] + 2, c.shape[1] + 2))
    padded[1:-1, 1:-1] = c
    padded[0, 1:-1] = 2 * c[0] - c[1]
    padded[-1, 1:-1] = 2 * c[-1] - c[-2]
    padded[:, 0] = 2 * padded[:, 1] - padded[:, 2]
    padded[:, -1] = 2 * padded[:, -2] - padded[:, -3]
    return 0.25 * (padded[:-1, :-1] + padded[1:, :-1] + padded[:-1, 1:] + padded[1:, 1:])


def _shape(frame, grid, shape):
    if grid is not None:
        return tuple(grid.shape)
    if shape is not None:
        return tuple(shape)
    return int(frame["j"].max()) + 1, int(frame["i"].max()) + 1


def _inside_grid(frame, shape):
    """The rows of ``frame`` whose cell (j, i) is on a (ny, nx) grid, and the number of the
    others (told in the figure title: a grid that does not match the run is not hidden)."""
    i = pd.to_numeric(frame["i"], errors="coerce").to_numpy(float)
    j = pd.to_numeric(frame["j"], errors="coerce").to_numpy(float)
    inside = (i >= 0) & (i < shape[1]) & (j >= 0) & (j < shape[0])
    return frame[inside], int((~inside).sum())


def _outside_note(outside, shape) -> str:
    return (f"\n{outside} super-observations outside the {shape[0]} x {shape[1]} grid not drawn"
            if outside else "")


def cell_field(frame, shape, value=None) -> np.ndarray:
    """Per cell of a (ny, nx) grid: the number of rows of ``frame`` (``value`` None) or the
    mean of its column ``value``; NaN where the cell has no rows."""
    j = frame["j"].to_numpy().astype(int)
    i = frame["i"].to_numpy().astype(int)
    ny, nx = shape
    flat = j * nx + i
    counts = np.bincount(flat, minlength=ny * nx).reshape(ny, nx).astype(float)
    if value is None:
        return np.where(counts > 0, counts, np.nan)
    sums = np.bincount(flat, weights=frame[value].to_numpy(float), minlength=ny * nx)
    with np.errstate(invalid="ignore"):
        return np.where(counts > 0, sums.reshape(ny, nx) / counts, np.nan)


def _legend_patches(ax, plane):
    from matplotlib.patches import Patch

    handles = [Patch(facecolor=NO_DATA_COLOUR, edgecolor="0.5", label="sea, no data")]
    if plane.land is not None and plane.land.any():
        handles.insert(0, Patch(facecolor=LAND_COLOUR, label="land (grid mask)"))
    ax.legend(handles=handles, loc="lower left", fontsize=6, framealpha=0.8)


def _count_colours(maximum: int):
    """Colour map, norm and ticks for integer counts 1..maximum (one colour per count when
    there are few, integer ticks always)."""
    import matplotlib.pyplot as plt
    from matplotlib.colors import BoundaryNorm, Normalize
    from matplotlib.ticker import MaxNLocator

    if maximum <= 12:
        edges = np.arange(0.5, maximum + 1.5)
        cmap = plt.get_cmap("viridis", len(edges) - 1)
        return cmap, BoundaryNorm(edges, cmap.N), np.arange(1, maximum + 1)
    ticks = MaxNLocator(nbins=6, integer=True).tick_values(1, maximum)
    return plt.get_cmap("viridis"), Normalize(0.5, maximum + 0.5), \
        [t for t in ticks if 1 <= t <= maximum]


def counts_map(superobs: pd.DataFrame, path, shape=None, grid=None) -> Path | None:
    """Map of the number of super-observations per cell (all slots and layers), one panel per
    sensor; for a sensor with several quantities, the count of its most observed quantity;
    None without super-observations."""
    plt = _pyplot()
    if superobs.empty:
        return None
    shape = _shape(superobs, grid, shape)
    superobs, outside = _inside_grid(superobs, shape)
    plane = MapPlane(grid, shape)
    sensors = sorted(superobs["sensor"].unique())
    if not sensors:
        return None
    fig, axes = _panels(plt, len(sensors))
    for ax, sensor in zip(axes, sensors):
        rows = superobs[superobs["sensor"] == sensor]
        per_quantity = [cell_field(q, shape) for _, q in rows.groupby("quantity")]
        field = np.fmax.reduce(per_quantity) if len(per_quantity) > 1 else per_quantity[0]
        maximum = int(np.nanmax(field))
        cmap, norm, ticks = _count_colours(maximum)
        plane.draw_background(ax)
        image = plane.draw_cells(ax, field, cmap=cmap, norm=norm)
        bar = fig.colorbar(image, ax=ax, ticks=ticks, shrink=0.9)
        bar.set_label("super-observations per cell (count)", fontsize=8)
        bar.ax.tick_params(labelsize=7)
        quantities = sorted(rows["quantity"].unique())
        ax.set_title(f"{sensor}: {int(rows.groupby('quantity').size().max())} super-observations "
                     f"in {int(np.isfinite(field).sum())} cells"
                     + (f"\n(most observed of {', '.join(quantities)})" if len(quantities) > 1
                        else ""), fontsize=8)
        plane.finish(ax)
        _legend_patches(ax, plane)
    title = "super-observations per model grid cell (all slots and layers)"
    return _save(plt, fig, path, title + (f"\n{plane.note}" if plane.note else "")
                 + _outside_note(outside, shape))


def innovation_map(table: pd.DataFrame, path, shape=None, grid=None) -> Path | None:
    """Mean innovation d = y - H(mean) per cell (all slots and layers), one panel per sensor and
    quantity, on a diverging colour map centred on zero; None without innovations."""
    plt = _pyplot()
    from matplotlib.colors import CenteredNorm

    usable = table[np.isfinite(table["innovation"])]
    if usable.empty:
        return None
    shape = _shape(table, grid, shape)
    usable, outside = _inside_grid(usable, shape)
    plane = MapPlane(grid, shape)
    groups = list(usable.groupby(["sensor", "quantity"], sort=True))
    if not groups:
        return None
    fig, axes = _panels(plt, len(groups))
    for ax, ((sensor, quantity), group) in zip(axes, groups):
        field = cell_field(group, shape, "innovation")
        magnitude = np.abs(field[np.isfinite(field)])
        limit = float(np.percentile(magnitude, COLOUR_PERCENTILE)) if magnitude.size else 0.0
        if not limit > 0:
            limit = float(magnitude.max()) if magnitude.size and magnitude.max() > 0 else 1.0
        beyond = int((magnitude > limit).sum())
        plane.draw_background(ax)
        image = plane.draw_cells(ax, field, cmap="RdBu_r",
                                 norm=CenteredNorm(vcenter=0.0, halfrange=limit))
        bar = fig.colorbar(image, ax=ax, extend="both" if beyond else "neither", shrink=0.9)
        bar.set_label(f"mean innovation y − H(x̄) ({units_label(quantity)})", fontsize=8)
        bar.ax.tick_params(labelsize=7)
        saturated = f"\n{beyond} cells beyond ±{limit:.3g} drawn in the end colours" \
            if beyond else ""
        ax.set_title(f"{sensor}: {quantity}\n{len(group)} super-observations in "
                     f"{magnitude.size} cells{saturated}", fontsize=8)
        plane.finish(ax)
        _legend_patches(ax, plane)
    title = "mean innovation per model grid cell (observation minus model, all slots and layers)"
    return _save(plt, fig, path, title + (f"\n{plane.note}" if plane.note else "")
                 + _outside_note(outside, shape))


def normalised_innovation_histograms(table: pd.DataFrame, path) -> Path | None:
    """Histograms of normalised innovations with the N(0, 1) density; None without them.
    Values beyond +-:data:`HISTOGRAM_LIMIT` are counted in the panel title, not drawn."""
    plt = _pyplot()
    usable = table[np.isfinite(table["normalised_innovation"])]
    if usable.empty:
        return None
    groups = list(usable.groupby(["sensor", "quantity"], sort=True))
    fig, axes = _panels(plt, len(groups), 3.8, 3.0)
    x = np.linspace(-HISTOGRAM_LIMIT, HISTOGRAM_LIMIT, 201)
    for ax, ((sensor, quantity), group) in zip(axes, groups):
        z = group["normalised_innovation"].to_numpy(float)
        outside = int((np.abs(z) > HISTOGRAM_LIMIT).sum())
        inside = z[np.abs(z) <= HISTOGRAM_LIMIT]
        # density of all values, so the outside share shows as missing area against N(0, 1)
        weights = np.full(inside.size, 1.0 / (z.size * (2 * HISTOGRAM_LIMIT / 50)))
        ax.hist(inside, bins=50, range=(-HISTOGRAM_LIMIT, HISTOGRAM_LIMIT), weights=weights,
                color="0.6", label=f"{z.size} values")
        ax.plot(x, np.exp(-0.5 * x * x) / np.sqrt(2 * np.pi), "k-", lw=1, label="N(0, 1)")
        note = f"; {outside} beyond ±{HISTOGRAM_LIMIT:g} not drawn" if outside else ""
        ax.set_title(f"{sensor}: {quantity}\nstd {np.std(z):.3g}{note}", fontsize=8)
        ax.set_xlabel("d / √(σ_o² + σ_ens²) (dimensionless)", fontsize=8)
        ax.set_ylabel("probability density", fontsize=8)
        ax.set_xlim(-HISTOGRAM_LIMIT, HISTOGRAM_LIMIT)
        ax.tick_params(labelsize=7)
        ax.legend(fontsize=6)
    return _save(plt, fig, path, "normalised innovations against the standard normal density")


def spread_bins(raw_error, spread, dof, bins: int = SPREAD_BINS) -> pd.DataFrame:
    """Binned spread against assigned raw error, one row per bin of raw error.

    Bins are quantiles of the raw error (so a sensor with one constant error has one bin).  Per
    bin: ``error``, the dof-weighted rms assigned raw error; ``spread``, the dof-weighted rms
    spread sqrt(sum dof s^2 / sum dof), which is the error for correct errors (E[s^2] =
    sigma^2, textbook); ``spread_se``, its standard error by the delta method from the standard
    error of the weighted mean of s^2 (se(rms) = se(mean s^2) / (2 rms)), that standard error
    from the weighted variance of s^2 over the effective number of groups (sum w)^2 / sum w^2
    [Kish1965]; ``n``, groups.
    """
    raw_error, spread, dof = (np.asarray(a, float) for a in (raw_error, spread, dof))
    edges = np.unique(np.quantile(raw_error, np.linspace(0.0, 1.0, bins + 1)))
    index = np.zeros(raw_error.size, int) if edges.size < 2 else \
        np.clip(np.searchsorted(edges, raw_error, side="right") - 1, 0, edges.size - 2)
    rows = []
    for b in np.unique(index):
        sel = index == b
        w, s2 = dof[sel], spread[sel] ** 2
        n = int(sel.sum())
        mean_s2 = float(np.sum(w * s2) / np.sum(w))
        # weighted variance of s^2 over the effective number of groups [Kish1965]
        n_eff = float(np.sum(w) ** 2 / np.sum(w * w))
        var_s2 = float(np.sum(w * (s2 - mean_s2) ** 2) / np.sum(w))
        se_s2 = np.sqrt(var_s2 / n_eff) if n_eff > 1 else np.nan
        rms = np.sqrt(mean_s2)
        rows.append({"error": float(np.sqrt(np.sum(w * raw_error[sel] ** 2) / np.sum(w))),
                     "spread": rms, "spread_se": se_s2 / (2 * rms) if rms > 0 else np.nan,
                     "n": n})
    return pd.DataFrame(rows)


def spread_vs_error(superobs: pd.DataFrame, path, correlation=None) -> Path | None:
    """Within-cell spread against the assigned raw error, binned (groups of 2 or more raw
    values; profile layers use the spread about the fit in depth), with the 1:1 line and the
    fitted factor f = sqrt(sum dof s^2 / sum dof sigma^2) (standard error f / sqrt(2 sum dof),
    chi-square sampling of a Gaussian variance, textbook).  Faint dots are single groups;
    those beyond the axes are counted in the panel text.  ``correlation``: sensor -> configured
    within-sensor correlation rho, drawn as the expected sqrt(1 - rho) line when rho > 0."""
    plt = _pyplot()
    groups = []
    for (sensor, quantity), group in superobs.groupby(["sensor", "quantity"], sort=True):
        spec = QUANTITIES.get(quantity)
        profile = spec is not None and not spec.surface
        spread = group["spread_detrended" if profile else "spread"].to_numpy(float)
        raw = group["error_raw_rms"].to_numpy(float)
        dof = group["count"].to_numpy(float) - (2.0 if profile else 1.0)
        ok = (dof >= 1) & np.isfinite(spread) & np.isfinite(raw) & (raw > 0)
        if ok.sum() >= MIN_BIN_COUNT:
            groups.append((sensor, quantity, raw[ok], spread[ok], dof[ok]))
    if not groups:
        return None
    fig, axes = _panels(plt, len(groups), 4.0, 3.6)
    for ax, (sensor, quantity, raw, spread, dof) in zip(axes, groups):
        binned = spread_bins(raw, spread, dof)
        binned = binned[binned["n"] >= MIN_BIN_COUNT]
        factor = float(np.sqrt(np.sum(dof * spread ** 2) / np.sum(dof * raw ** 2)))
        factor_se = factor / np.sqrt(2.0 * dof.sum())
        upper_bins = (binned["spread"] + binned["spread_se"].fillna(0)).max() \
            if len(binned) else np.nan
        right = float(raw.max()) * 1.25
        # the axis holds the bins, the fitted line and 99 % of the single groups; the rest
        # is counted in the title
        top = float(np.nanmax([np.percentile(spread, 99), upper_bins, factor * right,
                               right])) * 1.05
        outside = int(np.sum(spread > top))
        ax.scatter(raw, spread, s=2, color="0.6", alpha=0.25, rasterized=True, zorder=1,
                   label=f"{raw.size} groups")
        line = np.array([0.0, right])
        ax.plot(line, line, "k--", lw=1, label="spread = error (1:1)", zorder=2)
        ax.plot(line, factor * line, "-", color="tab:red", lw=1,
                label=f"fitted: spread = f × error, f = {format_value(factor)} ± "
                      f"{format_value(factor_se, 2)}", zorder=2)
        rho = (correlation or {}).get(sensor, 0.0)
        if 0 < rho < 1:
            # correlated errors hide inside a cell: E[s^2] = (1 - rho) sigma^2, so the
            # summary's spread ratio is f / sqrt(1 - rho)
            ax.plot(line, np.sqrt(1 - rho) * line, ":", color="tab:green", lw=1,
                    label=f"expected with ρ = {rho:g}: √(1 − ρ) × error "
                          f"(f / √(1 − ρ) = {format_value(factor / np.sqrt(1 - rho))})",
                    zorder=2)
        ax.errorbar(binned["error"], binned["spread"], yerr=binned["spread_se"], fmt="o",
                    color="tab:blue", ms=4, capsize=3, zorder=3,
                    label="rms spread per error bin ± standard error")
        ax.set_xlim(0, right)
        ax.set_ylim(0, top)
        units = units_label(quantity)
        ax.set_xlabel(f"assigned raw error, rms ({units})", fontsize=8)
        ax.set_ylabel(f"within-cell spread ({units})", fontsize=8)
        ax.tick_params(labelsize=7)
        note = f"\n{outside} of {raw.size} groups beyond the axes (not drawn)" if outside else ""
        ax.set_title(f"{sensor}: {quantity}{note}", fontsize=8)
        ax.legend(fontsize=6, loc="upper left")
    return _save(plt, fig, path, "spread of the raw values inside cells against their assigned "
                                 "error")


#: colours of the verdict flags in the factor figure
FLAG_COLOURS = {"ok": "tab:green", "too_small": "tab:red", "too_large": "tab:purple",
                "inconclusive": "tab:orange", "no_evidence": "0.5"}


def factor_intervals(summary: pd.DataFrame, path, tolerance: float) -> Path | None:
    """The factor F by which each assigned error should be multiplied, with its interval, one
    row per sensor and quantity on a logarithmic axis, with the tolerance band 1/t..t shaded;
    None when no row has a factor.  Rows without a factor are counted in the title.  Where the
    summary gives no interval, F +- 1.96 standard errors is drawn (normal 95 %, textbook)."""
    plt = _pyplot()
    rows = []
    for _, row in summary.iterrows():  # report rows (sensors), not observations
        f = factor_of(row)
        if np.isfinite(f["factor"]) and f["factor"] > 0:
            low, high = f["low"], f["high"]
            if not (np.isfinite(low) and np.isfinite(high)) and np.isfinite(f["se"]):
                low, high = f["factor"] - 1.96 * f["se"], f["factor"] + 1.96 * f["se"]
            rows.append((f"{row['sensor']}\n{row['quantity']}", f["factor"], low, high,
                         str(row.get("flag", ""))))
    if not rows:
        return None
    missing = len(summary) - len(rows)
    fig, ax = plt.subplots(figsize=(7.5, 0.55 * len(rows) + 1.6), constrained_layout=True)
    positive = [v for r in rows for v in r[1:4] if np.isfinite(v) and v > 0]
    left = min(min(positive), 1.0 / tolerance) / 1.6
    right = max(max(positive), tolerance) * 1.6
    ax.axvspan(1.0 / tolerance, tolerance, color="0.92", zorder=0,
               label=f"within the tolerance, a factor {tolerance:g}")
    ax.axvline(1.0, color="k", lw=0.8, zorder=1)
    clipped = 0
    for y, (_, factor, low, high, flag) in enumerate(rows):
        colour = FLAG_COLOURS.get(flag, "k")
        if np.isfinite(low) and np.isfinite(high):
            shown_low = max(low, left)                  # a lower bound <= 0 runs off the axis
            clipped += int(low < left) + int(high > right)
            ax.plot([shown_low, min(high, right)], [y, y], "-", color=colour, lw=2, zorder=2)
        ax.plot([factor], [y], "o", color=colour, ms=6, zorder=3)
        ax.text(1.02, y, f"F = {format_value(factor)}", ha="left", va="center", fontsize=7,
                transform=ax.get_yaxis_transform())
    for flag in dict.fromkeys(r[4] for r in rows):
        ax.plot([], [], "o-", color=FLAG_COLOURS.get(flag, "k"), label=flag)
    ax.set_xscale("log")
    ax.set_xlim(left, right)
    ax.set_yticks(range(len(rows)), [r[0] for r in rows], fontsize=7)
    ax.invert_yaxis()
    notes = [f"{missing} sensor/quantity rows without a factor not shown"] if missing else []
    if clipped:
        notes.append(f"{clipped} interval ends beyond the axis (cut at its edge)")
    ax.set_xlabel("F: factor by which the assigned error should be multiplied "
                  "(dimensionless, logarithmic)" + "".join(f"\n{n}" for n in notes), fontsize=8)
    ax.legend(fontsize=7, loc="lower left", bbox_to_anchor=(0.0, 1.0), ncol=5, frameon=False)
    return _save(plt, fig, path, "the factor F of each sensor with its 95 % interval")
