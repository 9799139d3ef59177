"""The log writer: Quillfern's raw event log (text columns, as an export would give).

Each spell's start, covariate changes and cancel become rows; ignored noise and
the documented defective rows (``TRUTH['defects']``) are added; the rows are
ordered and written as ``.csv.gz`` (byte for byte reproducible), ``.csv`` or
``.parquet``.
"""

from __future__ import annotations

import gzip
import io
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv
import pyarrow.parquet as pq

from retain.demo.design import KINDS, REASONS, TRUTH, _day, _levels
from retain.demo.simulate import SimSpells, _group_starts, _simulate_world


def _pick(rng: np.random.Generator, probs: Mapping[str, float], size: int) -> np.ndarray:
    names = list(probs)
    codes = np.array([REASONS.index(k) for k in names])
    return codes[rng.choice(len(names), size=size, p=np.array([probs[k] for k in names]))]


def _reasons(rng: np.random.Generator, sp: SimSpells, idx: np.ndarray) -> np.ndarray:
    """Cancel reason codes (-1 = blank) for the churned spells ``idx``."""
    rs = TRUTH["reasons"]
    seg = sp.churn_seg[idx]
    inrec = sp.seg_rec[seg] == 1
    dear = sp.seg_ratio[seg] > 1.0 + 1e-9
    inv = sp.cause[idx] == 1
    m = idx.size
    out = np.where(dear, _pick(rng, rs["voluntary_if_price_ratio_above_1"], m),
                   _pick(rng, rs["voluntary_otherwise"], m))
    out = np.where(inv & inrec, _pick(rng, rs["involuntary_in_recovery"], m), out)
    out = np.where(inv & ~inrec, _pick(rng, rs["involuntary_not_in_recovery"], m), out)
    u = rng.random(m)
    blank = (~inv & ~inrec & (u < rs["blank_voluntary_not_in_recovery"])) | (
        inv & inrec & (u < rs["blank_involuntary_in_recovery"]))
    return np.where(blank, -1, out)


@dataclass
class _Rows:
    cust: list
    day: list
    kind: list
    reason: list
    plan: list
    cents: list
    channel: list
    region: list
    arm: list

    def add(self, cust, day, kind, reason=None, plan=None, cents=None, channel=None,
            region=None, arm=None):
        m = np.asarray(cust).size
        neg = np.full(m, -1, np.int64)

        def col(x):
            if x is None:
                return neg
            x = np.asarray(x, dtype=np.int64)
            return np.broadcast_to(x, (m,)) if x.ndim == 0 else x

        self.cust.append(col(cust))
        self.day.append(col(day))
        self.kind.append(col(kind))
        self.reason.append(col(reason))
        self.plan.append(col(plan))
        self.cents.append(col(cents))
        self.channel.append(col(channel))
        self.region.append(col(region))
        self.arm.append(col(arm))

    def arrays(self) -> dict[str, np.ndarray]:
        return {k: np.concatenate(getattr(self, k)).astype(np.int32) for k in
                ("cust", "day", "kind", "reason", "plan", "cents", "channel", "region", "arm")}


def _dict_strings(codes: np.ndarray, levels: list[str]) -> pa.Array:
    """Strings from integer codes (-1 -> null), decoded in C++ via a dictionary."""
    return _decode(codes, pa.array(levels, pa.string()))


