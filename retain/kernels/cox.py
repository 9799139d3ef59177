r"""Cox proportional-hazards kernels on (start, stop] data: pure numpy, no validation.

Convention (ARCHITECTURE.md): row :math:`i` is at risk at time :math:`t` when
:math:`\text{start}_i < t \le \text{stop}_i`; a row entering at :math:`t` is not
at risk at :math:`t`. Time unit: whatever the caller uses (days in retain).

The risk-set index is built once (:func:`build_risk_index`): the distinct churn
times :math:`t_1 < \dots < t_K` of each stratum are laid end to end, and each
row's risk window is the contiguous range ``[lo_i, hi_i)`` of those times,
found with one ``searchsorted`` for its start and one for its stop. Every
risk-set sum is then a difference array (``+v_i`` at ``lo_i``, ``-v_i`` at
``hi_i``) and one cumulative sum; sums over a row's window of a per-time
quantity are two gathers from a cumulative sum. For the :math:`p` columns of
:math:`S_1` at once the difference array is a sparse product
:math:`M\,X` with :math:`M` the :math:`(K+1)\times n` matrix holding
:math:`+r_i` at row ``lo_i`` and :math:`-r_i` at row ``hi_i`` of column :math:`i`
(compressed-column form, ``r`` itself as the data), which streams over a
C-ordered ``X``.

Log partial likelihood with Efron ties (Efron 1977, JASA 72:557; the weighted
form of Therneau & Grambsch 2000, *Modeling Survival Data*, sec. 3.3). At
churn time :math:`t_k` with tied churns :math:`E_k`, risk set :math:`R_k`,
:math:`r_i = w_i e^{\eta_i}`, :math:`S_0 = \sum_{R_k} r_i`,
:math:`T_0 = \sum_{E_k} r_i` (and :math:`S_1, T_1, S_2, T_2` the same sums of
:math:`r_i x_i` and :math:`r_i x_i x_i^\top`), :math:`m_k` tie units,
:math:`f_j = j/m_k`, :math:`a_j = S_0 - f_j T_0`, :math:`\omega_k = D_k/m_k`:

.. math::

    \ell = \sum_k \Big[\sum_{i\in E_k} w_i\eta_i - \omega_k\sum_{j=0}^{m_k-1}\log a_j\Big]

    U = \sum_k \Big[\sum_{E_k} w_i x_i - \alpha_k S_1 + \beta_k T_1\Big],\qquad
    \alpha_k=\omega_k\sum_j a_j^{-1},\ \beta_k=\omega_k\sum_j f_j a_j^{-1}

    \mathcal I = \sum_k\Big[\alpha_k S_2-\beta_k T_2 - \gamma_k S_1S_1^\top
        + \delta_k(S_1T_1^\top+T_1S_1^\top) - \epsilon_k T_1T_1^\top\Big]

with :math:`\gamma,\delta,\epsilon = \omega_k\sum_j (1, f_j, f_j^2)/a_j^2`.
Breslow ties (Breslow 1974, Biometrics 30:89) are :math:`m_k = 1`, :math:`f=0`.
The :math:`S_2, T_2` terms are one weighted cross-product
:math:`X^\top \mathrm{diag}(v) X` with
:math:`v_i = r_i(\sum_{k\in[lo_i,hi_i)}\alpha_k - d_i\beta_{k(i)})`.

Tie units: with whole-number weights each unit of weight is one tied churn
(:math:`m_k = D_k`, :math:`\omega_k = 1`), so a compressed table (identical rows
collapsed into one row with weight = count) gives exactly the full table's
Efron likelihood. With fractional weights, :math:`m_k` is the number of tied
rows and :math:`\omega_k` their mean weight (Therneau & Grambsch 2000).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
from scipy import sparse

from retain.kernels.newton import NewtonSolution, newton_maximize
from retain.kernels.timegrid import event_order as _event_order
from retain.kernels.timegrid import positions_right

CHUNK = 1 << 14


class RiskIndex(NamedTuple):
    """Risk-set index over distinct churn times, built once per fit."""

    times: np.ndarray         # (K,) distinct churn times, stratum after stratum
    time_stratum: np.ndarray  # (K,) stratum code of each time
    bounds: np.ndarray        # (S+1,) times[bounds[s]:bounds[s+1]] belong to stratum s
    lo: np.ndarray            # (n,) first churn time index at which the row is at risk
    hi: np.ndarray            # (n,) one past the last
    row_ptr: np.ndarray       # (n+1,) 0, 1, ..., n: one entry per row (sparse index pointer)
    event_rows: np.ndarray    # (E,) rows that churn
    event_k: np.ndarray       # (E,) churn-time index of each of those rows (ascending)
    event_starts: np.ndarray  # (K,) where each churn time's rows begin in event_rows
    churn_rows: np.ndarray    # (E,) the same rows in row order (gathers stream through memory)
    churn_k: np.ndarray       # (E,) churn-time index of each of those
    deaths: np.ndarray        # (K,) weighted churns D_k
    units: np.ndarray         # (K,) Efron tie units m_k
    omega: np.ndarray         # (K,) D_k / m_k
    unit_k: np.ndarray        # (sum m_k,) owner time of each Efron unit
    unit_f: np.ndarray        # (sum m_k,) j / m_k of each Efron unit
    n_strata: int


def build_risk_index(start: np.ndarray, stop: np.ndarray, churned: np.ndarray,
                     weight: np.ndarray, stratum: np.ndarray | None = None,
                     n_strata: int | None = None) -> RiskIndex:
    """Sort the churn times once and find every row's risk window.

    Parameters
    ----------
    start, stop : (n,) float
    churned : (n,) 0/1
    weight : (n,) float > 0
    stratum : (n,) int codes 0..S-1, optional
    n_strata : int, optional (default ``stratum.max() + 1``)
    """
    n = start.shape[0]
    if stratum is None:
        stratum = np.zeros(n, dtype=np.int64)
        n_strata = 1
    stratum = np.asarray(stratum, dtype=np.int64)
    if n_strata is None:
        n_strata = int(stratum.max()) + 1 if n else 1
    ev = np.flatnonzero(churned != 0)
    ev_s = stratum[ev]
    ev_t = stop[ev]
    # distinct (stratum, time) pairs, sorted by stratum then time
    o = _event_order(ev_t) if n_strata == 1 else np.lexsort((ev_t, ev_s))
    ss, tt = ev_s[o], ev_t[o]
    new = np.ones(ss.shape[0], dtype=bool)
    new[1:] = (ss[1:] != ss[:-1]) | (tt[1:] != tt[:-1])
    times = tt[new]
    time_stratum = ss[new]
    bounds = np.searchsorted(time_stratum, np.arange(n_strata + 1), side="left").astype(np.int64)
    itype = np.int32 if n < 2**31 - 1 else np.int64
    lo = np.empty(n, dtype=itype)
    hi = np.empty(n, dtype=itype)
    if n_strata == 1:
        positions_right(times, start, out=lo)
        positions_right(times, stop, out=hi)
    else:
        by = np.argsort(stratum, kind="stable")
        cuts = np.searchsorted(stratum[by], np.arange(n_strata + 1), side="left")
        for s in range(n_strata):
            rows = by[cuts[s]:cuts[s + 1]]
            if rows.size == 0:
                continue
            ts = times[bounds[s]:bounds[s + 1]]
            lo[rows] = bounds[s] + positions_right(ts, start[rows])
            hi[rows] = bounds[s] + positions_right(ts, stop[rows])
    K = times.shape[0]
    event_rows = ev[o]
    event_k = np.cumsum(new) - 1
    deaths = np.bincount(event_k, weights=weight[event_rows], minlength=K)
    w_ev = weight[event_rows]
    whole = bool(np.all(np.abs(w_ev - np.rint(w_ev)) < 1e-9))
    if whole:
        units = np.rint(deaths).astype(np.int64)
    else:
        units = np.bincount(event_k, minlength=K).astype(np.int64)
    units = np.maximum(units, 1)
    omega = deaths / units
    unit_k = np.repeat(np.arange(K), units)
    first = np.cumsum(units) - units
    unit_f = (np.arange(unit_k.shape[0]) - first[unit_k]) / units[unit_k]
    event_starts = np.flatnonzero(new)
    row_ptr = np.arange(n + 1, dtype=itype)
    churn_k = np.empty(ev.shape[0], dtype=np.int64)
    churn_k[o] = event_k
    return RiskIndex(times, time_stratum, bounds, lo, hi, row_ptr, event_rows,
                     event_k, event_starts, ev, churn_k, deaths, units, omega, unit_k, unit_f,
                     int(n_strata))


def window_sum(index: RiskIndex, per_time: np.ndarray) -> np.ndarray:
    """For each row, the sum of ``per_time[k]`` over its risk window ``[lo, hi)``.

    ``per_time`` may be (K,) or (K, q); returns (n,) or (n, q).
    """
    c = np.zeros((per_time.shape[0] + 1,) + per_time.shape[1:])
    np.cumsum(per_time, axis=0, out=c[1:])
    out = np.take(c, index.hi, axis=0)  # take: faster than fancy indexing here
    out -= np.take(c, index.lo, axis=0)
    return out


def risk_sums(index: RiskIndex, r: np.ndarray, X: np.ndarray | None = None
              ) -> tuple[np.ndarray, np.ndarray | None]:
    """S0 (K,) and S1 (K, p): sums of ``r`` and ``r x`` over each risk set.

    Difference arrays and one cumulative sum: ``bincount`` at ``lo`` minus at
    ``hi`` for S0; for S1 the sparse product :math:`M X = M_{lo}X - M_{hi}X`
    (module docstring), each a stream over a C-ordered ``X`` with no (n, p)
    temporary.
    """
    K = index.times.shape[0]
    lo, hi = index.lo, index.hi
    S0 = np.cumsum(np.bincount(lo, r, K + 1) - np.bincount(hi, r, K + 1))[:K]
    if X is None:
        return S0, None
    n = r.shape[0]
    at_lo = sparse.csc_matrix((r, lo, index.row_ptr), shape=(K + 1, n), copy=False)
    at_hi = sparse.csc_matrix((r, hi, index.row_ptr), shape=(K + 1, n), copy=False)
    X = np.ascontiguousarray(X)
    D1 = at_lo @ X
    D1 -= at_hi @ X
    return S0, np.cumsum(D1, axis=0)[:K]


class TimeStats(NamedTuple):
    """Per-churn-time quantities at one coefficient vector (all (K,) or (K, p))."""

    S0: np.ndarray
    S1: np.ndarray
    T0: np.ndarray
    T1: np.ndarray
    alpha: np.ndarray
    beta: np.ndarray
    gamma: np.ndarray
    delta: np.ndarray
    eps: np.ndarray
    log_term: float  # sum_k omega_k sum_j log a_j (on the shifted scale)


def time_stats(index: RiskIndex, X: np.ndarray, r: np.ndarray, efron: bool,
               X_ev: np.ndarray | None = None) -> TimeStats:
    """Risk-set sums and the Efron (or Breslow) scalars at each churn time.

    ``X_ev`` is ``X[index.churn_rows]`` if the caller keeps it (saves a gather).
    """
    K = index.times.shape[0]
    S0, S1 = risk_sums(index, r, X)
    cr, ck = index.churn_rows, index.churn_k
    rev = r[cr]
    if X_ev is None:
        X_ev = X[cr]
    T0 = np.bincount(ck, rev, K)
    E = cr.shape[0]
    tied = sparse.csc_matrix((rev, ck, np.arange(E + 1)), shape=(K, E), copy=False)
    T1 = tied @ np.ascontiguousarray(X_ev)
    if efron:
        uk = index.unit_k
        f = index.unit_f
        a = S0[uk] - f * T0[uk]
        inv = 1.0 / a
        inv2 = inv * inv
        om = index.omega
        alpha = om * np.bincount(uk, inv, K)
        beta = om * np.bincount(uk, f * inv, K)
        gamma = om * np.bincount(uk, inv2, K)
        delta = om * np.bincount(uk, f * inv2, K)
        eps = om * np.bincount(uk, f * f * inv2, K)
        log_term = float(np.dot(om, np.bincount(uk, np.log(a), K)))
    else:
        D = index.deaths
        alpha = D / S0
        gamma = alpha / S0
        beta = np.zeros(K)
        delta = np.zeros(K)
        eps = np.zeros(K)
        log_term = float(np.dot(D, np.log(S0)))
    return TimeStats(S0, S1, T0, T1, alpha, beta, gamma, delta, eps, log_term)


def weighted_cross(X: np.ndarray, v: np.ndarray, chunk: int = CHUNK) -> np.ndarray:
    """:math:`X^\\top \\mathrm{diag}(v) X` for ``v >= 0``, in row chunks (no n x p temporary).

    Computed as :math:`Y^\\top Y` with :math:`Y = \\mathrm{diag}(\\sqrt v)X`, chunk by chunk
    into one reused buffer.
    """
    n, p = X.shape
    H = np.zeros((p, p))
    Y = np.empty((min(chunk, n), p))
    s = np.empty(min(chunk, n))
    for a in range(0, n, chunk):
        b = min(a + chunk, n)
        Yb, sb = Y[:b - a], s[:b - a]
        np.maximum(v[a:b], 0.0, out=sb)
        np.sqrt(sb, out=sb)
        np.multiply(X[a:b], sb[:, None], out=Yb)
        H += Yb.T @ Yb
    return H


class RiskState(NamedTuple):
    """Everything at one coefficient vector that the score, information, residuals and
    baseline share: computed once per Newton step and handed on."""

    beta: np.ndarray
    r: np.ndarray       # (n,) w exp(eta - shift)
    shift: float        # max eta (keeps exp finite)
    linear: float       # sum over churn rows of w * eta
    stats: TimeStats


def risk_state(index: RiskIndex, X: np.ndarray, weight: np.ndarray, beta: np.ndarray,
               offset: np.ndarray | None = None, efron: bool = True,
               X_ev: np.ndarray | None = None) -> RiskState:
    """Linear predictor, risk scores and per-time sums at ``beta`` (one pass over ``X``
    for eta, one for the risk sums). ``X_ev`` as in :func:`time_stats`."""
    er = index.churn_rows
    beta = np.asarray(beta, dtype=float)
    if offset is None and not beta.any():
        r = np.array(weight, dtype=float)  # eta = 0: no pass over X needed
        shift = 0.0
        linear = 0.0
    else:
        eta = X @ beta
        if offset is not None:
            eta += offset
        shift = float(eta.max()) if eta.size else 0.0
        linear = float(np.dot(weight[er], eta[er]))
        eta -= shift
        r = np.exp(eta, out=eta)
        r *= weight
    return RiskState(beta, r, shift, linear, time_stats(index, X, r, efron, X_ev))


def derivatives_at(index: RiskIndex, X: np.ndarray, state: RiskState, dwX: np.ndarray,
                   efron: bool = True, hessian: bool = True
                   ) -> tuple[float, np.ndarray, np.ndarray | None]:
    """Log partial likelihood, score and information from a :class:`RiskState`."""
    st = state.stats
    ll = state.linear - st.log_term - state.shift * float(index.deaths.sum())
    grad = dwX - (st.alpha @ st.S1 - st.beta @ st.T1)
    if not hessian:
        return ll, grad, None
    r = state.r
    er, ek = index.churn_rows, index.churn_k
    v = window_sum(index, st.alpha)
    v *= r
    if efron:
        v[er] -= r[er] * st.beta[ek]
    H = weighted_cross(X, v)
    del v
    S1, T1 = st.S1, st.T1
    outer = (S1 * st.gamma[:, None]).T @ S1
    if efron:
        c = (S1 * st.delta[:, None]).T @ T1
        outer = outer - c - c.T + (T1 * st.eps[:, None]).T @ T1
    return ll, grad, H - outer


def cox_derivatives(index: RiskIndex, X: np.ndarray, weight: np.ndarray, churned: np.ndarray,
                    beta: np.ndarray, offset: np.ndarray | None = None, efron: bool = True,
                    hessian: bool = True, X_ev: np.ndarray | None = None,
                    dwX: np.ndarray | None = None
                    ) -> tuple[float, np.ndarray, np.ndarray | None]:
    """Log partial likelihood, score and information (negative Hessian) at ``beta``.

    See the module docstring for the formulas. ``X`` should be centred (the
    likelihood does not change; the sums are better conditioned) and is best
    C-ordered. ``X_ev`` (``X[churn_rows]``) and ``dwX`` (:math:`\\sum_i d_iw_ix_i`)
    do not change with ``beta``; callers that iterate pass them in. ``churned``
    is only used for ``dwX``: the churn rows are ``index.churn_rows``.
    """
    state = risk_state(index, X, weight, beta, offset, efron, X_ev)
    if dwX is None:
        dwX = (weight * churned) @ X
    return derivatives_at(index, X, state, dwX, efron, hessian)


def breslow_increments(index: RiskIndex, X: np.ndarray, weight: np.ndarray, beta: np.ndarray,
                       offset: np.ndarray | None = None, state: RiskState | None = None
                       ) -> np.ndarray:
    """Breslow (1972) baseline hazard increments :math:`dH_0(t_k) = D_k / S_0(t_k)`.

    At the covariate vector ``x = 0`` of ``X`` (the column means when ``X`` is
    centred), with the offset included in the linear predictor. A
    :class:`RiskState` at ``beta`` already holds :math:`S_0 e^{-\\text{shift}}`.
    """
    if state is not None:
        return index.deaths / state.stats.S0 * np.exp(-state.shift)
    eta = X @ beta
    if offset is not None:
        eta = eta + offset
    S0, _ = risk_sums(index, weight * np.exp(eta))
    return index.deaths / S0


def score_residuals(index: RiskIndex, X: np.ndarray, weight: np.ndarray, churned: np.ndarray,
                    beta: np.ndarray, offset: np.ndarray | None = None, efron: bool = True,
                    cluster: np.ndarray | None = None, n_clusters: int | None = None,
                    state: RiskState | None = None, any_order: bool = False) -> np.ndarray:
    r"""Score residuals :math:`w_i L_i`, per row (n, p) or summed by cluster (C, p).

    Their column sums are the score. Start-stop form (Therneau & Grambsch
    2000, sec. 4.6; Lin & Wei 1989, JASA 84:1074 for their use in the robust
    variance):

    .. math::

        w_iL_i = d_i w_i (x_i - \bar{\bar x}_{k(i)}) - r_i\,(x_i A_i - \mathcal H_i)
                 + d_i r_i (x_i \beta_{k(i)} - H'_{k(i)})

    with :math:`A_i, \mathcal H_i` window sums of :math:`\alpha_k` and
    :math:`H_k = \gamma_k S_1 - \delta_k T_1`, :math:`H'_k = \delta_k S_1 - \epsilon_k T_1`
    and the Efron mean :math:`\bar{\bar x}_k = (\alpha_k S_1 - \beta_k T_1)/D_k`.
    Under Breslow ties these reduce to the familiar
    :math:`d_i(x_i-\bar x_{k(i)}) - e^{\eta_i}\sum_{k} (x_i-\bar x_k)\,dH_0(t_k)`.

    With ``cluster`` (int codes) the rows are summed by cluster through sparse
    products over the rows grouped by cluster, so no (n, p) array is formed. ``state`` (a
    :class:`RiskState` at ``beta``) saves recomputing the risk sums. With
    ``any_order`` the cluster sums come in an unspecified row order (all a sum of
    outer products such as the robust variance needs), which saves a scatter.
    """
    if state is None:
        state = risk_state(index, X, weight, beta, offset, efron)
    r, st = state.r, state.stats
    Hk = st.S1 * st.gamma[:, None] - st.T1 * st.delta[:, None]
    CH = np.zeros((Hk.shape[0] + 1, Hk.shape[1]))
    np.cumsum(Hk, axis=0, out=CH[1:])
    rA = window_sum(index, st.alpha)
    rA *= r
    er, ek = index.churn_rows, index.churn_k
    xbar = (st.S1 * st.alpha[:, None] - st.T1 * st.beta[:, None]) / index.deaths[:, None]
    Hp = st.S1 * st.delta[:, None] - st.T1 * st.eps[:, None]
    p = X.shape[1]
    n = X.shape[0]
    # churn rows: ev_i = x_i (w_i + r_i beta_k) - (w_i xbar_k + r_i H'_k)
    x_coef = weight[er] + r[er] * st.beta[ek] if efron else weight[er].copy()
    ev_const = xbar[ek]
    ev_const *= weight[er, None]
    if efron:
        hp = Hp[ek]
        hp *= r[er, None]
        ev_const += hp
        del hp
    if cluster is None:
        out = np.empty((n, p))
        for j in range(p):
            ch = np.ascontiguousarray(CH[:, j])
            col = r * (ch[index.hi] - ch[index.lo]) - X[:, j] * rA
            col[er] += X[er, j] * x_coef - ev_const[:, j]
            out[:, j] = col
        return out
    # U_c = sum_k Q[c, k] CH[k] - sum_i P[c, i] x_i - churn-row constants, with sparse
    # Q, P in CSR form over the rows grouped by cluster; the churn rows' x-terms go into P.
    # When each cluster's rows are contiguous (the usual layout) the groups are the runs
    # of equal codes and need no sorting or gathers; otherwise the rows are sorted once.
    C = int(n_clusters or cluster.max() + 1)
    itype = index.row_ptr.dtype
    pdata = rA
    pdata[er] -= x_coef
    del rA
    run_starts = np.flatnonzero(cluster[1:] != cluster[:-1]) + 1
    run_codes = cluster[np.concatenate(([0], run_starts))]
    if np.bincount(run_codes, minlength=C).max() <= 1:  # each cluster is one run
        groups = run_codes.shape[0]
        indptr = np.concatenate(([0], run_starts, [n])).astype(itype)
        cols = index.row_ptr[:-1]
        lo, hi, r_in = index.lo, index.hi, r
    else:
        groups, run_codes = C, None
        indptr = np.zeros(C + 1, dtype=itype)
        np.cumsum(np.bincount(cluster, minlength=C), out=indptr[1:])
        cols = np.argsort(cluster, kind="stable").astype(itype)
        pdata = pdata[cols]
        lo, hi, r_in = index.lo[cols], index.hi[cols], r[cols]
    P = sparse.csr_matrix((pdata, cols, indptr), shape=(groups, n), copy=False)
    U = P @ np.ascontiguousarray(X)
    np.negative(U, out=U)
    del P, pdata, cols
    K1 = CH.shape[0]
    U += sparse.csr_matrix((r_in, hi, indptr), shape=(groups, K1), copy=False) @ CH
    U -= sparse.csr_matrix((r_in, lo, indptr), shape=(groups, K1), copy=False) @ CH
    del lo, hi, r_in
    # churn-row constants go to their group: the run holding the row, or its cluster
    owner = cluster[er] if run_codes is None else np.searchsorted(indptr, er, "right") - 1
    G = sparse.csc_matrix((np.ones(er.shape[0]), owner, np.arange(er.shape[0] + 1)),
                          shape=(groups, er.shape[0]))
    U -= G @ ev_const
    if run_codes is not None and not any_order:
        by_code = np.zeros((C, p))
        by_code[run_codes] = U
        U = by_code
    return U


def schoenfeld_residuals(index: RiskIndex, X: np.ndarray, weight: np.ndarray, beta: np.ndarray,
                         offset: np.ndarray | None = None, efron: bool = True
                         ) -> np.ndarray:
    r"""Schoenfeld (1982, Biometrika 69:239) residuals of the churn rows, (E, p).

    :math:`s_i = x_i - \bar x_{k(i)}` with the risk-weighted mean
    :math:`\bar x = S_1/S_0` (Breslow) or the Efron mean
    :math:`\bar{\bar x}_k = (\alpha_k S_1 - \beta_k T_1)/D_k` (the average of the
    means over the Efron steps). Rows follow ``index.event_rows``.
    """
    eta = X @ beta
    if offset is not None:
        eta = eta + offset
    r = weight * np.exp(eta - float(eta.max()))
    st = time_stats(index, X, r, efron)
    xbar = (st.S1 * st.alpha[:, None] - st.T1 * st.beta[:, None]) / index.deaths[:, None]
    return X[index.event_rows] - xbar[index.event_k]


def newton_cox(index: RiskIndex, X: np.ndarray, weight: np.ndarray, churned: np.ndarray,
               offset: np.ndarray | None = None, efron: bool = True, penalty: float = 0.0,
               beta0: np.ndarray | None = None, max_iter: int = 50, tol: float = 1e-9,
               max_halvings: int = 40, check_info0=None) -> NewtonSolution:
    r"""Maximise the (optionally L2-penalised) log partial likelihood by Newton–Raphson.

    Penalised objective :math:`\ell(\beta) - \tfrac{\lambda}{2}\lVert\beta\rVert^2`.
    Each step solves :math:`(\mathcal I + \lambda I)s = U - \lambda\beta` and is
    halved while the objective falls (:func:`retain.kernels.newton.newton_maximize`,
    rule ``"standard_errors"``): stop when every component of the Newton step is
    below ``tol`` standard errors, or at the round-off floor. Newton converges
    quadratically, so the error left in :math:`\beta` is far below ``tol``
    standard errors.

    The solution's ``state`` is the :class:`RiskState` at the estimate (reused by
    the robust errors and the baseline); only the current and the candidate state
    are alive at once. ``check_info0``, if given, is called with the unpenalised
    information at ``beta0`` before the first step (a caller's check for collinear
    columns; it may raise).
    """
    p = X.shape[1]
    beta = np.zeros(p) if beta0 is None else np.array(beta0, dtype=float)

    X_ev = np.ascontiguousarray(X[index.churn_rows])
    dwX = weight[index.churn_rows] @ X_ev

    def objective(b: np.ndarray, hess: bool = True):
        st = risk_state(index, X, weight, b, offset, efron, X_ev)
        ll, g, H = derivatives_at(index, X, st, dwX, efron, hess)
        if penalty:
            ll = ll - 0.5 * penalty * float(b @ b)
            g = g - penalty * b
            if H is not None:
                H = H + penalty * np.eye(p)
        return ll, g, H, st

    check = None
    if check_info0 is not None:
        def check(H: np.ndarray) -> None:
            check_info0(H - penalty * np.eye(p) if penalty else H)
    return newton_maximize(objective, beta, rule="standard_errors", tol=tol,
                           max_iter=max_iter, max_halvings=max_halvings, check_start=check)


def concordance_counts(index: RiskIndex, eta: np.ndarray, churned: np.ndarray,
                       weight: np.ndarray) -> tuple[float, float, float, float]:
    r"""Harrell's C on start-stop data: pairs judged among those at risk at each churn time.

    For a churn of row :math:`i` at :math:`t_k`, every row :math:`j` at risk at
    :math:`t_k` (same stratum, :math:`\text{start}_j < t_k \le \text{stop}_j`)
    that does not itself churn at :math:`t_k` forms a comparable pair with
    weight :math:`w_iw_j`; it is concordant when :math:`\eta_i > \eta_j`
    (higher risk churned first) and tied when equal, each row's risk score
    being the one in force at :math:`t_k` (Harrell et al. 1982, JAMA 247:2543;
    for static data the same pairs as scikit-survival's
    ``concordance_index_censored``).

    A sweep over churn times with a Fenwick tree over risk-score ranks,
    updated and queried in vectorised batches (log2 n numpy passes per batch).

    Returns (concordant, discordant, tied_risk, comparable), weighted.
    """
    K = index.times.shape[0]
    uniq, rank = np.unique(eta, return_inverse=True)
    size = uniq.shape[0]
    # process by churn time: entries (lo == k) then exits (hi == k) then queries at k
    tree = np.zeros(size + 1)

    def add(pos: np.ndarray, val: np.ndarray) -> None:
        i = pos + 1
        while i.size:
            np.add.at(tree, i, val)
            i = i + (i & -i)
            keep = i <= size
            i, val = i[keep], val[keep]

    def prefix(pos: np.ndarray) -> np.ndarray:
        # sum of tree over ranks < pos
        out = np.zeros(pos.shape[0])
        i = pos.copy()
        while True:
            m = i > 0
            if not m.any():
                break
            out[m] += tree[i[m]]
            i[m] = i[m] - (i[m] & -i[m])
        return out

    lo_order = np.argsort(index.lo, kind="stable")
    lo_cuts = np.searchsorted(index.lo[lo_order], np.arange(K + 1), side="left")
    hi_order = np.argsort(index.hi, kind="stable")
    hi_cuts = np.searchsorted(index.hi[hi_order], np.arange(K + 1), side="left")
    er, ek = index.event_rows, index.event_k
    ev_cuts = np.searchsorted(ek, np.arange(K + 1), side="left")
    conc = disc = tied = comp = 0.0
    # rows with lo == hi are never at risk; adding then removing is harmless
    for k in range(K):
        a = lo_order[lo_cuts[k]:lo_cuts[k + 1]]
        if a.size:
            add(rank[a], weight[a])
        b = hi_order[hi_cuts[k]:hi_cuts[k + 1]]
        if b.size:
            add(rank[b], -weight[b])
        q = er[ev_cuts[k]:ev_cuts[k + 1]]
        qr = rank[q]
        less = prefix(qr)
        leq = prefix(qr + 1)
        total = prefix(np.array([size]))[0]
        # remove the tied churns at t_k themselves from their own comparison sets
        qw = weight[q]
        srt = np.argsort(qr, kind="stable")
        qs, ws = qr[srt], qw[srt]
        cw = np.concatenate(([0.0], np.cumsum(ws)))
        below = cw[np.searchsorted(qs, qr, side="left")]
        upto = cw[np.searchsorted(qs, qr, side="right")]
        less_o = less - below
        eq_o = (leq - less) - (upto - below)
        tot_o = total - cw[-1]
        conc += float(np.dot(qw, less_o))
        tied += float(np.dot(qw, eq_o))
        disc += float(np.dot(qw, tot_o - less_o - eq_o))
        comp += float(np.dot(qw, np.full(q.shape[0], tot_o)))
    return conc, disc, tied, comp
