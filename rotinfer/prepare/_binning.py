"""Binning with error propagation: weighted means within bins, never across segments."""

from __future__ import annotations

import numpy as np

__all__ = ["bin_light_curve", "weighted_groups"]


def weighted_groups(groups, flux, err, time):
    """Weighted mean flux and time and the error of the mean, per group id (0..k-1).

    Weights are 1/err^2 scaled by each group's smallest error so that extreme values
    cannot overflow; the error of the weighted mean is 1/sqrt(sum of 1/err^2) (analytic).
    """
    k = int(groups.max()) + 1
    emin = np.full(k, np.inf)
    np.minimum.at(emin, groups, err)
    w = (emin[groups] / err) ** 2
    wsum = np.bincount(groups, w, minlength=k)
    mean_f = np.bincount(groups, w * flux, minlength=k) / wsum
    # Times: mean offset from each group's first time, so large epochs keep their precision.
    first = np.full(k, np.inf)
    np.minimum.at(first, groups, time)
    mean_t = first + np.bincount(groups, w * (time - first[groups]), minlength=k) / wsum
    return mean_t, mean_f, emin / np.sqrt(wsum)


def bin_light_curve(time, flux, err, segment, width: float, *, count=None):
    """Bin points into bins of ``width`` days within each segment (never across segments).

    Parameters
    ----------
    time, flux, err : ndarray of float, shape (n,)
        Times (days, sorted), relative flux and its one-sigma uncertainties (> 0).
    segment : ndarray of int, shape (n,)
        Segment index per point.
    width : float
        Bin width in days; bins start at each segment's first point.
    count : ndarray of int, shape (n,), optional
        Measurements behind each point (1 by default).

    Returns
    -------
    time, flux, err, segment, count : ndarrays, shape (m,)
        Weighted-mean time and flux per bin, the error of the weighted mean
        ``1 / sqrt(sum 1/err_i^2)`` (``err/sqrt(n)`` for n equal errors), the segment and
        the number of measurements per bin; sorted by time.
    """
    time = np.asarray(time, dtype=np.float64)
    count = np.ones(time.size, dtype=np.int64) if count is None else np.asarray(count)
    if time.size == 0:
        return time, np.asarray(flux), np.asarray(err), np.asarray(segment), count
    seg_ids, seg_index = np.unique(segment, return_inverse=True)
    start = np.full(seg_ids.size, np.inf)
    np.minimum.at(start, seg_index, time)
    index = np.floor((time - start[seg_index]) / width).astype(np.int64)
    keys = np.stack([seg_index, index])
    _, groups = np.unique(keys, axis=1, return_inverse=True)
    groups = groups.ravel()
    t, f, e = weighted_groups(groups, np.asarray(flux, float), np.asarray(err, float), time)
    k = t.size
    seg_out = np.zeros(k, dtype=np.int64)
    seg_out[groups] = np.asarray(segment)[np.arange(time.size)]
    n_out = np.bincount(groups, count, minlength=k).astype(np.int64)
    order = np.argsort(t, kind="stable")
    return t[order], f[order], e[order], seg_out[order], n_out[order]