def _log_rows(rng: np.random.Generator, cu: dict[str, np.ndarray], sp: SimSpells,
              as_of_day: int) -> _Rows:
    K = {k: i for i, k in enumerate(KINDS)}
    rows = _Rows(*[[] for _ in range(9)])
    gst = _group_starts(sp.seg_spell, sp.n)
    first = gst[:-1]
    # start rows
    kind = np.where(sp.prior == 0, K["signup"], K["reactivate"])
    c = sp.customer
    rows.add(c, sp.start_day, kind, plan=sp.seg_plan[first], cents=sp.seg_cents[first],
             channel=cu["channel"][c], region=cu["region"][c], arm=cu["arm"][c])
    # changes at grid points d > 0 with d < T
    g = np.arange(sp.seg_spell.size)
    s = sp.seg_spell
    chg = (sp.seg_a > 0) & (sp.seg_a < sp.t[s])
    gi = g[chg]
    pi = gi - 1
    sc = s[gi]
    cc = sp.customer[sc]
    day = sp.start_day[sc] + sp.seg_a[gi].astype(np.int64)
    dplan = sp.seg_plan[gi] != sp.seg_plan[pi]
    dprice = sp.seg_cents[gi] != sp.seg_cents[pi]
    rows.add(cc[dplan], day[dplan], K["plan_change"], plan=sp.seg_plan[gi][dplan],
             cents=sp.seg_cents[gi][dplan])
    pc_ = ~dplan & dprice
    rows.add(cc[pc_], day[pc_], K["price_change"], cents=sp.seg_cents[gi][pc_])
    for col, on, off in ((sp.seg_paused, "pause", "resume"),
                         (sp.seg_rec, "payment_failed", "payment_recovered")):
        up = (col[gi] == 1) & (col[pi] == 0)
        dn = (col[gi] == 0) & (col[pi] == 1)
        rows.add(cc[up], day[up], K[on])
        rows.add(cc[dn], day[dn], K[off])
    # cancels
    ci = np.flatnonzero(sp.churned)
    end_day = (sp.start_day + sp.end_tenure)[ci]
    rows.add(sp.customer[ci], end_day, K["cancel"], reason=_reasons(rng, sp, ci))
    # ignored noise: email_opened inside a spell; a few unknown gift_card_redeemed rows
    noise = TRUTH["noise"]
    stop_day = np.where(sp.churned, sp.start_day + sp.end_tenure, as_of_day)
    n_mail = int(round(noise["email_opened_per_customer"] * cu["signup"].size))
    for kname, m in (("email_opened", n_mail), ("gift_card_redeemed",
                                                 int(noise["gift_card_redeemed_rows"]))):
        pick = rng.integers(0, sp.n, m)
        span = stop_day[pick] - sp.start_day[pick]
        d = sp.start_day[pick] + np.floor(rng.random(m) * np.maximum(span, 1)).astype(np.int64)
        rows.add(sp.customer[pick], np.minimum(d, as_of_day), K[kname])
    return rows


def _defect_rows(rng: np.random.Generator, cu: dict[str, np.ndarray], sp: SimSpells,
                 base: dict[str, np.ndarray], as_of_day: int, log_start_day: int
                 ) -> tuple[dict[str, np.ndarray], dict[str, list[int]]]:
    """Extra defective rows: returns their arrays and per-row overrides."""
    K = {k: i for i, k in enumerate(KINDS)}
    dfx = TRUTH["defects"]
    out = _Rows(*[[] for _ in range(9)])
    over: dict[str, list[int]] = {"missing_id": [], "bad_time": [], "bad_price": [],
                                  "source": []}
    n0 = 0

    def copy_of(kinds: tuple[str, ...], m: int) -> np.ndarray:
        cand = np.flatnonzero(np.isin(base["kind"], [K[k] for k in kinds]))
        return np.sort(rng.choice(cand, size=m, replace=False))

    def add_copy(idx: np.ndarray) -> None:
        nonlocal n0
        out.add(*(base[k][idx] for k in ("cust", "day", "kind", "reason", "plan", "cents",
                                         "channel", "region", "arm")))
        over["source"].extend(idx.tolist())
        n0 += idx.size

    def added(m: int) -> None:
        nonlocal n0
        over["source"].extend([-1] * m)
        n0 += m

    # missing id: copies of update rows with the account left empty
    over["missing_id"] = list(range(n0, n0 + dfx["missing_id"]))
    add_copy(copy_of(("plan_change", "price_change", "payment_failed"), dfx["missing_id"]))
    # unparseable time
    over["bad_time"] = list(range(n0, n0 + dfx["unparseable_time"]))
    add_copy(copy_of(("payment_failed", "payment_recovered", "pause"), dfx["unparseable_time"]))
    # exact duplicates (kept in the row set twice)
    add_copy(copy_of(("price_change", "payment_failed", "payment_recovered", "resume"),
                     dfx["exact_duplicate"]))
    # non-numeric price on copies of price changes
    over["bad_price"] = list(range(n0, n0 + dfx["non_numeric_price"]))
    add_copy(copy_of(("price_change",), dfx["non_numeric_price"]))
    # events after the as-of date (the export ran two days later)
    open_sp = np.flatnonzero(~sp.churned)
    m = dfx["after_as_of"]
    pick = np.sort(rng.choice(open_sp, size=m, replace=False))
    kinds = np.where(np.arange(m) % 2 == 0, K["payment_failed"], K["cancel"])
    reason = np.where(kinds == K["cancel"], REASONS.index("not_using"), -1)
    out.add(sp.customer[pick], as_of_day + 1 + (np.arange(m) % 2), kinds, reason=reason)
    added(m)
    # an end without an open spell: a second cancel days after a final cancel
    last_of_cust = np.zeros(sp.n, bool)
    order = np.lexsort((sp.start_day, sp.customer))
    lastpos = np.r_[sp.customer[order][1:] != sp.customer[order][:-1], True]
    last_of_cust[order[lastpos]] = True
    end_day = sp.start_day + sp.end_tenure
    cand = np.flatnonzero(last_of_cust & sp.churned & (end_day + 10 <= as_of_day))
    m = dfx["end_without_open_spell"]
    pick = np.sort(rng.choice(cand, size=m, replace=False))
    out.add(sp.customer[pick], end_day[pick] + rng.integers(3, 11, m), K["cancel"],
            reason=REASONS.index("moved"))
    added(m)
    # an event before the customer's first start
    first = sp.prior == 0
    cand = np.flatnonzero(first & (sp.start_day >= log_start_day + 25))
    m = dfx["before_first_start"]
    pick = np.sort(rng.choice(cand, size=m, replace=False))
    out.add(sp.customer[pick], sp.start_day[pick] - rng.integers(3, 21, m),
            K["payment_failed"])
    added(m)
    return out.arrays(), over


