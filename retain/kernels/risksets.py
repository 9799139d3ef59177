"""Risk-set index on (start, stop] data: the counts every survival fit starts from.

Convention (DESIGN.md): a row is at risk at time ``t`` when ``start < t <= stop``.
A row that enters at ``t`` (``start == t``) is *not* at risk at ``t``; a row that
stops at ``t`` is. Events at ``t`` are counted before censorings at ``t``: a row
censored at ``t`` is still in the risk set of the events at ``t``.

Nothing here sorts the full table. The distinct times are found once
(``np.unique`` on the stop times that matter), every row's position among them
is found with one ``searchsorted`` for its stop and one for its start, and the
weighted at-risk counts follow from cumulative sums of ``bincount``:

.. math::

    Y(t_j) = \\sum_i w_i [t_j \\le \\text{stop}_i] - \\sum_i w_i [t_j \\le \\text{start}_i]

(the second sum removes rows not yet entered; ``start < stop`` makes the
difference exactly the rows with ``start < t_j <= stop``).

Pure numpy, no validation: callers pass arrays that already meet the
start-stop contract (``retain.data.table.StartStop`` checks it).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np


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
    if times is None:
        times = distinct_times(stop, ev | cens)
    m = times.shape[0]
    # position of each stop / start among the times: rows count for t_j < pos
    pos_stop = np.searchsorted(times, stop, side="right")
    pos_start = np.searchsorted(times, start, side="right")
    if group is None:
        width, off_stop, off_start = m + 1, pos_stop, pos_start
    else:
        width = (m + 1) * n_groups
        off_stop = pos_stop * n_groups + group
        off_start = pos_start * n_groups + group
    flow = (np.bincount(off_stop, weights=weight, minlength=width)
            - np.bincount(off_start, weights=weight, minlength=width))
    # a stop exactly at t_j sits at pos_stop - 1 == j
    hit = np.zeros(stop.shape[0], dtype=bool)
    inside = pos_stop > 0
    hit[inside] = times[pos_stop[inside] - 1] == stop[inside]
    k = 1 if group is None else n_groups
    cell = off_stop - k  # (j * k + g) of the time the row stops at
    ev_at = ev & hit
    ce_at = cens & hit
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
    if ordered:
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


def first_of_spell(customer: np.ndarray, spell: np.ndarray, start: np.ndarray) -> np.ndarray:
    """For each row, the index of the first row (smallest start) of its (customer, spell)."""
    n = start.shape[0]
    order = np.lexsort((start, spell, customer))
    c, s = customer[order], spell[order]
    new = np.ones(n, dtype=bool)
    new[1:] = (c[1:] != c[:-1]) | (s[1:] != s[:-1])
    head = order[np.flatnonzero(new)]
    spell_no = np.cumsum(new) - 1
    out = np.empty(n, dtype=np.int64)
    out[order] = head[spell_no]
    return out
