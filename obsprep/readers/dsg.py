"""CF discrete sampling geometries: which feature each value of a data variable belongs to.

CF 1.8 chapter 9 and appendix H store a collection of features in four representations:

- orthogonal multidimensional (9.3.1): data(i, o) with coordinates x(i), y(i), t(i), z(o);
- incomplete multidimensional (9.3.2): the same, z(i, o), shorter features padded with missing
  values (9.6);
- contiguous ragged (9.3.3): data(sample) with a *count variable* on the instance dimension
  whose ``sample_dimension`` attribute names the sample dimension;
- indexed ragged (9.3.4): data(sample) with an *index variable* on the sample dimension whose
  ``instance_dimension`` attribute names the instance dimension;

and ``timeSeriesProfile`` / ``trajectoryProfile`` (H.5, H.6) nest two of them (contiguous for
the levels of a profile, indexed for the profiles of a station or trajectory, or the
multidimensional form data(i, p, o)).  A single feature may drop its instance dimension (9.2).

One decoding covers them all: starting from the data variable's own dimensions, every
dimension reachable through count variables (sample -> instance) and index variables
(element -> instance) gets the index of every value along it (:class:`SampleIndex`); any
coordinate whose dimensions are all reachable is then gathered to the values.  Several sample
dimensions in one file are several data-variable layouts, each decoded on its own.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from obsprep.exceptions import InputFileError


class SampleIndex:
    """The index, along every dimension reachable from data variable ``name``, of each of its
    values (flattened in source order).

    ``dims[d]`` is an int64 array of ``var.size`` entries; ``unused`` is True for values in
    storage that belongs to no feature: samples past the sum of the counts, or whose index
    variable holds a missing value (CF 9.3.3, 9.3.4: storage reserved for features not yet
    written).  Raises :class:`InputFileError` naming the count or index variable when it
    cannot describe the sample dimension (counts summing to more than it holds, an index that
    is not a feature number).
    """

    def __init__(self, ds: xr.Dataset, name: str, path):
        var = ds[name]
        self.path = path
        self.shape = var.shape
        self.size = int(var.size)
        grids = np.indices(var.shape).reshape(var.ndim, -1) if var.ndim else np.zeros((0, 1))
        self.dims: dict[str, np.ndarray] = {
            str(d): grids[k].astype(np.int64) for k, d in enumerate(var.dims)}
        self.sizes = {str(d): int(n) for d, n in ds.sizes.items()}
        #: dimension reached through an index variable -> the dimension it is a function of
        self.derived_from: dict[str, str] = {}
        self.unused = np.zeros(self.size, dtype=bool)
        self.ragged = False
        changed = True
        while changed:  # a nested layout (trajectoryProfile) takes two steps
            changed = False
            for var_name, v in ds.variables.items():
                if v.ndim != 1:
                    continue
                (own,) = v.dims
                sample = v.attrs.get("sample_dimension")
                instance = v.attrs.get("instance_dimension")
                if sample in self.dims and own not in self.dims:
                    self.dims[str(own)] = self._from_counts(v, str(var_name), str(sample), ds)
                    changed = self.ragged = True
                elif instance in ds.sizes and own in self.dims and instance not in self.dims:
                    self.dims[str(instance)] = self._from_index(v, str(var_name), str(own),
                                                               ds.sizes[instance])
                    self.derived_from[str(instance)] = str(own)
                    changed = self.ragged = True

    def _from_counts(self, count: xr.Variable, count_name: str, sample: str, ds) -> np.ndarray:
        n = np.asarray(count.values, dtype=np.float64)
        # CF 9.3.3: a feature not yet written has a count of zero or a missing value
        n = np.where(np.isfinite(n), n, 0.0)
        if (n < 0).any() or (n != np.round(n)).any():
            raise InputFileError(self.path, "ragged-array counts must be whole numbers >= 0",
                                 variable=count_name)
        n = n.astype(np.int64)
        size = ds.sizes[sample]
        if int(n.sum()) > size:
            raise InputFileError(self.path, f"ragged-array counts sum to {int(n.sum())} but the "
                                            f"sample dimension '{sample}' has {size} values",
                                 variable=count_name)
        owner = np.full(size, -1, dtype=np.int64)
        owner[:n.sum()] = np.repeat(np.arange(n.size), n)
        per_value = owner[self.dims[sample]]
        self.unused |= per_value < 0
        return np.where(per_value < 0, 0, per_value)

    def _from_index(self, index: xr.Variable, index_name: str, own: str,
                    n_instances: int) -> np.ndarray:
        values = np.asarray(index.values, dtype=np.float64)[self.dims[own]]
        missing = ~np.isfinite(values)
        bad = ~missing & ((values < 0) | (values >= n_instances) | (values != np.round(values)))
        if bad.any():
            raise InputFileError(self.path, f"indexed ragged array: every index must be a feature "
                                            f"number 0..{n_instances - 1} or missing",
                                 variable=index_name)
        # CF 9.3.4: samples not yet written hold a missing index
        self.unused |= missing
        return np.where(missing, 0, values).astype(np.int64)

    def reaches(self, var: xr.DataArray | xr.Variable) -> bool:
        """True when every dimension of ``var`` is reachable (it can be gathered)."""
        return all(d in self.dims for d in var.dims)

    def gather(self, values, dims) -> np.ndarray:
        """``values`` (an array on ``dims``) taken at each data value: a flat array of
        :attr:`size` entries."""
        values = np.asarray(values)
        if not dims:
            return np.broadcast_to(values, (self.size,))
        return values[tuple(self.dims[d] for d in dims)]

    def flat_instance(self, dims) -> np.ndarray:
        """One number per combination of indices along ``dims`` (a feature number: the flat
        index in an array of those dimensions), leaving out a dimension reached through an
        index variable from another of ``dims`` (it adds nothing: the station of a profile)."""
        dims = [d for d in dims if self.derived_from.get(d) not in dims]
        if not dims:
            return np.zeros(self.size, dtype=np.int64)
        return np.ravel_multi_index(tuple(self.dims[d] for d in dims),
                                    [self.sizes[d] for d in dims])


def layouts(ds: xr.Dataset, names) -> list[list[str]]:
    """``names`` (data variables) grouped by their dimensions, in order of first appearance:
    one group per sample layout (a file with several sample dimensions has several)."""
    groups: dict[tuple, list[str]] = {}
    for name in names:
        groups.setdefault(tuple(ds[name].dims), []).append(name)
    return list(groups.values())


def feature_label_variables(ds: xr.Dataset, index: SampleIndex) -> list[str]:
    """The ``cf_role`` variables (trajectory_id, timeseries_id, profile_id; CF 9.5) that can be
    gathered to the values, outer feature first."""
    order = {"trajectory_id": 0, "timeseries_id": 0, "profile_id": 1}
    found = [(order[str(v.attrs.get("cf_role"))], str(n)) for n, v in ds.variables.items()
             if v.attrs.get("cf_role") in order and v.ndim <= 1 and index.reaches(v)]
    return [n for _, n in sorted(found)]
