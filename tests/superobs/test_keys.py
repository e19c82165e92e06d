"""Group keys: built in one order, profile keys unique over a night, decoding back to names."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from obsprep.superobs.keys import (
    GROUP_KEYS,
    NO_PROFILE,
    decode_group_keys,
    group_keys,
    profile_key,
    thinning_tiebreak,
)


def test_group_keys_come_in_the_declared_order_and_must_all_be_given():
    given = {name: np.arange(3) for name in reversed(GROUP_KEYS)}
    assert tuple(group_keys(**given)) == GROUP_KEYS
    del given["slot"]
    with pytest.raises(TypeError, match="slot"):
        group_keys(**given)


def test_profile_and_tiebreak_keys_are_unique_across_files():
    files = np.repeat(np.arange(5), 4)
    codes = np.tile([0, 1, 2**31 - 1, 7], 5)
    profiles = [int(profile_key(int(f), int(c))) for f, c in zip(files, codes)]
    # reference: pandas' count of distinct (file, code) pairs
    assert len(set(profiles)) == len(pd.MultiIndex.from_arrays([files, codes]).unique())
    assert NO_PROFILE not in profiles
    rows = np.tile([0, 5, 2**39 - 1, 9], 5)
    ties = [int(thinning_tiebreak(int(f), r)) for f, r in zip(files, rows)]
    assert len(set(ties)) == len(pd.MultiIndex.from_arrays([files, rows]).unique())


def test_decoding_gives_names_back():
    frame = pd.DataFrame({"quantity": [1, 0], "sensor": [0, 1], "slot": [0, 2], "i": [3, 4],
                          "j": [5, 6], "k": [-1, 2], "profile": [NO_PROFILE, int(profile_key(2, 1))]})
    decoded = decode_group_keys(frame, ["a", "b"], ["s0", "s1"], {int(profile_key(2, 1)): "p"})
    assert list(decoded["quantity"]) == ["b", "a"] and list(decoded["sensor"]) == ["s0", "s1"]
    assert decoded["profile"] == ["", "p"]
