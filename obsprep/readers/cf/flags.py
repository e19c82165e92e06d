"""CF flags: masks from flag_values, flag_masks and flag_meanings, read tolerantly.

Meanings are compared by :func:`meaning_key`: without regard to case or separators, and a
trailing word ``data``/``value``/``values`` ignored, so ``Probably_good_data``,
``probably-good`` and ``PROBABLY GOOD`` are one meaning.  Attribute quirks of a flag variable a
reader needs are read in the most sensible way and recorded as per-file warnings
(:func:`obsprep.readers.cf.quirks.file_warning`): ``flag_values``/``flag_masks`` and
``flag_meanings`` of unequal length use the pairs that exist; numbers written as a string
(``"0b, 1b, 2b"``) are parsed.  A flag variable with no meanings or no values/masks cannot be
read at all: :class:`FlagAttributesMissing` (an :class:`InputFileError`), which a caller that
can do without the variable catches (:func:`usable_flag_variable`).
"""

from __future__ import annotations

import re

import numpy as np
import xarray as xr

from obsprep.exceptions import InputFileError
from obsprep.readers.cf.quirks import file_warning

#: trailing words that add nothing to a flag meaning (``good_data`` is ``good``)
_NOISE_WORDS = ("data", "value", "values")


def meaning_key(meaning: str) -> str:
    """The comparison form of a flag meaning: lower case, words joined by ``_``, a trailing
    ``data``/``value``/``values`` dropped (``"Probably_good_data"`` -> ``"probably_good"``)."""
    words = re.findall(r"[a-z0-9]+", str(meaning).lower())
    if len(words) > 1 and words[-1] in _NOISE_WORDS:
        words = words[:-1]
    return "_".join(words)


def meaning_words(meaning: str) -> list[str]:
    """The words of a flag meaning, lower case, every one kept (``"No_data"`` -> no, data)."""
    return re.findall(r"[a-z0-9]+", str(meaning).lower())


class FlagAttributesMissing(InputFileError):
    """A flag variable without ``flag_meanings`` or without ``flag_values``/``flag_masks``."""


def has_flag_attributes(var: xr.DataArray) -> bool:
    """True when ``var`` carries any CF flag attribute (``flag_values``, ``flag_masks``,
    ``flag_meanings``)."""
    return any(a in var.attrs for a in ("flag_values", "flag_masks", "flag_meanings"))


def _numbers(entries, attr, name) -> np.ndarray:
    """A flag attribute as int64; numbers written in a string are parsed (with a warning)."""
    if not isinstance(entries, (str, bytes)):
        array = np.atleast_1d(np.asarray(entries))
        if array.dtype.kind in "biuf":
            return array.astype(np.int64)
        entries = " ".join(str(e) for e in array.ravel())  # strings: parse them below
    text = entries.decode(errors="replace") if isinstance(entries, bytes) else entries
    found = re.findall(r"[-+]?\d+", text)
    file_warning(f"{attr} is the string {text!r}, not numbers; read as "
                 f"{' '.join(found) or 'nothing'}", variable=name)
    return np.array([int(f) for f in found], dtype=np.int64)


def _flag_table(flag: xr.DataArray, path):
    """(meanings, states or None, masks or None), lengths reconciled (with a warning)."""
    name = flag.name
    meanings = str(flag.attrs.get("flag_meanings", "")).split()
    masks = flag.attrs.get("flag_masks")
    values = flag.attrs.get("flag_values")
    if (masks is None and values is None) or not meanings:
        raise FlagAttributesMissing(path, "flag variable needs flag_meanings and flag_values or "
                                          "flag_masks (CF 3.5)", variable=name)
    masks = None if masks is None else _numbers(masks, "flag_masks", name)
    values = None if values is None else _numbers(values, "flag_values", name)
    n = min(len(meanings), *(len(e) for e in (masks, values) if e is not None))
    for attr, entries in (("flag_masks", masks), ("flag_values", values)):
        if entries is not None and len(entries) != len(meanings):
            file_warning(f"{attr} has {len(entries)} entries but flag_meanings has "
                         f"{len(meanings)} words; the first {n} pairs are used", variable=name)
    return (meanings[:n], None if values is None else values[:n],
            None if masks is None else masks[:n])