_BAD_TIMES = ("2025-02-30 09:15:00", "31/12/2024 10:00", "unknown", "2025-07-14 25:61:00",
              "")


def generate_log(n_customers: int = 20000, *, seed: int = 20261130, start: str = "2023-06-01",
                 as_of: str = "2026-11-30", defects: bool = True) -> pa.Table:
    """Simulate Quillfern's raw event log.

    Parameters
    ----------
    n_customers : number of customers (first signups between ``start`` and the
        day before ``as_of``); about 3.3 log rows each.
    seed : seed of the ``numpy.random.PCG64`` generator; same seed, same table.
    start, as_of : first day of the log and the censoring day (inclusive).
    defects : add the documented defective rows (``TRUTH['defects']``).

    Returns
    -------
    pyarrow.Table with the text columns :data:`LOG_COLUMNS` (nulls for empty).
    """
    rng, cu, sp = _simulate_world(n_customers, seed, start, as_of)
    as_of_day = _day(as_of)
    base = _log_rows(rng, cu, sp, as_of_day).arrays()
    nb = base["cust"].size
    if defects:
        extra, over = _defect_rows(rng, cu, sp, base, as_of_day, _day(start))
        arr = {k: np.concatenate([base[k], extra[k]]) for k in base}
        del base, extra
    else:
        arr, over = base, {"missing_id": [], "bad_time": [], "bad_price": [], "source": []}
    del sp
    tod = rng.integers(6 * 3600, 22 * 3600, nb)
    if over["source"]:
        # a defective copy keeps the time of day of the row it copies
        src = np.array(over["source"], np.int64)
        new = rng.integers(6 * 3600, 22 * 3600, src.size)
        tod = np.concatenate([tod, np.where(src >= 0, tod[np.maximum(src, 0)], new)])
    secs = arr["day"].astype(np.int64) * 86400 + tod
    kind_order = np.array([0, 0, 1, 1, 4, 5, 2, 3, 6, 7, 7])[arr["kind"]]
    s0 = secs - secs.min()
    cbits = max(int(n_customers).bit_length(), 1)
    if int(s0.max()).bit_length() + cbits + 3 <= 63:  # one int64 key sorts fastest
        order = np.argsort((s0 << (cbits + 3)) | (arr["cust"].astype(np.int64) << 3)
                           | kind_order,
                           kind="stable")
    else:
        order = np.lexsort((kind_order, arr["cust"], secs))
    flag = np.zeros(secs.size, np.int8)  # 1 missing id, 2 bad time, 3 bad price
    for code, key in ((1, "missing_id"), (2, "bad_time"), (3, "bad_price")):
        flag[nb + np.array(over[key], np.int64)] = code
    arr = {k: v[order] for k, v in arr.items()}
    secs, flag, day, tod = secs[order], flag[order], arr["day"], tod[order]

    cust = np.where(flag == 1, -1, arr["cust"])
    accounts = _account_ids(n_customers)
    d0 = int(day.min())
    day_str = pa.array(np.arange(d0, int(day.max()) + 1).astype("datetime64[D]").astype(str))
    tod_str = pa.array([f"{h:02d}:{mi:02d}:{se:02d}" for h in range(24) for mi in range(60)
                        for se in range(60)])
    ts = pc.binary_join_element_wise(_decode(day - d0, day_str), _decode(tod, tod_str), " ")
    bad = flag == 2
    if bad.any():
        vals = [_BAD_TIMES[i % len(_BAD_TIMES)] for i in range(int(bad.sum()))]
        ts = pc.replace_with_mask(ts, pa.array(bad), pa.array(vals, pa.string()))
    price_codes, price_levels = _price_strings(arr["cents"])
    price_codes = np.where(flag == 3, len(price_levels), price_codes)
    cols = {
        "account": _decode(cust, accounts),
        "occurred_at": ts,
        "kind": _dict_strings(arr["kind"], list(KINDS)),
        "cancel_reason": _dict_strings(arr["reason"], list(REASONS)),
        "plan": _dict_strings(arr["plan"], _levels("plans")),
        "monthly_price": _dict_strings(price_codes, price_levels + ["N/A"]),
        "channel": _dict_strings(arr["channel"], _levels("channels")),
        "region": _dict_strings(arr["region"], _levels("regions")),
        "arm": _dict_strings(arr["arm"], _levels("experiment")),
    }
    return pa.table(cols)


