"""Representation-error fields on the model grid.

A netCDF file holds one variable per quantity (named in ``superobs.representation_error_variables``)
whose last two dimensions are the grid's (ny, nx) and, for sub-surface quantities, optionally a
leading layer dimension of the grid's nk layers.  Values are 1-sigma errors in the units of the
variable's ``units`` attribute (converted to the quantity's canonical units as a difference) and
are looked up at the super-observation's cell (j, i), or (k, j, i).  Typical content: the
sub-grid standard deviation of the quantity from a higher-resolution run or product.
"""

from __future__ import annotations

import numpy as np

from obsprep.exceptions import InputFileError
from obsprep.model.quantities import QUANTITIES

#: how the representation error of a super-observation is formed (``superobs.representation_model``)
REPRESENTATION_MODELS = ("constant", "sampling")


def sampled_representation_error(sub_cell_sigma, n_samples, cell_area_m2, footprint_m2):
    """Representation error of a cell mean estimated from n raw values (the sampling model).

    The cell is N = cell area / footprint area footprints whose values have the sub-cell
    standard deviation :math:`\\sigma_{sub}` about the cell mean; n of them are observed.  For
    a simple random sample without replacement the error of the sample mean as an estimate of
    the cell mean is [Cochran1977] (from memory)

    .. math::
        \\sigma_r = \\sigma_{sub}\\sqrt{\\left(\\frac1n - \\frac1N\\right)\\frac{N}{N - 1}}

    one value gives :math:`\\sigma_{sub}`, a fully covered cell (n = N) gives 0, and point values
    (footprint 0, N infinite) give :math:`\\sigma_{sub}/\\sqrt n`.  n is capped at N; a
    footprint as large as the cell gives 0.  Values clustered in part of the cell, or a sub-cell
    field correlated over several footprints, make the true error larger than this model says.

    Parameters
    ----------
    sub_cell_sigma : array_like
        :math:`\\sigma_{sub}`, units of the value.
    n_samples : array_like
        n (>= 1): raw values (surface) or profiles (sub-surface) in the super-observation.
    cell_area_m2, footprint_m2 : array_like
        Areas in m^2; footprint 0 for point values.
    """
    sigma = np.asarray(sub_cell_sigma, dtype=np.float64)
    n = np.maximum(np.asarray(n_samples, dtype=np.float64), 1.0)
    footprint = np.asarray(footprint_m2, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        cells = np.where(footprint > 0, np.asarray(cell_area_m2, dtype=np.float64) / footprint,
                         np.inf)
        n = np.minimum(n, cells)
        finite = np.where(cells > 1.0, (1.0 / n - 1.0 / cells) * cells / (cells - 1.0), 0.0)
        factor = np.where(np.isinf(cells), 1.0 / n, finite)
    return sigma * np.sqrt(np.maximum(factor, 0.0))



def load_representation_fields(path, variables: dict, grid_shape, nk: int) -> dict:
    """Read the representation-error fields.

    Parameters
    ----------
    path : path of the netCDF file
    variables : dict
        Quantity name -> variable name.
    grid_shape : (ny, nx)
    nk : int
        Number of model layers.

    Returns
    -------
    dict
        Quantity -> float64 array (ny, nx) or (nk, ny, nx), canonical units of the quantity.

    Raises
    ------
    InputFileError
        Missing file or variable, wrong shape, or units that do not convert.
    """
    import xarray as xr

    from obsprep.readers.cf import values_in_units

    try:
        ds = xr.open_dataset(path, decode_times=False)
    except (OSError, ValueError) as exc:
        raise InputFileError(path, f"cannot open the representation-error file ({exc})") from exc
    fields = {}
    with ds:
        for quantity, name in variables.items():
            if name not in ds.variables:
                raise InputFileError(path, f"no variable '{name}' for {quantity}; variables: "
                                           f"{', '.join(map(str, ds.variables))}", variable=name)
            da = ds[name]
            shape = tuple(da.shape)
            ok_2d = shape == tuple(grid_shape)
            ok_3d = len(shape) == 3 and shape[1:] == tuple(grid_shape) and shape[0] == nk
            if not (ok_2d or ok_3d):
                raise InputFileError(path, f"expected shape (ny, nx) = {tuple(grid_shape)} or "
                                           f"(nk, ny, nx) = {(nk, *grid_shape)}, found {shape}",
                                     variable=name)
            canonical = QUANTITIES[quantity].units
            fields[quantity] = values_in_units(da, canonical, path, QUANTITIES[quantity],
                                               difference=True, default_units=canonical)
    return fields


def representation_at(field: np.ndarray, j, i, k, path, variable) -> np.ndarray:
    """Values of ``field`` at cells (j, i) (2-D field) or (k, j, i) (3-D field).

    Raises InputFileError when a value needed is missing (NaN) or negative.
    """
    values = field[k, j, i] if field.ndim == 3 else field[j, i]
    bad = ~(np.isfinite(values) & (values >= 0))
    if bad.any():
        first = int(np.flatnonzero(bad)[0])
        raise InputFileError(path, f"{int(bad.sum())} super-observation cell(s) have no valid "
                                   f"representation error (first at j={j[first]}, i={i[first]}: "
                                   f"{values[first]!r}); expected finite values >= 0",
                             variable=variable)
    return values
