"""Digital linear filters (DLF) for the Hankel and Fourier transforms.

Filter coefficients come from libdlf (Werthmueller et al.). The transforms
use the lagged-convolution idea of Anderson (1982, ACM TOMS 8, 344-368):
outputs on a log-spaced grid whose spacing equals the filter's spacing share
one set of kernel samples, so N outputs cost (filter length + N - 1) kernel
evaluations. Results at arbitrary offsets or times then come from a cubic
spline in log offset or log time. Everything here is linear in the kernel
samples, so each transform is returned as a matrix.
"""
from __future__ import annotations

from functools import lru_cache

import libdlf
import numpy as np
from scipy.interpolate import CubicSpline, make_interp_spline

from ..errors import TemInputError

__all__ = ["HANKEL_FILTERS", "FOURIER_FILTERS", "hankel_filter", "fourier_filter",
           "lagged_grid", "lagged_matrix", "spline_matrix", "spline_weighted_sum"]

HANKEL_FILTERS = ("key_101_2009", "key_201_2009", "key_401_2009", "wer_201_2018",
                  "key_101_2012", "key_201_2012")
FOURIER_FILTERS = ("wer_101_2020b", "wer_101_2020a", "key_81_2009", "key_101_2012",
                   "key_201_2012", "key_601_2009")


@lru_cache(maxsize=None)
def hankel_filter(name: str):
    """(base, j0, j1) of a libdlf Hankel filter."""
    if name not in HANKEL_FILTERS:
        raise TemInputError(f"hankel_filter: unknown filter {name!r}; valid: {', '.join(HANKEL_FILTERS)}")
    base, j0, j1 = getattr(libdlf.hankel, name)()
    return np.array(base), np.array(j0), np.array(j1)


@lru_cache(maxsize=None)
def fourier_filter(name: str):
    """(base, sin, cos) of a libdlf Fourier filter."""
    if name not in FOURIER_FILTERS:
        raise TemInputError(f"fourier_filter: unknown filter {name!r}; valid: {', '.join(FOURIER_FILTERS)}")
    base, fsin, fcos = getattr(libdlf.fourier, name)()
    return np.array(base), np.array(fsin), np.array(fcos)


def lagged_grid(base, xmin, xmax, pad=3):
    """Log grid of outputs x_j = x0 exp(j d) covering [xmin, xmax] with ``pad`` extra points
    each side, and the kernel arguments k_m = base[0]/x0 * exp((m - (nx-1)) d) it needs.

    Returns (x, arg, d): x ascending (nx,), arg ascending (nf + nx - 1,).
    Output j uses arguments base[i]/x_j = arg[i - j + nx - 1].
    """
    d = np.log(base[1] / base[0])
    j0 = int(np.floor(np.log(xmin) / d)) - pad
    j1 = int(np.ceil(np.log(xmax) / d)) + pad
    x = np.exp(d * np.arange(j0, j1 + 1))
    nx = x.size
    nf = base.size
    arg = base[0] / x[-1] * np.exp(d * np.arange(nf + nx - 1))
    return x, arg, d


def lagged_matrix(weights, nx):
    """Matrix C (nx, nf+nx-1) with sum_i w_i k(base_i/x_j) = (C @ k)[j] for ascending args."""
    nf = weights.size
    C = np.zeros((nx, nf + nx - 1))
    for j in range(nx):
        # base_i / x_j = arg[i + (nx - 1 - j)]
        C[j, nx - 1 - j: nx - 1 - j + nf] = weights
    return C


def spline_matrix(x_grid, x_eval, log=True, degree=3):
    """Matrix S (n_eval, n_grid) of a not-a-knot interpolating spline through the grid, in log x.

    ``degree`` is odd: 3 (cubic) or higher; a degree-7 spline reaches about 1e-5 on the
    transient spectra at 8 points per decade where the cubic needs about 20 (measured in
    docs/forward.md).
    """
    xg = np.log(x_grid) if log else np.asarray(x_grid, float)
    xe = np.log(x_eval) if log else np.asarray(x_eval, float)
    if degree == 3:
        return CubicSpline(xg, np.eye(xg.size), axis=0)(xe)
    return make_interp_spline(xg, np.eye(xg.size), k=degree, axis=0)(xe)


def spline_weighted_sum(x_grid, x_eval, rows, weights, n_rows):
    """Matrix A (n_rows, n_grid) with A[r] = sum over j with rows[j] = r of
    weights[j] * (spline row at x_eval[j]), for the spline of :func:`spline_matrix`.

    Equal to ``W @ spline_matrix(x_grid, x_eval)`` for the sparse W given by
    (rows, weights), without forming the (n_eval, n_grid) matrix: the spline's
    piecewise-cubic coefficients are contracted with the summed powers of the
    offsets within each interval.
    """
    xg = np.log(x_grid)
    xe = np.log(x_eval)
    c = CubicSpline(xg, np.eye(xg.size), axis=0).c          # (4, n_int, n_grid)
    k = np.clip(np.searchsorted(xg, xe, side="right") - 1, 0, xg.size - 2)
    dx = xe - xg[k]
    acc = np.zeros((4, n_rows, xg.size - 1))
    for m in range(4):
        np.add.at(acc[m], (rows, k), weights * dx ** (3 - m))
    return np.einsum("mrk,mkg->rg", acc, c)
