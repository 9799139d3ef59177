"""Hand-worked checks of the start-stop container's contract checks."""

import numpy as np
import pandas as pd
import pytest

from retain import DataError, StartStop


def frame(**over):
    base = dict(customer_id=["a", "a", "b"], spell=[1, 1, 1], start=[0.0, 5.0, 0.0],
                stop=[5.0, 9.0, 3.0], churned=[0, 1, 0], cause=["", "voluntary", ""],
                plan=["x", "y", "x"], price=[1.0, 2.0, 1.0])
    base.update(over)
    return pd.DataFrame(base)


def test_round_trip_keeps_every_column():
    t = StartStop.from_frame(frame())
    back = t.to_frame()
    assert list(back["customer_id"]) == ["a", "a", "b"]
    assert list(back["cause"]) == ["", "voluntary", ""]
    assert t.is_categorical("plan") and not t.is_categorical("price")
    assert t.n_customers == 2 and t.n_events == 1.0
    assert list(t.last_of_spell) == [False, True, True]


@pytest.mark.parametrize("over, text", [
    (dict(start=[0.0, 5.0, 3.0]), "start must be < stop"),
    (dict(weight=[1.0, 0.0, 1.0]), "weights must be finite and > 0"),
    (dict(weight=[1.0, -2.0, 1.0]), "weights must be finite and > 0"),
    (dict(start=[0.0, 4.0, 0.0]), "intervals overlap within a spell: customer 'a'"),
    (dict(churned=[1, 1, 0], cause=["voluntary", "voluntary", ""]), "not the last of its spell"),
    (dict(churned=[0, 1, 2]), "churned must be 0 or 1"),
    (dict(cause=["", "bored", ""]), "cause must be one of"),
    (dict(cause=["voluntary", "voluntary", ""]), "cause is set on a row that did not churn"),
])
def test_contract_violations_name_the_rule(over, text):
    with pytest.raises(DataError, match=text):
        StartStop.from_frame(frame(**over))


def test_expanded_repeats_rows_by_weight():
    t = StartStop.from_frame(frame(weight=[2.0, 2.0, 3.0]))
    e = t.expanded()
    assert e.n_rows == 7 and np.all(e.weight == 1.0)