def flag_meaning_masks(flag: xr.DataArray, path, only=None, raw=None) -> dict[str, np.ndarray]:
    """Meaning -> boolean array (the flag's shape), True where that state or bit is set.

    CF 3.5: with ``flag_values`` only, meaning m is set where ``value == flag_values[m]``; with
    ``flag_masks`` only, where ``value & flag_masks[m] != 0``; with both, where
    ``value & flag_masks[m] == flag_values[m]``.  A fill (NaN) flag sets nothing.  Keys are the
    meanings in comparison form (:func:`meaning_key`); ``only`` (meanings, compared the same
    way) limits the result to those.  ``raw`` replaces the variable's values (the stored
    values of a packed data variable carrying its own flags).  Raises
    :class:`FlagAttributesMissing` naming the variable when the attributes are missing.
    """
    meanings, states, bits = _flag_table(flag, path)
    raw = np.asarray(flag.values if raw is None else raw)
    if raw.dtype.kind in "iu":
        finite = None  # integer flags have no fill left to mask
        ints = raw  # bit tests in the file's own integer type: no widened copy per pixel
    else:
        raw = raw.astype(np.float64, copy=False)
        finite = np.isfinite(raw)
        ints = np.where(finite, raw, 0).astype(np.int64)
    if bits is not None:
        # the masks in the flags' own type (the same bits; CF gives them that type anyway)
        bits = bits.astype(ints.dtype)
    wanted = None if only is None else {meaning_key(m) for m in only}
    out: dict[str, np.ndarray] = {}
    for k, meaning in enumerate(meanings):  # loop over the few meanings, not the observations
        key = meaning_key(meaning)
        if wanted is not None and key not in wanted:
            continue
        if bits is None:
            is_set = ints == states[k]
        elif states is None:
            is_set = (ints & bits[k]) != 0
        else:
            is_set = (ints & bits[k]) == states[k]
        if finite is not None:
            is_set &= finite
        out[key] = out[key] | is_set if key in out else is_set
    return out


def good_flag_mask(flag: xr.DataArray, good_meanings, path) -> np.ndarray:
    """Boolean array, True where the CF flag variable ``flag`` says "good".

    CF 3.5: ``flag_meanings`` names each entry of ``flag_values`` (mutually exclusive states)
    or of ``flag_masks`` (bit fields; with both attributes a state is set when
    ``value & mask == flag_value``, with masks only when ``value & mask != 0``).
    With ``flag_values`` a value is good when its meaning is in ``good_meanings``; with
    ``flag_masks`` a value is good when every meaning set in it is in ``good_meanings``
    (a value with no bit set is good).  A fill (NaN) flag is not good: the provider gave no
    verdict.  Meanings are compared by :func:`meaning_key` (case, separators and a trailing
    ``data`` ignored).
    """
    good_meanings = {meaning_key(m) for m in good_meanings}
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


def meaning_matches(meaning: str, terms) -> bool:
    """True when the flag ``meaning`` names one of ``terms``: the words of a term (comparison
    form) appear in the meaning's words in order, each a prefix of one meaning word
    (``land`` matches ``land_mask``, ``lake`` matches ``lakes``, ``coast`` ``coastal``,
    ``pole_hole`` ``pole_hole``)."""
    words = meaning_words(meaning)
    for term in terms:
        wanted = meaning_words(term)
        if not wanted:
            continue
        for start in range(len(words) - len(wanted) + 1):
            if all(words[start + i].startswith(w) for i, w in enumerate(wanted)):
                return True
    return False


#: meaning words saying a provider's filter set the value (valid, usually zero): never rejected
#: by a list of surface or missing-data meanings (``land_spill_over_filtered`` is a valid zero)
FILTER_WORDS = ("filter",)


def is_filter_meaning(meaning: str) -> bool:
    """True when the meaning says a filter of the provider set the value (a word beginning
    with ``filter``: ``filtered``, ``filter_applied``): a valid value, not a missing one."""
    return any(w.startswith(FILTER_WORDS) for w in meaning_words(meaning))


def rejected_by_meanings(flag: xr.DataArray, reject_meanings, path, raw=None) -> np.ndarray:
    """Boolean array (the flag's shape), True where a set state or bit has a meaning matching
    one of ``reject_meanings`` (:func:`meaning_matches`), filter meanings excepted
    (:func:`is_filter_meaning`).  A fill flag rejects nothing (no verdict to act on)."""
    masks = flag_meaning_masks(flag, path, raw=raw)
    out = np.zeros(np.shape(flag.values if raw is None else raw), dtype=bool)
    for meaning, is_set in masks.items():
        if meaning_matches(meaning, reject_meanings) and not is_filter_meaning(meaning):
            out |= is_set
    return out


def usable_flag_variable(flag: xr.DataArray, path) -> bool:
    """True when ``flag`` has the attributes to be read as CF flags; otherwise record a per-file
    warning that it is not used (a QA variable without meanings never refuses a file)."""
    try:
        _flag_table(flag, path)
    except FlagAttributesMissing:
        present = [a for a in flag.attrs if a.startswith("flag")]
        file_warning("flag variable not used: it needs flag_meanings and flag_values or "
                     "flag_masks (CF 3.5)" + (f"; it has {', '.join(present)}" if present else
                                              "; it has no flag attributes"),
                     variable=flag.name)
        return False
    return True
