"""Risk-set index on (start, stop] data: the counts every survival fit starts from.

Convention (ARCHITECTURE.md): a row is at risk at time ``t`` when ``start < t <= stop``.
A row that enters at ``t`` (``start == t``) is *not* at risk at ``t``; a row that
stops at ``t`` is. Events at ``t`` are counted before censorings at ``t``: a row
censored at ``t`` is still in the risk set of the events at ``t``.

Nothing here sorts the full table. The distinct times are found once, every
row's position among them is found once for its stop and once for its start,
and the weighted at-risk counts follow from cumulative sums of ``bincount``:

.. math::

    Y(t_j) = \\sum_i w_i [t_j \\le \\text{stop}_i] - \\sum_i w_i [t_j \\le \\text{start}_i]

(the second sum removes rows not yet entered; ``start < stop`` makes the
difference exactly the rows with ``start < t_j <= stop``).

Positions: tenure is whole days (0.5 for a churn on the start day), so times
usually lie on a half-day grid and a cumulative count over that grid gives
every position in O(n) (:func:`retain.kernels.timegrid.half_day_grid`); other times fall back to
``np.unique`` and ``searchsorted`` (O(n log m)). Both give identical results.

Pure numpy, no validation: callers pass arrays that already meet the
start-stop contract (``retain.data.table.StartStop`` checks it).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from retain.kernels.timegrid import half_day_grid


class RiskTable(NamedTuple):
    """Weighted counts at each distinct time.

    ``at_risk``, ``events`` and ``censored`` have shape ``(m,)`` without groups
    and ``(m, k)`` with ``k`` groups.
    """

    times: np.ndarray
    at_risk: np.ndarray
    events: np.ndarray
    censored: np.ndarray


def distinct_times(stop: np.ndarray, keep: np.ndarray) -> np.ndarray:
    """Sorted distinct stop times of the rows in the boolean mask ``keep``."""
    return np.unique(stop[keep])


def _tail_sums(counts: np.ndarray) -> np.ndarray:
    """``out[j] = counts[j+1:].sum()`` along axis 0 (sums from the right)."""
    c = np.cumsum(counts[::-1], axis=0)[::-1]
    return c[1:]


def risk_table(
    start: np.ndarray,
    stop: np.ndarray,
    churned: np.ndarray,
    weight: np.ndarray,
    *,
    exits: np.ndarray | None = None,
    times: np.ndarray | None = None,
    group: np.ndarray | None = None,
    n_groups: int = 1,
) -> RiskTable:
    """Weighted numbers at risk, events and censorings at each distinct time.

    Parameters
    ----------
    start, stop : (n,) float
        Interval ends; at risk on (start, stop].
    churned : (n,) 0/1
        Event indicator on the row's stop.
    weight : (n,) float
        Case weights (> 0).
    exits : (n,) bool, optional
        Rows whose stop without an event is a censoring (the customer leaves
        observation). A row that is followed by the next row of the same spell
        is a continuation, not a censoring; pass ``~continued`` here so that
        splitting a row at an interior time changes nothing. Default: every
        non-event row is a censoring.
    times : (m,) float, optional
        Sorted times at which to count. Default: the distinct stop times of
        events and censorings.
    group : (n,) int, optional
        Group code in ``0 .. n_groups-1`` (rows with code < 0 are ignored).
        With groups the counts have shape ``(m, n_groups)``.

    Returns
    -------
    RiskTable
        ``at_risk[j] = sum w [start < t_j <= stop]``,
        ``events[j] = sum w [stop == t_j, churned]``,
        ``censored[j] = sum w [stop == t_j, not churned, exits]``.
    """
    ev = churned.astype(bool)
    cens = ~ev if exits is None else (~ev & exits)
    if group is not None:
        ok = group >= 0
        if not ok.all():
            start, stop, weight, ev, cens, group = (
                start[ok], stop[ok], weight[ok], ev[ok], cens[ok], group[ok])
    grid = half_day_grid(start, stop)
    if times is None:
        if grid is not None:
            seen = np.zeros(grid[2] + 1, dtype=bool)
            seen[grid[1][ev | cens]] = True
            times = np.flatnonzero(seen) * 0.5
        else:
            times = distinct_times(stop, ev | cens)
    m = times.shape[0]
    # position of each stop / start among the times: rows count for t_j < pos
    pos_stop, is_time = positions(times, stop, None if grid is None else grid[1], grid)
    pos_start, _ = positions(times, start, None if grid is None else grid[0], grid)
    if group is None:
        width, off_stop, off_start = m + 1, pos_stop, pos_start
    else:
        width = (m + 1) * n_groups
        off_stop = pos_stop * n_groups + group
        off_start = pos_start * n_groups + group
    flow = (np.bincount(off_stop, weights=weight, minlength=width)
            - np.bincount(off_start, weights=weight, minlength=width))
    # a row whose stop is one of the times stops at t_j with j = pos_stop - 1
    k = 1 if group is None else n_groups
    cell = off_stop - k  # (j * k + g) of the time the row stops at
    ev_at = ev & is_time
    ce_at = cens & is_time
    events = np.bincount(cell[ev_at], weights=weight[ev_at], minlength=m * k)
    censored = np.bincount(cell[ce_at], weights=weight[ce_at], minlength=m * k)
    if group is None:
        at_risk = _tail_sums(flow)
    else:
        at_risk = _tail_sums(flow.reshape(m + 1, n_groups))
        events = events.reshape(m, n_groups)
        censored = censored.reshape(m, n_groups)
    # counts of whole rows may pick up rounding in the cumulative sums
    np.maximum(at_risk, 0.0, out=at_risk)
    return RiskTable(times, at_risk, events, censored)


def positions(times: np.ndarray, values: np.ndarray, grid_values: np.ndarray | None,
              grid: tuple[np.ndarray, np.ndarray, int] | None) -> tuple[np.ndarray, np.ndarray]:
    """Number of ``times`` <= each value, and whether the value is one of the times.

    ``times`` sorted and distinct. With ``grid`` (from :func:`half_day_grid`)
    and times on the same half-day grid, a cumulative count over the grid
    answers both in O(n + grid); otherwise ``searchsorted``.
    """
    if grid is not None and grid_values is not None:
        gt = times * 2.0
        it = gt.astype(np.int64)
        if np.array_equal(it, gt) and (it.size == 0 or it.min() >= 0):
            top = grid[2]
            inside = it <= top
            mark = np.zeros(top + 1, dtype=np.int64)
            mark[it[inside]] = 1
            count = np.cumsum(mark)
            # times beyond the grid are above every value: they never count
            return count[grid_values], mark[grid_values].astype(bool)
    pos = np.searchsorted(times, values, side="right")
    hit = np.zeros(values.shape[0], dtype=bool)
    inside = pos > 0
    hit[inside] = times[pos[inside] - 1] == values[inside]
    return pos, hit


def at_risk_at(start: np.ndarray, stop: np.ndarray, weight: np.ndarray,
               times: np.ndarray) -> np.ndarray:
    """Weighted number at risk ``sum w [start < t <= stop]`` at each sorted time."""
    m = times.shape[0]
    flow = (np.bincount(np.searchsorted(times, stop, side="right"), weights=weight,
                        minlength=m + 1)
            - np.bincount(np.searchsorted(times, start, side="right"), weights=weight,
                          minlength=m + 1))
    return np.maximum(_tail_sums(flow), 0.0)


def exposure_to(start: np.ndarray, stop: np.ndarray, weight: np.ndarray,
                x: np.ndarray) -> np.ndarray:
    """Weighted time at risk accumulated up to each ``x``.

    ``E(x) = sum_i w_i (min(x, stop_i) - min(x, start_i))``: the area under the
    at-risk count from 0 to ``x`` (customer-days). Computed from sorted starts
    and stops with cumulative sums, one ``searchsorted`` per end.
    """
    x = np.asarray(x, dtype=np.float64)
    return _min_sum(stop, weight, x) - _min_sum(start, weight, x)


def _min_sum(v: np.ndarray, w: np.ndarray, x: np.ndarray) -> np.ndarray:
    """``sum_i w_i min(x, v_i)`` for each x."""
    order = np.argsort(v, kind="stable")
    vs = v[order]
    ws = w[order]
    cw = np.concatenate(([0.0], np.cumsum(ws)))
    cwv = np.concatenate(([0.0], np.cumsum(ws * vs)))
    k = np.searchsorted(vs, x, side="right")  # rows with v <= x
    return cwv[k] + x * (cw[-1] - cw[k])


def continued_rows(customer: np.ndarray, spell: np.ndarray, start: np.ndarray,
                   stop: np.ndarray) -> np.ndarray:
    """Boolean mask: the next row of the same (customer, spell) starts at this row's stop.

    Such a row's stop is not a censoring but a change of covariates. A gap
    (next start > stop) or a duplicate row is not a continuation. O(n) when
    the rows are already ordered by customer, spell and start (as ``prepare``
    writes them); otherwise one ``lexsort``.
    """
    n = start.shape[0]
    out = np.zeros(n, dtype=bool)
    if n < 2:
        return out
    same = (customer[1:] == customer[:-1]) & (spell[1:] == spell[:-1])
    ordered = bool(np.all((customer[1:] > customer[:-1])
                          | ((customer[1:] == customer[:-1]) & (spell[1:] > spell[:-1]))
                          | (same & (start[1:] >= stop[:-1]))))
    if ordered:  # no duplicates either: each row starts at or after the previous stop
        out[:-1] = same & (start[1:] == stop[:-1])
        return out
    # general case (any order, duplicate rows): merge the stops and starts of
    # each spell; a stop is continued if some row of its spell starts there
    sid = customer.astype(np.int64) * (int(spell.max()) + 1) + spell.astype(np.int64)
    keys = np.concatenate((sid, sid))
    at = np.concatenate((stop, start))
    is_entry = np.concatenate((np.zeros(n, dtype=bool), np.ones(n, dtype=bool)))
    o = np.lexsort((is_entry, at, keys))
    k, t, e = keys[o], at[o], is_entry[o]
    new = np.ones(2 * n, dtype=bool)
    new[1:] = (k[1:] != k[:-1]) | (t[1:] != t[:-1])
    gid = np.cumsum(new) - 1
    has_entry = np.zeros(int(gid[-1]) + 1, dtype=bool)
    has_entry[gid[e]] = True
    exits = ~e
    out[o[exits]] = has_entry[gid[exits]]
    return out


def _ordered(customer: np.ndarray, spell: np.ndarray, start: np.ndarray) -> bool:
    """Rows sorted by (customer, spell, start), strictly increasing start within a spell."""
    c1, c0 = customer[1:], customer[:-1]
    s1, s0 = spell[1:], spell[:-1]
    return bool(np.all((c1 > c0) | ((c1 == c0) & ((s1 > s0) | ((s1 == s0)
                                                              & (start[1:] > start[:-1]))))))


def first_of_spell(customer: np.ndarray, spell: np.ndarray, start: np.ndarray) -> np.ndarray:
    """For each row, the index of the first row (smallest start) of its (customer, spell).

    O(n) when rows are ordered by customer, spell and start (as ``prepare``
    writes them); otherwise one ``lexsort``.
    """
    n = start.shape[0]
    if n and _ordered(customer, spell, start):
        new = np.ones(n, dtype=bool)
        new[1:] = (customer[1:] != customer[:-1]) | (spell[1:] != spell[:-1])
        head = np.flatnonzero(new)
        return head[np.cumsum(new) - 1]
    order = np.lexsort((start, spell, customer))
    c, s = customer[order], spell[order]
    new = np.ones(n, dtype=bool)
    new[1:] = (c[1:] != c[:-1]) | (s[1:] != s[:-1])
    head = order[np.flatnonzero(new)]
    spell_no = np.cumsum(new) - 1
    out = np.empty(n, dtype=np.int64)
    out[order] = head[spell_no]
    return out
