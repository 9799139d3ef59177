"""Hand-worked checks of the start-stop container's contract checks."""

import numpy as np
import pandas as pd
import pytest

from retain import Categorical, DataError, StartStop


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


# ---------------------------------------------------------------- from_frame, column by column
def _same_table(a: StartStop, b: StartStop) -> None:
    """Every array, code and level equal (the Arrow route is the second implementation)."""
    for name in ("start", "stop", "churned", "weight", "spell"):
        np.testing.assert_array_equal(getattr(a, name), getattr(b, name), err_msg=name)
    for name in ("customer", "cause"):
        np.testing.assert_array_equal(getattr(a, name).codes, getattr(b, name).codes)
        assert getattr(a, name).levels == getattr(b, name).levels, name
    assert list(a.covariates) == list(b.covariates)
    for name, col in a.covariates.items():
        other = b.covariates[name]
        assert type(col) is type(other), name
        if hasattr(col, "codes"):
            np.testing.assert_array_equal(col.codes, other.codes, err_msg=name)
            assert col.levels == other.levels, name
        else:
            np.testing.assert_array_equal(col, other, err_msg=name)
    if a.start_date is None:
        assert b.start_date is None
    else:
        np.testing.assert_array_equal(a.start_date, b.start_date)


def _random_frame(seed: int, n: int = 300):
    rng = np.random.default_rng(seed)
    ids = np.sort(rng.integers(0, 60, n))
    k = np.zeros(n)
    for i in range(1, n):  # contiguous rows within a customer
        k[i] = k[i - 1] + 1 if ids[i] == ids[i - 1] else 0
    last = np.r_[ids[1:] != ids[:-1], True]
    churned = (last & (rng.random(n) < 0.5)).astype(int)
    text = np.array(["Seedling", "Bloom", "Orchard", "", "Ünïcode", "b", "B"], dtype=object)
    plan = text[rng.integers(0, len(text), n)]
    plan[rng.random(n) < 0.1] = None  # missing
    df = pd.DataFrame({
        "customer_id": np.array([f"c{i:03d}" if seed % 3 else f"id-{60 - i}" for i in ids],
                                dtype=object),
        "spell": 1, "start": k * 10.0, "stop": k * 10.0 + 10.0, "churned": churned,
        "cause": np.where(churned == 1, "voluntary", "").astype(object),
        "weight": rng.integers(1, 4, n).astype(float),
        "start_date": np.datetime64("2024-01-01") + rng.integers(0, 300, n).astype("m8[D]"),
        "plan": plan,
        "price": rng.choice([10.0, np.nan, 20.0], n),
        "count": rng.integers(0, 5, n),
        "flag": rng.random(n) < 0.3,
    })
    # odd seeds: rows ordered by customer (as prepare writes them); even: shuffled
    return df if seed % 2 else df.iloc[rng.permutation(n)].reset_index(drop=True)


@pytest.mark.parametrize("seed", range(6))
def test_from_frame_equals_the_arrow_route(seed):
    """Column-by-column conversion gives what `from_arrow(pa.Table.from_pandas(frame))` gives:
    object text, Arrow-backed text and pandas categoricals, shuffled or ordered rows."""
    import pyarrow as pa

    df = _random_frame(seed)
    reference = StartStop.from_arrow(pa.Table.from_pandas(df, preserve_index=False))
    _same_table(StartStop.from_frame(df), reference)
    arrow_text = df.astype({"customer_id": "string[pyarrow]", "plan": "string[pyarrow]",
                            "cause": "string[pyarrow]"})
    _same_table(StartStop.from_frame(arrow_text), reference)
    as_category = df.astype({"plan": "category", "customer_id": "category"})
    as_category["plan"] = as_category["plan"].cat.add_categories(["never used"])
    _same_table(StartStop.from_frame(as_category), reference)
    nullable = df.astype({"count": "Int64", "flag": "boolean"})
    _same_table(StartStop.from_frame(nullable), reference)


def test_numeric_customer_ids_stay_numbers():
    df = frame(customer_id=[10, 10, 9])
    t = StartStop.from_frame(df)
    # numeric order (9 before 10), not text order ("10" before "9")
    assert t.customer.levels == (9, 10) and list(t.customer.codes) == [1, 1, 0]
    assert t.n_customers == 2
    back = t.to_arrow()
    assert back.column("customer_id").type == "int64"
    assert back.column("customer_id").to_pylist() == [10, 10, 9]
    again = StartStop.from_arrow(back)  # a Parquet round trip keeps them numbers too
    assert again.customer.levels == (9, 10)
    with pytest.raises(DataError, match="customer 10 spell 1"):
        StartStop.from_frame(frame(customer_id=[10, 10, 9], start=[0.0, 4.0, 0.0]))


