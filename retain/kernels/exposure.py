"""Exposure and decrements by band (tenure month, calendar month, hazard band).

Pure numpy: no validation, no pandas. Positions are in days; bands are given
by their sorted edges ``e_0 < e_1 < ... < e_K``.

A start-stop row is at risk on (lo, hi]. Its central exposure in band k is the
length of (lo, hi] ∩ (e_k, e_{k+1}], times the row's weight. The sum over bands
is therefore exactly the weighted sum of (hi - lo) inside [e_0, e_K] (the usual
central exposed-to-risk of a life table, e.g. Benjamin and Pollard, 1980, ch. 2).

:func:`band_exposure` sums by (group, band); :func:`exposure_by_row` keeps one
row per start-stop row for likelihoods with row covariates.

The sum avoids one output row per (row, band): each row adds its partial
first and last band directly, and +w / -w at the ends of its run of full
bands, so a cumulative sum over bands gives how many full bands cover each
band (a difference array). The work is O(n + K) per group.
"""

from __future__ import annotations

import numpy as np


def band_exposure(
    lo: np.ndarray,
    hi: np.ndarray,
    weight: np.ndarray,
    edges: np.ndarray,
    group: np.ndarray,
    n_groups: int,
) -> tuple[np.ndarray, np.ndarray]:
    """Exposure (days) and in-force counts by (group, band).

    Parameters
    ----------
    lo, hi : float arrays
        Each row is at risk on (lo, hi] (days). Parts outside [e_0, e_K] are ignored.
    weight : float array
        Row weights (frequency weights).
    edges : float array, length K + 1
        Sorted band edges; band k is (e_k, e_{k+1}].
    group : int array
        Group code of each row, 0 .. n_groups - 1.

    Returns
    -------
    exposure : (n_groups, K) float array
        Weighted days at risk in each band.
    in_force : (n_groups, K) float array
        Weighted number of rows at risk at each band's lower edge, i.e. with
        lo <= e_k < hi (the count "in force at the start of the month").
    """
    k = edges.shape[0] - 1
    lo_c = np.maximum(lo, edges[0])
    hi_c = np.minimum(hi, edges[-1])
    keep = lo_c < hi_c
    if not keep.all():
        lo_c, hi_c, weight, group = lo_c[keep], hi_c[keep], weight[keep], group[keep]
    # first band: e_ka <= lo < e_ka+1 ; last band: e_kb < hi <= e_kb+1
    ka = np.clip(np.searchsorted(edges, lo_c, side="right") - 1, 0, k - 1)
    kb = np.clip(np.searchsorted(edges, hi_c, side="left") - 1, 0, k - 1)
    width = np.diff(edges)
    same = ka == kb
    first = np.where(same, hi_c - lo_c, edges[ka + 1] - lo_c)
    last = np.where(same, 0.0, hi_c - edges[kb])
    size = n_groups * (k + 1)
    base = group.astype(np.int64) * (k + 1)
    expo = np.bincount(base + ka, weights=weight * first, minlength=size)
    expo += np.bincount(base + kb, weights=weight * last, minlength=size)
    # full bands ka+1 .. kb-1 (empty when kb <= ka + 1)
    spans = ~same
    full = np.bincount(base[spans] + ka[spans] + 1, weights=weight[spans], minlength=size)
    full -= np.bincount(base[spans] + kb[spans], weights=weight[spans], minlength=size)
    full = np.cumsum(full.reshape(n_groups, k + 1), axis=1)[:, :k]
    exposure = expo.reshape(n_groups, k + 1)[:, :k] + full * width
    # in force at e_k: first edge >= lo through the last edge < hi (= kb)
    kin = np.searchsorted(edges, lo_c, side="left")
    ok = kin <= kb
    force = np.bincount(base[ok] + kin[ok], weights=weight[ok], minlength=size)
    force -= np.bincount(base[ok] + kb[ok] + 1, weights=weight[ok], minlength=size)
    in_force = np.cumsum(force.reshape(n_groups, k + 1), axis=1)[:, :k]
    return exposure, in_force