def _account_ids(n: int) -> pa.Array:
    """QF0000001, QF0000002, ...: customer i (0-based) is entry i."""
    numbers = pc.utf8_lpad(pa.array(np.arange(1, n + 1)).cast(pa.string()), 7, "0")
    return pc.binary_join_element_wise("QF", numbers, "")


def _decode(codes: np.ndarray, levels: pa.Array) -> pa.Array:
    idx = pa.array(codes.astype(np.int32), mask=codes < 0)
    return pa.DictionaryArray.from_arrays(idx, levels).cast(pa.string())


def _price_strings(cents: np.ndarray) -> tuple[np.ndarray, list[str]]:
    uniq, inv = np.unique(cents, return_inverse=True)
    levels = [f"{c // 100}.{c % 100:02d}" for c in uniq.tolist()]
    codes = inv.astype(np.int64)
    if uniq.size and uniq[0] < 0:
        codes = codes - 1  # the -1 level (no price) becomes code -1
        levels = levels[1:]
    return codes, levels


def write_log(path: str | Path, *, compresslevel: int = 6, **kw: Any) -> Path:
    """Generate the log (``generate_log(**kw)``) and write it deterministically.

    ``.csv.gz`` (gzip with mtime 0 and no file name in the header), ``.csv`` or
    ``.parquet``; the same arguments give the same bytes.
    """
    path = Path(path)
    table = generate_log(**kw)
    name = path.name.lower()
    if name.endswith(".parquet"):
        pq.write_table(table, path, compression="zstd")
        return path
    if not (name.endswith(".csv") or name.endswith(".csv.gz")):
        raise ValueError(f"{path}: write_log writes .csv, .csv.gz or .parquet")
    opts = pacsv.WriteOptions(include_header=False, quoting_style="none")
    header = (",".join(table.column_names) + "\n").encode()
    with open(path, "wb") as raw:
        out = (gzip.GzipFile(filename="", mode="wb", fileobj=raw, compresslevel=compresslevel,
                             mtime=0) if name.endswith(".gz") else raw)
        out.write(header)
        for batch in table.to_batches(max_chunksize=1 << 18):
            buf = io.BytesIO()
            pacsv.write_csv(pa.Table.from_batches([batch], table.schema), buf,
                            write_options=opts)
            out.write(buf.getvalue())
        if out is not raw:
            out.close()
    return path
