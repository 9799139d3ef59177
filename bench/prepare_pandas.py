"""The preparation rules written plainly in pandas (groupby / shift / forward-fill).

The comparison side of bench/bench_prepare.py: the same transform as
``retain.data.prepare.prepare`` (DEVELOPERS.md, "Preparation rules") for a
project whose log holds naive timestamps, done the way a data team would write
it in pandas. It loads the whole log into pandas, so it is only for the
benchmark; the bench checks that both give the same start-stop table before
it reports any time.

Run alone:  /work/venv/bin/python bench/prepare_pandas.py path/to/retain.toml
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow.parquet as pq

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from retain.data.config import Config, load_config  # noqa: E402

RANK = {"start": 0, "update": 1, "pause": 2, "resume": 3, "payment_failed": 4,
        "payment_recovered": 5, "end": 6}


def _read(config: Config) -> pd.DataFrame:
    src = config.source
    if src.format == "parquet":
        df = pq.read_table(src.path).to_pandas()
    else:
        df = pd.read_csv(src.path, dtype=str, keep_default_na=False)
    df = df.replace("", None) if src.format != "parquet" else df
    return df


def _strip(s: pd.Series) -> pd.Series:
    s = s.str.strip()
    return s.where(s != "")


def prepare_pandas(config: Config) -> dict[str, object]:
    """Start-stop rows (DataFrame), quarantine counts by reason and rows in."""
    cols = config.columns
    raw = _read(config)
    n_in = len(raw)
    df = pd.DataFrame({"source_row": np.arange(1, n_in + 1, dtype=np.int64),
                       "customer_id": raw[cols.customer_id],
                       "time_text": _strip(raw[cols.event_time]),
                       "event_raw": _strip(raw[cols.event]),
                       "reason_raw": (_strip(raw[cols.reason]) if cols.reason
                                      else pd.Series(None, index=raw.index, dtype=object))})
    cat_attrs = [a for a in config.attributes if a.kind == "categorical"]
    num_attrs = [a for a in config.attributes if a.kind == "numeric"]
    bad_number = np.zeros(n_in, bool)
    for a in cat_attrs:
        df[a.name] = _strip(raw[a.column])
    for a in num_attrs:
        text = _strip(raw[a.column])
        val = pd.to_numeric(text, errors="coerce")
        bad_number |= (text.notna() & ~np.isfinite(val.fillna(np.inf))).to_numpy()
        df[a.name] = val
    del raw

    # ---- normalise: times, days, our events, row-level reasons
    ts = pd.to_datetime(df["time_text"], format="ISO8601", errors="coerce")
    ts = ts.dt.tz_localize(config.window.timezone)
    df["event_ts"] = ts
    df["day"] = (ts.dt.tz_convert(config.window.timezone).dt.tz_localize(None)
                 .dt.floor("D").to_numpy().astype("datetime64[D]").astype("float64"))
    df["event"] = df["event_raw"].map(config.events.map)
    ignored = df["event_raw"].isin(list(config.events.ignore)).to_numpy()
    rs = config.reasons
    reason_ignored = df["reason_raw"].isin(list(rs.ignore))
    df["cause_given"] = df["reason_raw"].map(rs.map).where(~reason_ignored)
    reason_unknown = (df["reason_raw"].notna() & ~reason_ignored
                      & ~df["reason_raw"].isin(list(rs.map))).to_numpy()
    as_of = float(np.datetime64(config.window.as_of, "D").astype("float64"))
    cid = df["customer_id"]
    missing = (cid.isna() | (cid.str.strip() == "")).to_numpy()
    conds = [missing, df["event_ts"].isna().to_numpy(), df["event"].isna().to_numpy(),
             (df["day"] > as_of).to_numpy(), bad_number,
             (df["event"] == "end").to_numpy() & reason_unknown]
    names = ["missing id", "unparseable time", "unknown event", "time after the as-of date",
             "non-numeric value in a numeric attribute", "unknown churn reason"]
    row_reason = np.select(conds, names, default="")
    row_reason[ignored] = ""
    quarantine = pd.Series(row_reason[(row_reason != "") & ~ignored]).value_counts().to_dict()

    ev = df[~ignored & (row_reason == "")].copy()
    ev["event_rank"] = ev["event"].map(RANK).astype(np.int8)

    # ---- sequence: exact duplicates, then order problems
    attr_names = [a.name for a in config.attributes]
    dup = ev.duplicated(["customer_id", "event_ts", "event_raw", "reason_raw", *attr_names])
    quarantine["exact duplicate"] = int(dup.sum())
    ev = ev[~dup.to_numpy()]
    # same-day order: a day with more than one start or more than one end in time
    # order (then rank); else a day that begins with a spell open and holds an end has
    # its starts last; else the fixed rank order
    ev = ev.sort_values(["customer_id", "day"], kind="stable", ignore_index=True)
    step = pd.Series(np.where(ev["event"] == "start", 1, np.where(ev["event"] == "end", -1, 0)))
    by_day = [ev["customer_id"], ev["day"]]
    running = step.groupby(ev["customer_id"], sort=False).cumsum()
    open_at_start = (running.groupby(by_day, sort=False).transform("last")
                     - step.groupby(by_day, sort=False).transform("sum")) > 0
    starts = (ev["event"] == "start").groupby(by_day, sort=False).transform("sum")
    ends = (ev["event"] == "end").groupby(by_day, sort=False).transform("sum")
    timed = ((starts > 1) | (ends > 1)).to_numpy()
    order = np.where((ev["event"] == "start") & open_at_start & (ends > 0), 7,
                     ev["event_rank"])
    instant = ev["event_ts"].array.asi8
    # within one day every row takes the same form, so one pair of keys serves both
    ev["key1"] = np.where(timed, instant, order)
    ev["key2"] = np.where(timed, ev["event_rank"].to_numpy(np.int64), instant)
    ev = ev.sort_values(["customer_id", "day", "key1", "key2", "source_row"],
                        kind="stable", ignore_index=True)
    g = ev.groupby("customer_id", sort=False)
    boundary = ev["event"].where(ev["event"].isin(["start", "end"]))
    prev_boundary = boundary.groupby(ev["customer_id"], sort=False).shift(1)
    prev_boundary = prev_boundary.groupby(ev["customer_id"], sort=False).ffill()
    is_start = ev["event"] == "start"
    starts_before = is_start.astype(np.int64).groupby(ev["customer_id"]).cumsum() - is_start
    problem = np.select(
        [(is_start & (prev_boundary == "start")).to_numpy(),
         (~is_start & (starts_before == 0)).to_numpy(),
         ((ev["event"] == "end") & (prev_boundary == "end")).to_numpy(),
         (~is_start & (prev_boundary == "end")).to_numpy()],
        ["start during an open spell", "event before the customer's first start",
         "end without an open spell", "event outside an open spell"], default="")
    for name, n in pd.Series(problem[problem != ""]).value_counts().items():
        quarantine[name] = quarantine.get(name, 0) + int(n)
    ev = ev[problem == ""].reset_index(drop=True)

    # ---- spells: the state of the customer after every used event
    cust = ev["customer_id"]
    g = ev.groupby("customer_id", sort=False)
    is_start = ev["event"] == "start"
    ev["spell"] = is_start.astype(np.int64).groupby(cust).cumsum()
    ev["start_day"] = ev["day"].where(is_start).groupby(cust).ffill()
    sets_varying = ev["event"].isin(["start", "update"])
    for a in config.attributes:
        if a.varies:
            ev[a.name] = ev[a.name].where(sets_varying).groupby(cust).ffill()
        else:
            ev[a.name] = g[a.name].transform("first")
    ev["paused"] = (ev["event"].map({"pause": 1.0, "resume": 0.0, "start": 0.0})
                    .groupby(cust).ffill().fillna(0.0))
    ev["in_recovery"] = (ev["event"].map({"payment_failed": 1.0, "payment_recovered": 0.0,
                                          "start": 0.0}).groupby(cust).ffill().fillna(0.0))
    is_end = ev["event"] == "end"
    end_day = ev["day"].where(is_end).groupby(cust).bfill()
    next_day = g["day"].shift(-1)
    ev["cause"] = np.where(ev["cause_given"].notna(), ev["cause_given"],
                           np.where(ev["in_recovery"] == 1, "involuntary", "voluntary"))
    last_of_day = (next_day.isna() | (next_day != ev["day"])).to_numpy()
    ws = config.window.start
    if ws is not None:
        wday = float(np.datetime64(ws, "D").astype("float64"))
        outside = ((ev["start_day"] < wday) & (end_day <= wday)).to_numpy()
        quarantine_outside = int(outside.sum())
    else:
        wday, outside, quarantine_outside = None, np.zeros(len(ev), bool), 0

    # ---- intervals: one row per change of state, (start, stop] in days of tenure
    # the day's last row, and every end (a reactivation may follow it on its day)
    d = ev[(last_of_day | is_end.to_numpy()) & ~outside].reset_index(drop=True)
    d["tenure"] = d["day"] - d["start_day"]
    keys = [d["customer_id"], d["spell"]]
    gs = d.groupby(["customer_id", "spell"], sort=False)
    varying = [a.name for a in config.attributes if a.varies] + ["paused", "in_recovery"]
    first_row = gs.cumcount() == 0
    changed = first_row.to_numpy().copy()
    for c in varying:
        prev = gs[c].shift(1)
        same = (d[c] == prev) | (d[c].isna() & prev.isna())
        changed |= ~same.to_numpy()
    for a in config.attributes:
        if a.ratio:
            first = d[a.name].where(first_row).groupby(keys).ffill()
            d[a.name + "_ratio"] = d[a.name] / first.where(first != 0)
    ended = gs["event"].transform("last") == "end"
    last_tenure = gs["tenure"].transform("last")
    spell_cause = gs["cause"].transform("last")
    exit_time = np.maximum(np.where(ended, last_tenure, as_of - d["start_day"]), 0.5)
    entry = (np.maximum(wday - d["start_day"], 0.0) if wday is not None
             else np.zeros(len(d)))
    d["ended"], d["spell_cause"] = ended, spell_cause
    d["exit_time"], d["entry_time"] = exit_time, entry
    d = d[changed & (d["tenure"] < exit_time).to_numpy()].reset_index(drop=True)
    nxt = d.groupby(["customer_id", "spell"], sort=False)["tenure"].shift(-1)
    d["stop"] = nxt.fillna(d["exit_time"])
    is_last = nxt.isna()
    d["start"] = np.maximum(d["tenure"], d["entry_time"])
    d["churned"] = (is_last & d["ended"]).astype(np.int32)
    d["cause"] = np.where(d["churned"] == 1, d["spell_cause"], "")
    d = d[d["stop"] > d["entry_time"]]
    d["cohort"] = pd.to_datetime(d["start_day"], unit="D").dt.strftime("%Y-%m")
    d["prior_spells"] = (d["spell"] - 1).astype(np.float64)
    out_cols = (["customer_id", "spell", "start", "stop", "churned", "cause", "cohort"]
                + [a.name for a in config.attributes]
                + [a.name + "_ratio" for a in config.attributes if a.ratio]
                + ["in_recovery", "paused", "prior_spells"])
    table = d[out_cols].reset_index(drop=True)
    return {"table": table, "quarantine": quarantine, "rows_in": n_in,
            "outside_window": quarantine_outside, "ignored": int(ignored.sum())}


if __name__ == "__main__":
    res = prepare_pandas(load_config(sys.argv[1]))
    print(res["table"].shape, res["quarantine"])
