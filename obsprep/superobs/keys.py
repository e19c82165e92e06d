"""The group keys of super-observations: built and decoded here only.

A super-observation is the group of raw observations that share every key of
:data:`GROUP_KEYS`; the accumulator is indifferent to what the keys mean, and this module is
the one place that gives them meaning:

- ``quantity``: position of the quantity in :data:`obsprep.model.quantities.QUANTITY_NAMES`;
- ``sensor``: position of the output sensor (after merging) in the build's sorted names;
- ``slot``: time slot of the window; ``j``, ``i``: model cell; ``k``: model layer (-1 at the
  surface);
- ``profile``: :func:`profile_key` of the raw value's profile when profiles are averaged one by
  one, else :data:`NO_PROFILE`;
- ``t_start``, ``t_end``: whole seconds from the analysis time of the interval of an interval
  quantity (drift), both 0 for a quantity observed at an instant.

The order of :data:`GROUP_KEYS` is the order in which groups are sorted, so it is part of the
output's row order.

While one file is accumulated, raw values also carry :data:`ERROR_GROUP_KEY`: their error
group (pass, granule or profile: the reader's ``group`` in that file, :func:`profile_key`), so
that errors can be correlated within a group and not across groups; the file's accumulator is
then collapsed over it (:meth:`obsprep.superobs.Accumulator.collapse`), and it never reaches the
output.
"""

from __future__ import annotations

import numpy as np

GROUP_KEYS = ("quantity", "sensor", "slot", "j", "i", "k", "profile", "t_start", "t_end")
#: the key of a raw value's error group inside one file's accumulation
ERROR_GROUP_KEY = "error_group"
#: the profile key of a value that is not averaged per profile
NO_PROFILE = -1
#: bits of the file index above the per-file profile code / row number in the keys
_PROFILE_SHIFT = 32
_ROW_SHIFT = 40


def profile_key(file_index: int, group_code):
    """The key of a profile: the file's index in the task list above the profile's code in
    that file (int64), unique over a night of files."""
    return (np.int64(file_index) << _PROFILE_SHIFT) + group_code


def thinning_tiebreak(file_index: int, row):
    """Which raw value wins a tie of thinning scores: the file's index above its row (int64),
    so the choice does not depend on where or in which order files were processed."""
    return (np.int64(file_index) << _ROW_SHIFT) + np.asarray(row).astype(np.int64)


def interval_keys(t_start_s, t_end_s, constant):
    """``(t_start, t_end)`` keys (int64 whole seconds) from interval start and end offsets in
    seconds; 0 where a value has no interval (``t_end_s`` NaN).  ``constant(v)`` builds an
    array of one value for the rows (no memory per row)."""
    interval = np.isfinite(t_end_s)
    if not interval.any():
        zero = constant(0)
        return zero, zero
    return (np.where(interval, np.round(np.nan_to_num(t_start_s)), 0).astype(np.int64),
            np.where(interval, np.round(np.nan_to_num(t_end_s)), 0).astype(np.int64))


def group_keys(**keys) -> dict:
    """The keys of raw observations in :data:`GROUP_KEYS` order; every key must be given."""
    missing = [name for name in GROUP_KEYS if name not in keys]
    extra = [name for name in keys if name not in GROUP_KEYS]
    if missing or extra:
        raise TypeError(f"group keys: missing {missing}, unknown {extra}")
    return {name: keys[name] for name in GROUP_KEYS}


def decode_group_keys(frame, quantity_names, sensor_names, profile_names) -> dict:
    """Names and values of the finalized groups' keys: ``quantity`` and ``sensor`` names,
    ``slot``, ``i``, ``j``, ``k``, and the ``profile`` name ('' where none)."""
    return {
        "quantity": np.array(quantity_names, dtype=object)[frame["quantity"].to_numpy()],
        "sensor": np.array(sensor_names, dtype=object)[frame["sensor"].to_numpy()],
        "slot": frame["slot"].to_numpy(), "i": frame["i"].to_numpy(), "j": frame["j"].to_numpy(),
        "k": frame["k"].to_numpy(),
        "profile": [profile_names.get(int(p), "") for p in frame["profile"].to_numpy()],
    }