def test_from_frame_messages():
    with pytest.raises(DataError, match="required column 'stop' is missing"):
        StartStop.from_frame(frame().drop(columns="stop"))
    with pytest.raises(DataError, match="column 'start' must be numeric"):
        StartStop.from_frame(frame(start=["zero", "five", "zero"]))
    twice = pd.concat([frame(), frame()[["plan"]]], axis=1)
    with pytest.raises(DataError, match="column names repeat: plan"):
        StartStop.from_frame(twice)


def test_from_frame_does_not_share_memory_with_the_frame():
    df = frame()
    t = StartStop.from_frame(df)
    t.start[0] = 99.0
    t.numeric("price")[0] = 99.0
    assert df["start"].iloc[0] == 0.0 and df["price"].iloc[0] == 1.0


@pytest.mark.parametrize("ids, levels, codes", [
    ([3, 3, 7, 7, 12], (3, 7, 12), [0, 0, 1, 1, 2]),       # sorted: codes by runs
    ([3, 7, 3, 12, 12], (3, 7, 12), [0, 1, 0, 2, 2]),      # a run repeats: hashed instead
    (["b", "b", "a", "c", "c"], ("a", "b", "c"), [1, 1, 0, 2, 2]),
    (["a", "a", "b", None, None], ("a", "b"), [0, 0, 1, -1, -1]),  # missing: hashed
])
def test_customer_codes_by_runs_or_by_hashing_agree(ids, levels, codes):
    """Hand-worked: each id's code is its rank among the distinct ids."""
    c = Categorical.from_series(pd.Series(ids, dtype=object)) if None in ids else None
    df = pd.DataFrame({"customer_id": ids, "spell": range(1, 6), "start": 0.0, "stop": 1.0,
                       "churned": 0})
    t = StartStop.from_frame(df)
    assert t.customer.levels == levels and list(t.customer.codes) == codes
    if c is not None:
        assert c.levels == levels and list(c.codes) == codes


def test_object_columns_of_numbers_are_numeric_as_on_the_arrow_route():
    import pyarrow as pa

    df = frame(price=pd.Series([1.5, None, 2.0], dtype=object),
               flag=pd.Series([True, False, True], dtype=object),
               count=pd.Series([1, 2, 3], dtype=object))
    t = StartStop.from_frame(df)
    _same_table(t, StartStop.from_arrow(pa.Table.from_pandas(df, preserve_index=False)))
    np.testing.assert_array_equal(t.numeric("price"), [1.5, np.nan, 2.0])
    np.testing.assert_array_equal(t.numeric("flag"), [1.0, 0.0, 1.0])
    with pytest.raises(DataError, match="column 'plan' mixes kinds of values"):
        StartStop.from_frame(frame(plan=pd.Series(["x", 2, "x"], dtype=object)))


def _copies(texts):
    """Equal text in a new object each time (as text built row by row is)."""
    return ["".join(list(t)) if t else t for t in texts]


@pytest.mark.parametrize("case", ["shared", "equal copies", "missing", "distinct", "strided"])
def test_factorizing_by_object_identity_equals_pandas_factorize(case):
    """The identity-first coding is held to pandas.factorize itself (the reference)."""
    from retain.data.table import _SAMPLE, _factorize_objects

    rng = np.random.default_rng(7)
    n = 3 * _SAMPLE
    levels = np.array(["Seedling", "Bloom", "Orchard", ""], dtype=object)
    values = levels[rng.integers(0, 4, n)]  # one object per level
    if case == "equal copies":  # a few rows hold equal text in other objects: merged by value
        pick = rng.choice(n, 40, replace=False)
        values[pick] = np.array(_copies(values[pick]), dtype=object)
    if case == "missing":
        values[rng.random(n) < 0.1] = None
        values[rng.random(n) < 0.05] = float("nan")
    if case == "distinct":
        values = np.array([f"c{i % 5000}" for i in range(n)], dtype=object)
    if case == "strided":
        values = np.stack([values, values[::-1]], axis=1)[:, 0]
    codes, uniques = _factorize_objects(values)
    expect_codes, expect_uniques = pd.factorize(values, sort=False, use_na_sentinel=True)
    np.testing.assert_array_equal(codes, expect_codes)
    assert list(uniques) == list(expect_uniques)
