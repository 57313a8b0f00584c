"""Extremes of local polynomial fits: a spike's peak, trough and fastest fall between samples.

The largest sample of a noisy curve, or the largest value of a spline through noisy samples,
lies beyond the true extreme on average: among many noisy values the largest is picked. A
least-squares polynomial over a window of samples has few degrees of freedom, so its extreme
moves with the noise far less. The window is the shortest whose noise is small enough, and
never wider than the extreme itself, where a low-order polynomial stops describing it.
Functions take arrays and return arrays aligned with the extremes given; nothing here reads
files or prints.
"""
from __future__ import annotations

from functools import lru_cache
from math import factorial

import numpy as np

from ..errors import InvalidSettingError

__all__ = ["fit_weights", "fit_noise_gain", "matched_windows", "fitted_extremes", "fit_weights_at"]

#: Grid points per sample on which a fit's extreme is searched.
GRID_PER_SAMPLE = 100


@lru_cache(maxsize=256)
def fit_weights(window: int, order: int, deriv: int, reach: float = 1.0) -> np.ndarray:
    """Weights of a least-squares polynomial's value or derivative on a grid.

    Parameters
    ----------
    window : int
        Samples fitted, odd, centred on sample 0.
    order : int
        Polynomial order, below `window`.
    deriv : int
        0 for the fitted value, 1 for its derivative (per sample), ...
    reach : float, optional
        The grid runs from -reach to +reach samples, :data:`GRID_PER_SAMPLE` points per
        sample.

    Returns
    -------
    ndarray, shape (grid points, window)
        Row g dotted with the window's samples is the fit's `deriv`-th derivative at grid
        point g (read-only: the array is cached).
    """
    if window < 1 or window % 2 == 0:
        raise InvalidSettingError(f"`window` must be a positive odd number, got {window}")
    if not 0 <= order < window:
        raise InvalidSettingError(f"`order` must be from 0 to window - 1, got {order}")
    half = window // 2
    x = np.arange(-half, half + 1, dtype=float)
    solve = np.linalg.pinv(np.vander(x, order + 1, increasing=True))  # (order + 1, window)
    points = int(round(2 * reach * GRID_PER_SAMPLE)) + 1
    grid = np.linspace(-reach, reach, points)
    basis = np.zeros((points, order + 1))
    for k in range(deriv, order + 1):
        basis[:, k] = factorial(k) / factorial(k - deriv) * grid ** (k - deriv)
    weights = basis @ solve
    weights.flags.writeable = False
    return weights


@lru_cache(maxsize=256)
def fit_noise_gain(window: int, order: int, deriv: int) -> float:
    """SD of the fit's `deriv`-th derivative at the window centre per unit of white noise."""
    row = fit_weights(window, order, deriv, 0.0)[0]
    return float(np.sqrt(np.sum(row * row)))


def matched_windows(noise: np.ndarray, scale: np.ndarray, widest: np.ndarray, order: int,
                    deriv: int, fraction: float) -> np.ndarray:
    """Per extreme, the shortest odd window whose fit is quiet enough, within its width.

    Parameters
    ----------
    noise : ndarray
        Recording noise SD per extreme (NaN: unknown).
    scale : ndarray
        Size of each extreme, in the units of the fitted derivative per sample.
    widest : ndarray of int
        Widest window allowed per extreme (the extreme's own width, in samples).
    order, deriv : int
        As for :func:`fit_weights`.
    fraction : float
        The fit's noise SD (:func:`fit_noise_gain` times `noise`) must be at most this
        fraction of `scale`.

    Returns
    -------
    ndarray of int
        Odd windows, at least ``order + 2`` (one more sample than the polynomial needs) and
        at most `widest` where that allows; the widest allowed where no window is quiet
        enough, the shortest where the noise is unknown.
    """
    shortest = order + 2 + (order + 2 + 1) % 2
    widest = np.maximum(np.asarray(widest, dtype=np.int64), shortest)
    widest -= (widest + 1) % 2
    out = np.full(widest.shape, shortest, dtype=np.int64)
    need = np.asarray(fraction * np.abs(scale) / np.where(noise > 0, noise, np.nan))
    todo = np.isfinite(need)
    window = shortest
    out[todo] = widest[todo]
    while todo.any() and window <= widest[todo].max():
        quiet = todo & (fit_noise_gain(window, order, deriv) <= need) & (window <= widest)
        out[quiet] = window
        todo &= ~quiet
        window += 2
    return out