def exposure_by_row(lo: np.ndarray, hi: np.ndarray, edges: np.ndarray
                    ) -> tuple[np.ndarray, np.ndarray]:
    """Time at risk of each row in each band, and the band of each row's exit.

    The per-row form of :func:`band_exposure`, for likelihoods whose rows carry
    their own covariates (the piecewise-constant hazard model), where no sum
    over rows can be taken first. Same bands, (e_k, e_{k+1}]; the last edge
    may be ``inf``; (lo, hi] must lie in [e_0, e_K]. One (n, K) pass of
    ``min(hi, e_{k+1}) - max(lo, e_k)``, clipped at 0.

    Returns
    -------
    exposure : (n, K) float array, the length of (lo, hi] ∩ (e_k, e_{k+1}]
    exit_band : (n,) int array, the band k with e_k < hi <= e_{k+1} (clipped to 0 .. K-1)
    """
    exposure = np.clip(np.minimum(hi[:, None], edges[1:]) - np.maximum(lo[:, None], edges[:-1]),
                       0.0, None)
    exit_band = np.searchsorted(edges, hi, side="left") - 1
    return exposure, np.clip(exit_band, 0, edges.shape[0] - 2)


def band_counts(
    band: np.ndarray,
    weight: np.ndarray,
    group: np.ndarray,
    n_groups: int,
    n_bands: int,
) -> np.ndarray:
    """Weighted counts by (group, band); rows with band outside 0 .. n_bands - 1 are ignored."""
    ok = (band >= 0) & (band < n_bands)
    idx = group[ok].astype(np.int64) * n_bands + band[ok]
    return np.bincount(idx, weights=weight[ok], minlength=n_groups * n_bands).reshape(
        n_groups, n_bands)


def piecewise_cumulative(edges: np.ndarray, rate: np.ndarray, x: np.ndarray) -> np.ndarray:
    """Cumulative hazard H(x) of a hazard constant at ``rate[k]`` (per day) on band k.

    H(x) = sum_{j<k} rate_j (e_{j+1} - e_j) + rate_k (x - e_k) for e_k <= x <= e_{k+1};
    x below e_0 gives 0 and x above e_K continues at the last band's rate.
    """
    k = edges.shape[0] - 1
    at_edge = np.concatenate([[0.0], np.cumsum(rate * np.diff(edges))])
    xc = np.maximum(x, edges[0])
    band = np.clip(np.searchsorted(edges, xc, side="right") - 1, 0, k - 1)
    return at_edge[band] + rate[band] * (xc - edges[band])


def split_at_edges(
    lo: np.ndarray,
    hi: np.ndarray,
    edges: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Cut each interval (lo, hi] at the band edges it crosses.

    ``edges`` must cover every interval (e_0 <= lo, hi <= e_K). Returns, per
    piece, the source row, the piece's (lo, hi], its band k (e_k <= piece lo,
    piece hi <= e_{k+1}) and whether it is the row's last piece. Pieces are
    never empty; their lengths add up to hi − lo.
    """
    k = edges.shape[0] - 1
    ka = np.clip(np.searchsorted(edges, lo, side="right") - 1, 0, k - 1)
    kb = np.clip(np.searchsorted(edges, hi, side="left") - 1, 0, k - 1)
    count = kb - ka + 1
    row = np.repeat(np.arange(lo.shape[0]), count)
    first = np.concatenate([[0], np.cumsum(count)[:-1]])
    band = ka[row] + (np.arange(row.shape[0]) - first[row])
    piece_lo = np.maximum(lo[row], edges[band])
    piece_hi = np.minimum(hi[row], edges[band + 1])
    return row, piece_lo, piece_hi, band, band == kb[row]
