"""Model layers: depth interfaces and the layer that holds a depth."""

from __future__ import annotations

import numpy as np

from obsprep.exceptions import GridError
from obsprep.geo.grid.limits import MAX_LAYERS

#: One layer from the surface to 10 km: every ocean depth is in layer 0.
DEFAULT_LAYER_INTERFACES_M = (0.0, 1.0e4)

def layer_interfaces_from_depths(depths) -> np.ndarray:
    """Validate layer interface depths and return them as a float64 array of shape (nk + 1,).

    ``depths`` in m, positive down: the first must be 0 (the sea surface), the values strictly
    increasing and finite, at least two of them (one layer), at most :data:`MAX_LAYERS` layers.
    Raises :class:`GridError` otherwise.
    """
    try:
        interfaces = np.asarray(depths, dtype=float)
    except (TypeError, ValueError) as exc:
        raise GridError(f"layer interfaces must be a list of depths in m, got {depths!r}") from exc
    if interfaces.ndim != 1 or interfaces.size < 2:
        raise GridError("layer interfaces must be a list of at least two depths in m (0 first), "
                        f"got {depths!r}")
    if interfaces.size - 1 > MAX_LAYERS:
        raise GridError(f"{interfaces.size - 1} layers exceed the limit of {MAX_LAYERS} layers "
                        "(MAX_LAYERS)")
    if not np.all(np.isfinite(interfaces)):
        raise GridError(f"layer interfaces must be finite depths in m, got {depths!r}")
    if interfaces[0] != 0.0:
        raise GridError("the first layer interface must be 0 m (the surface), "
                        f"got {interfaces[0]!r}")
    steps = np.diff(interfaces)
    if np.any(steps <= 0.0):
        bad = int(np.argmax(steps <= 0.0))
        raise GridError("layer interfaces must increase strictly with depth; interface "
                        f"{bad + 1} ({interfaces[bad + 1]} m) follows {interfaces[bad]} m")
    return interfaces


def layer_index_from_depth(depth, interfaces) -> np.ndarray:
    """Index k of the layer holding each depth: ``interfaces[k] <= depth < interfaces[k+1]``.

    ``depth`` in m positive down, any shape; ``interfaces`` as returned by
    :func:`layer_interfaces_from_depths`.  Returns int64 of the same shape, -1 where the depth
    is NaN, negative (above the surface) or at/below the deepest interface.
    """
    depth = np.asarray(depth, dtype=float)
    k = np.searchsorted(interfaces, depth, side="right").astype(np.int64) - 1
    inside = (depth >= interfaces[0]) & (depth < interfaces[-1])  # False for NaN
    return np.where(inside, k, np.int64(-1))
