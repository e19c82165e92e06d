"""The ledger invariant read == kept + sum(rejected)."""

import pytest

from obsprep.exceptions import LedgerError
from obsprep.model.table import make_table, reject
from obsprep.run.ledger import Ledger, LedgerEntry, entry_from_table


def test_entry_from_table_balances():
    t = make_table(5)
    reject(t, [True, False, False, True, False], "land")
    reject(t, [False, True, False, False, False], "outside_window")
    e = entry_from_table(t, "f.nc", "s", "alongtrack", 10)
    assert (e.read, e.kept, e.rejected) == (5, 2, {"land": 2, "outside_window": 1})


def test_unbalanced_entry_is_refused():
    ledger = Ledger()
    with pytest.raises(LedgerError, match="does not balance"):
        ledger.add(LedgerEntry(file="f.nc", sensor="s", read=3, kept=1, rejected={"land": 1}))


def test_frame_has_one_column_per_reason_seen():
    ledger = Ledger()
    ledger.add(LedgerEntry(file="a.nc", sensor="s", read=3, kept=1, rejected={"land": 2}))
    ledger.add(LedgerEntry(file="b.nc", sensor="s", status="unreadable", message="truncated"))
    f = ledger.to_frame()
    assert list(f["rejected_land"]) == [2, 0]
    per = ledger.by_sensor()
    assert int(per["read"].iloc[0]) == 3 and int(per["unreadable"].iloc[0]) == 1


def test_rows_counted_before_the_table_was_compacted_still_balance():
    t = make_table(3)
    reject(t, [False, True, False], "land")
    e = entry_from_table(t, "f.nc", "s", "alongtrack", 10, counted_earlier={"missing_value": 5, "land": 1})
    # hand count: 3 rows in the table + 6 removed earlier
    assert (e.read, e.kept, e.rejected) == (9, 2, {"land": 2, "missing_value": 5})
