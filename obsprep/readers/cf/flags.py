"""CF flags: masks from flag_values, flag_masks and flag_meanings."""

from __future__ import annotations

import numpy as np
import xarray as xr

from obsprep.exceptions import InputFileError


def good_flag_mask(flag: xr.DataArray, good_meanings, path) -> np.ndarray:
    """Boolean array, True where the CF flag variable ``flag`` says "good".

    CF 3.5: ``flag_meanings`` names each entry of ``flag_values`` (mutually exclusive states)
    or of ``flag_masks`` (bit fields; with both attributes a state is set when
    ``value & mask == flag_value``, with masks only when ``value & mask != 0``).
    With ``flag_values`` a value is good when its meaning is in ``good_meanings``; with
    ``flag_masks`` a value is good when every meaning set in it is in ``good_meanings``
    (a value with no bit set is good).  A fill (NaN) flag is not good: the provider gave no
    verdict.  Meanings are compared case-insensitively.
    """
    good_meanings = {m.lower() for m in good_meanings}
    set_by_meaning = flag_meaning_masks(flag, path)
    finite = np.isfinite(np.asarray(flag.values, dtype=np.float64))
    if flag.attrs.get("flag_masks") is None:  # exclusive states: good when a good state is set
        good = np.zeros(finite.shape, dtype=bool)
        for meaning, is_set in set_by_meaning.items():
            if meaning in good_meanings:
                good |= is_set
        return good
    bad = np.zeros(finite.shape, dtype=bool)  # bit fields: good when no bad bit is set
    for meaning, is_set in set_by_meaning.items():
        if meaning not in good_meanings:
            bad |= is_set
    return finite & ~bad


def flag_meaning_masks(flag: xr.DataArray, path, only=None) -> dict[str, np.ndarray]:
    """Meaning -> boolean array (the flag's shape), True where that state or bit is set.

    CF 3.5: with ``flag_values`` only, meaning m is set where ``value == flag_values[m]``; with
    ``flag_masks`` only, where ``value & flag_masks[m] != 0``; with both, where
    ``value & flag_masks[m] == flag_values[m]``.  A fill (NaN) flag sets nothing.  Meanings are
    lower-cased.  ``only`` (meanings) limits the result to those meanings.  Raises
    :class:`InputFileError` naming the variable when the attributes are missing or their
    lengths disagree.
    """
    name = flag.name
    meanings = str(flag.attrs.get("flag_meanings", "")).lower().split()
    masks = flag.attrs.get("flag_masks")
    values = flag.attrs.get("flag_values")
    if (masks is None and values is None) or not meanings:
        raise InputFileError(path, "flag variable needs flag_meanings and flag_values or "
                                   "flag_masks (CF 3.5)", variable=name)
    for attr, entries in (("flag_masks", masks), ("flag_values", values)):
        if entries is not None and np.size(entries) != len(meanings):
            raise InputFileError(
                path, f"{attr} has {np.size(entries)} entries but flag_meanings has "
                      f"{len(meanings)} words", variable=name)
    raw = np.asarray(flag.values)
    if raw.dtype.kind in "iu":
        finite = None  # integer flags have no fill left to mask
        ints = raw  # bit tests in the file's own integer type: no widened copy per pixel
    else:
        raw = raw.astype(np.float64, copy=False)
        finite = np.isfinite(raw)
        ints = np.where(finite, raw, 0).astype(np.int64)
    states = None if values is None else np.atleast_1d(values).astype(np.int64)
    # the masks in the flags' own type (the same bits; CF gives them that type anyway)
    bits = None if masks is None else np.atleast_1d(masks).astype(np.int64).astype(ints.dtype)
    wanted = None if only is None else {str(m).lower() for m in only}
    out: dict[str, np.ndarray] = {}
    for k, meaning in enumerate(meanings):  # loop over the few meanings, not the observations
        if wanted is not None and meaning not in wanted:
            continue
        if bits is None:
            is_set = ints == states[k]
        elif states is None:
            is_set = (ints & bits[k]) != 0
        else:
            is_set = (ints & bits[k]) == states[k]
        if finite is not None:
            is_set &= finite
        out[meaning] = out[meaning] | is_set if meaning in out else is_set
    return out
