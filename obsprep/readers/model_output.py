"""Signs that a file is model output, not observations.

A model ensemble or a model run on its own grid looks, to a CF-generic reader, like one more
grid of values with a standard_name: the demo's ensemble of 20 members became 4.7 million
"SST observations".  Observation readers therefore refuse a file carrying any of the signs
below, from its metadata alone, whatever kind is asked for; ``obsprep audit --ensemble`` reads
ensembles through its own code (:mod:`obsprep.audit.ensemble`) and is not concerned.

The signs (each general, none tied to one product):

- an ensemble dimension: a dimension named for ensemble members or realizations
  (:data:`ENSEMBLE_DIMENSION_NAMES`, case-insensitive, also as a prefix such as
  ``member_id``);
- a variable with CF standard_name ``realization`` (CF standard name table: it labels the
  members of an ensemble), a scalar one included: one member of an ensemble is model output;
- a variable with CF standard_name ``forecast_period`` or ``forecast_reference_time`` (CF
  standard name table: the lead time and the analysis time of a forecast);
- a ``cell_methods`` entry over ``realization`` (an ensemble mean or spread, CF 1.8 section
  7.3, where a cell method may name a standard_name);
- a CF parametric vertical coordinate: a ``formula_terms`` attribute (CF 1.8 section 4.3.3 and
  appendix D: sigma, s- and hybrid coordinates are model levels);
- a model mesh or staggered-grid topology: a variable with ``cf_role`` ``mesh_topology``
  (UGRID 1.0) or ``grid_topology`` (SGRID 0.3);
- global attributes of the CMIP6 model-output conventions (CMIP6 global attributes document,
  from memory): ``realization_index``, or a ``source_type`` naming a model type such as AOGCM
  or OGCM (:data:`MODEL_SOURCE_TYPES`).  Observation sets under the same conventions
  (obs4MIPs, ``source_type`` "satellite_retrieval") do not carry these.

A reader profile (``[sources.reader.attributes]``) can remove an attribute sign (e.g.
``standard_name = false``) for a file wrongly taken for model output; a dimension cannot be
renamed that way.
"""

from __future__ import annotations

import xarray as xr

from obsprep.exceptions import NotObservationsError

#: dimension names (lower case) that mark ensemble members or realizations; a dimension whose
#: name starts with one of them (``member_id``, ``ensemble_member``) counts too (common practice)
ENSEMBLE_DIMENSION_NAMES = ("member", "members", "ensemble", "realization", "realisation", "ens",
                            "mem")
#: prefixes of ensemble dimension names (``ens`` and ``mem`` only as whole names: too short)
ENSEMBLE_PREFIXES = ("member", "ensemble", "realization", "realisation")
#: CF standard names that only model output carries (CF standard name table)
MODEL_STANDARD_NAMES = {
    "realization": "ensemble realization",
    "forecast_period": "forecast lead time",
    "forecast_reference_time": "forecast reference (analysis) time",
}
#: ``cf_role`` values of model mesh conventions (UGRID 1.0, SGRID 0.3)
MODEL_CF_ROLES = {"mesh_topology": "UGRID model mesh", "grid_topology": "SGRID staggered grid"}
#: CMIP6 ``source_type`` values that name a model (CMIP6 controlled vocabulary, from memory)
MODEL_SOURCE_TYPES = ("AGCM", "AOGCM", "OGCM", "ESM", "BGC", "CHEM", "AER", "ISM", "LAND",
                      "RAD", "SLAB")
#: global attributes whose presence marks CMIP6 model output (from memory)
MODEL_GLOBAL_ATTRIBUTES = ("realization_index",)


def _is_ensemble_dimension(name: str) -> bool:
    lowered = str(name).lower()
    return lowered in ENSEMBLE_DIMENSION_NAMES or lowered.startswith(ENSEMBLE_PREFIXES)


def model_output_signs(ds: xr.Dataset) -> list[str]:
    """The signs that ``ds`` is model output (see the module docstring), each a short phrase
    naming the dimension, variable or attribute; empty for an observation file.  Metadata
    only: no data is read."""
    signs = [f"dimension '{name}' (ensemble members)" for name in ds.sizes
             if _is_ensemble_dimension(name)]
    for name, variable in ds.variables.items():
        attrs = variable.attrs
        standard_name = str(attrs.get("standard_name", "")).strip()
        if standard_name in MODEL_STANDARD_NAMES:
            signs.append(f"variable '{name}' with standard_name {standard_name} "
                         f"({MODEL_STANDARD_NAMES[standard_name]})")
        methods = str(attrs.get("cell_methods", ""))
        if "realization:" in methods.replace(" :", ":"):
            signs.append(f"variable '{name}' with cell_methods over realization "
                         "(ensemble statistic)")
        if "formula_terms" in attrs:
            signs.append(f"variable '{name}' with formula_terms (model vertical coordinate)")
        role = str(attrs.get("cf_role", "")).strip()
        if role in MODEL_CF_ROLES:
            signs.append(f"variable '{name}' with cf_role {role} ({MODEL_CF_ROLES[role]})")
    for attribute in MODEL_GLOBAL_ATTRIBUTES:
        if attribute in ds.attrs:
            signs.append(f"global attribute '{attribute}' (model output conventions)")
    source_types = str(ds.attrs.get("source_type", "")).upper().split()
    named = [t for t in source_types if t in MODEL_SOURCE_TYPES]
    if named:
        signs.append(f"global attribute source_type '{' '.join(named)}' (a model)")
    return signs


def refuse_model_output(ds: xr.Dataset, path) -> None:
    """Raise :class:`~obsprep.exceptions.NotObservationsError` (one line naming the file and
    the signs) when ``ds`` is model output; return None for an observation file."""
    signs = model_output_signs(ds)
    if signs:
        raise NotObservationsError(
            path, "not observations: " + "; ".join(signs) + " mark(s) model output; obsprep "
                  "reads observation files (a model ensemble goes to obsprep audit --ensemble)")