def fitted_extremes(x: np.ndarray, centre: np.ndarray, window: np.ndarray, order: int,
                    deriv: int, largest: bool) -> tuple[np.ndarray, np.ndarray]:
    """Extreme, near each centre, of the local polynomial fitted around it.

    Parameters
    ----------
    x : ndarray
        The samples.
    centre : ndarray of int
        A sample at or next to each extreme.
    window : ndarray of int
        Odd window per extreme (:func:`matched_windows`).
    order, deriv : int
        As for :func:`fit_weights`.
    largest : bool
        The maximum (True) or the minimum of the fit's `deriv`-th derivative.

    Returns
    -------
    position : ndarray
        Fractional sample index of each extreme (NaN where the window leaves `x`).
    value : ndarray
        The extreme, per sample**deriv (NaN likewise). Its weights on the samples (the
        extreme's position held fixed) are :func:`fit_weights_at`'s.

    Notes
    -----
    The fit is searched from a quarter of its window (at least one sample) before its centre
    to as far after it; when its extreme lies at the end of that span the window is moved that
    far towards it and the fit searched again (once), so an extreme up to half a window (at
    least two samples) from the given centre is found.
    The best grid point is refined with a parabola through it and its neighbours.
    """
    x = np.asarray(x, dtype=float)
    centre = np.asarray(centre, dtype=np.int64).copy()
    window = np.asarray(window, dtype=np.int64)
    n = centre.size
    position, value = np.full(n, np.nan), np.full(n, np.nan)
    sign = 1.0 if largest else -1.0
    pending = np.ones(n, dtype=bool)
    for attempt in range(2):
        for w in np.unique(window[pending]):
            half = w // 2
            rows = np.flatnonzero(pending & (window == w))
            inside = (centre[rows] - half >= 0) & (centre[rows] + half < x.size)
            pending[rows[~inside]] = False
            rows = rows[inside]
            if rows.size == 0:
                continue
            reach = float(max(1, w // 4))
            grid = fit_weights(int(w), order, deriv, reach)
            samples = x[centre[rows, None] + np.arange(-half, half + 1)]
            curve = sign * (samples @ grid.T)
            best = np.argmax(curve, axis=1)
            last = grid.shape[0] - 1
            at_end = (best == 0) | (best == last)
            if attempt == 0:
                move = rows[at_end]
                centre[move] += np.where(best[at_end] == 0, -1, 1) * int(reach)
                rows, curve, best = rows[~at_end], curve[~at_end], best[~at_end]
            pending[rows] = False
            best = np.clip(best, 1, last - 1)
            r = np.arange(rows.size)
            a, b, c = curve[r, best - 1], curve[r, best], curve[r, best + 1]
            bend = a - 2.0 * b + c
            with np.errstate(divide="ignore", invalid="ignore"):
                delta = np.clip(np.where(bend < 0, 0.5 * (a - c) / bend, 0.0), -0.5, 0.5)
            step = 1.0 / GRID_PER_SAMPLE
            position[rows] = centre[rows] - reach + (best + delta) * step
            value[rows] = sign * (b - 0.25 * (a - c) * delta)
    return position, value


def fit_weights_at(window: np.ndarray, offset: np.ndarray, order: int, deriv: int
                   ) -> np.ndarray:
    """Per extreme, the weights of its fit's `deriv`-th derivative at `offset` samples from
    the window centre.

    Parameters
    ----------
    window : ndarray of int
        Odd window per extreme (0: none, a row of zeros).
    offset : ndarray
        Where the fit is read, in samples from the window centre.
    order, deriv : int
        As for :func:`fit_weights`.

    Returns
    -------
    ndarray, shape (n, widest window)
        Row k dotted with the samples centred on the window's centre (zero-padded either
        side to the widest window) gives the value; the first-order change of an extreme
        with the samples, its position held fixed.
    """
    window = np.asarray(window, dtype=np.int64)
    offset = np.asarray(offset, dtype=float)
    widest = int(window.max()) if window.size else 1
    widest = max(widest, 1)
    out = np.zeros((window.size, widest))
    for w in np.unique(window[window > 0]):
        rows = np.flatnonzero(window == w)
        half = w // 2
        x = np.arange(-half, half + 1, dtype=float)
        solve = np.linalg.pinv(np.vander(x, order + 1, increasing=True))
        basis = np.zeros((rows.size, order + 1))
        for k in range(deriv, order + 1):
            basis[:, k] = factorial(k) / factorial(k - deriv) * offset[rows] ** (k - deriv)
        pad = (widest - w) // 2
        out[rows, pad:pad + w] = basis @ solve
    return out
