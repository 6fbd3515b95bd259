"""Kernels that split an oblique trace into a part linear in the cells' path lengths and a remainder.

Along one ray the observed intensity ``I`` (background included) is a
function of the path lengths ``L_c`` through the cells it crosses. Its
derivative is exact and local (Rybicki & Lightman 1979, eq. 1.30 solved
cell by cell)::

    dI / dL_c = alpha_c (S_c - I_c^out) exp(-tau_c^front)

with ``I_c^out`` the intensity leaving cell ``c`` towards the observer and
``tau_c^front`` the optical depth between it and the observer. The tracer
writes a pixel's footprint mean of ``I`` as

    sum_c W_c K_c,p  +  lattice mean over the pixel of  R = I - sum_c W_c L_c

where ``W_c`` is the derivative averaged over the cell (weighted by path
length: :func:`sensitivity_pass`), ``K_c,p`` the exact overlap of cell
``c`` with pixel ``p``'s prism (:mod:`rtrace.transfer.footprint`), and the
remainder ``R`` (:func:`remainder_pass`) is what the ray lattice still has
to integrate. The split is an identity for any ``W`` (the lattice
quadrature of ``R`` converges to its footprint mean); with this ``W`` the
remainder vanishes for optically thin gas, so the pixels are exact there,
and in general it is second order in the cells' optical depths and in the
variation of the foreground's transmission across a cell.

Every kernel works on one lattice phase of :class:`tracer._ObliqueRoute`
(the rays ``(i0 + p, j0 + q)`` sharing the per-layer segments of
:func:`kernels.layer_segments`), over whole in-memory grids in the route's
``(a, b, c)`` axis order.
"""

import math

import numba
import numpy as np
from numba import prange

from ..physics.planck import SERIES_LIMIT, one_minus_exp_series
from .kernels import BLOCK_SHIFT, _cell_coefficients, _share_from_ratio
from .tasks import any_layout

# Rays thicker than this carry the transmission to the observer as exp(tau behind - tau), not as a
# running product started from e^{-tau} (which underflows near 745).
_DIRECT_TAU = 500.0


@any_layout
@numba.njit(cache=True, parallel=True)
def cell_coefficient_grids(nn_cells, temp, log_t0, inv_dlog_t, gtab, hk, alpha_pref, b_pref, em_ions, alpha, source,
                           ratio=None):
    """Fill ``alpha[a, b, c, :]`` (cm-1) and ``source[a, b, c, :]`` (``B_nu(T)``, cgs) for every cell.

    ``nn_cells`` is ``n_e x ion term`` and ``temp`` the temperature, both
    ``(A, B, C)`` (any strides); cells with ``nn = 0`` get ``alpha = 0`` (and
    their ``source`` is left as it was: it is never read where alpha is 0).
    Frequencies are the last (contiguous) axis. Same coefficients as the
    tracer's kernels (:func:`kernels._cell_coefficients`), with the He III
    share of the ion term from ``ratio`` (``n_e / ion term``, same layout, or
    None where the two are equal: :func:`rtrace.transfer.tracer.emission_ratio`);
    ``em_ions`` is unused here (the arguments are the tracer's ``FrequencyTables.args()``).
    """
    na, nb, nc = nn_cells.shape
    nf = hk.shape[0]
    gtab_t = np.ascontiguousarray(gtab.transpose(0, 2, 1))
    hk_max = hk.max()
    for a in prange(na):
        kap = np.empty(nf)
        src = np.empty(nf)
        for b in range(nb):
            for c in range(nc):
                nn = float(nn_cells[a, b, c])
                if nn > 0.0:
                    share = 0.0 if ratio is None else _share_from_ratio(float(ratio[a, b, c]))
                    _cell_coefficients(nn, share, float(temp[a, b, c]), log_t0, inv_dlog_t, gtab, gtab_t, hk,
                                       hk_max, alpha_pref, b_pref, kap, src)
                    for f in range(nf):
                        alpha[a, b, c, f] = kap[f]
                        source[a, b, c, f] = src[f]
                else:
                    for f in range(nf):
                        alpha[a, b, c, f] = 0.0


@numba.njit(cache=True, inline="always")
def _row_stride(count, seg_da):
    """Rays of a phase whose cell columns differ by at least this never share a cell in any layer."""
    span = 0
    for s in range(count.shape[0]):
        lo, hi = seg_da[s, 0], seg_da[s, 0]
        for g in range(1, count[s]):
            lo = min(lo, seg_da[s, g])
            hi = max(hi, seg_da[s, g])
        span = max(span, hi - lo)
    return span + 1


@any_layout
@numba.njit(cache=True, parallel=True)
def sensitivity_pass(alpha, source, blocks, k_lo, forward, i0, n_i, j0, n_j, count, seg_da, seg_db, seg_ds,
                     ray_i, ray_tau, bg, weight, out_w):
    """Add, for every ray of the phase and cell it crosses, ``weight * ds * dI/dL_c`` to ``out_w[cell]``.

    ``alpha``, ``source``, ``out_w``: ``(A, B, C, nfreq)``. ``ray_i``/``ray_tau``
    (nfreq, n_i n_j): the ray's emitted intensity (no background) and total
    optical depth from the tracer; ``bg`` (nfreq,) the background intensity
    behind the grid. ``weight`` is the fraction of a cell's volume one unit
    of a ray's path stands for, so summed over all phases ``out_w`` is the
    path-weighted mean derivative (cm-1 times intensity units). Rows of rays
    that could touch the same cell are never run at the same time (the
    stride of :func:`_row_stride`), so the sums are free of races and
    reproducible. One exponential per crossing (none below ``SERIES_LIMIT``
    in optical depth): the transmission to the observer is carried as
    ``e^{tau_behind - tau}``, updated by the cell's own factor.
    """
    nk = count.shape[0]
    nf = bg.shape[0]
    na, nb = alpha.shape[0], alpha.shape[1]
    stride = _row_stride(count, seg_da)
    for cls in range(stride):
        n_rows = (n_i - cls + stride - 1) // stride
        for t in prange(n_rows):
            p = cls + t * stride
            acc_i = np.empty(nf)        # intensity emitted behind, so far (no background)
            back = np.empty(nf)         # e^{-tau behind}
            front = np.empty(nf)        # e^{-(tau - tau behind)}: transmission to the observer
            behind = np.empty(nf)       # tau behind, for rays too thick to start from e^{-tau}
            for q in range(n_j):
                r = p * n_j + q
                for f in range(nf):
                    acc_i[f] = 0.0
                    back[f] = 1.0
                    front[f] = math.exp(-ray_tau[f, r])
                    behind[f] = 0.0
                for s in range(nk):
                    k = k_lo + s if forward else k_lo + nk - 1 - s
                    for g in range(count[s]):
                        a = i0 + p + seg_da[s, g]
                        b = j0 + q + seg_db[s, g]
                        if a < 0 or b < 0 or a >= na or b >= nb:
                            continue
                        if blocks[a >> BLOCK_SHIFT, b >> BLOCK_SHIFT, k >> BLOCK_SHIFT] == 0:
                            continue            # a block of cells with no emitting gas
                        if alpha[a, b, k, 0] == 0.0:
                            continue            # no gas (alpha is 0 at every frequency or none)
                        ds = seg_ds[s, g]
                        for f in range(nf):
                            kap = alpha[a, b, k, f]
                            src = source[a, b, k, f]
                            dtau = kap * ds
                            if dtau < SERIES_LIMIT:
                                att = one_minus_exp_series(dtau)      # 1 - e^{-dtau}
                                grow = 1.0 + dtau * (1.0 + dtau * (0.5 + dtau * (1.0 / 6.0 + dtau / 24.0)))
                            else:
                                att = -math.expm1(-dtau)
                                grow = 1.0 / (1.0 - att)                # e^{dtau}
                            acc_i[f] += att * (src - acc_i[f])
                            back[f] *= 1.0 - att
                            if ray_tau[f, r] < _DIRECT_TAU:
                                front[f] = min(front[f] * grow, 1.0)
                            else:                           # e^{-tau} would underflow: take it directly
                                behind[f] += dtau
                                front[f] = math.exp(min(behind[f] - ray_tau[f, r], 0.0))
                            i_out = acc_i[f] + bg[f] * back[f]
                            out_w[a, b, k, f] += weight * ds * kap * (src - i_out) * front[f]


@any_layout
@numba.njit(cache=True, parallel=True)
def remainder_pass(w_cells, blocks, k_lo, forward, i0, n_i, j0, n_j, count, seg_da, seg_db, seg_ds, out_linear):
    """``out_linear[f, r] = sum over the cells ray r crosses of W_c ds`` for one phase (``w_cells`` (A, B, C, nf))."""
    nk = count.shape[0]
    nf = w_cells.shape[3]
    na, nb = w_cells.shape[0], w_cells.shape[1]
    for p in prange(n_i):
        acc = np.empty(nf)
        for q in range(n_j):
            r = p * n_j + q
            for f in range(nf):
                acc[f] = 0.0
            for s in range(nk):
                k = k_lo + s if forward else k_lo + nk - 1 - s
                for g in range(count[s]):
                    a = i0 + p + seg_da[s, g]
                    b = j0 + q + seg_db[s, g]
                    if a < 0 or b < 0 or a >= na or b >= nb:
                        continue
                    if blocks[a >> BLOCK_SHIFT, b >> BLOCK_SHIFT, k >> BLOCK_SHIFT] == 0:
                        continue
                    ds = seg_ds[s, g]
                    for f in range(nf):
                        acc[f] += w_cells[a, b, k, f] * ds
            for f in range(nf):
                out_linear[f, r] = acc[f]


@any_layout
@numba.njit(cache=True, parallel=True)
def remainder_trace(alpha, source, w_cells, blocks, k_lo, forward, i0, n_i, j0, n_j, count, seg_da, seg_db,
                    seg_ds, bg, out_rem):
    """Trace one phase's rays on per-cell coefficients and return their remainders directly.

    ``out_rem[f, r] = I + I_bg (e^{-tau} - 1) - sum_c W_c ds`` (the formal
    solution of :func:`kernels._cross`, cell by cell; ``alpha``, ``source``,
    ``w_cells`` ``(A, B, C, nf)``). For the refined blocks of a split trace,
    where the lattice is dense: the coefficients are read, not recomputed
    per lattice phase.
    """
    nk = count.shape[0]
    nf = w_cells.shape[3]
    na, nb = w_cells.shape[0], w_cells.shape[1]
    for p in prange(n_i):
        acc_i = np.empty(nf)
        acc_t = np.empty(nf)
        lin = np.empty(nf)
        for q in range(n_j):
            r = p * n_j + q
            for f in range(nf):
                acc_i[f] = 0.0
                acc_t[f] = 0.0
                lin[f] = 0.0
            for s in range(nk):
                k = k_lo + s if forward else k_lo + nk - 1 - s
                for g in range(count[s]):
                    a = i0 + p + seg_da[s, g]
                    b = j0 + q + seg_db[s, g]
                    if a < 0 or b < 0 or a >= na or b >= nb:
                        continue
                    if blocks[a >> BLOCK_SHIFT, b >> BLOCK_SHIFT, k >> BLOCK_SHIFT] == 0:
                        continue
                    if alpha[a, b, k, 0] == 0.0:
                        continue
                    ds = seg_ds[s, g]
                    for f in range(nf):
                        dtau = alpha[a, b, k, f] * ds
                        att = one_minus_exp_series(dtau) if dtau < SERIES_LIMIT else -math.expm1(-dtau)
                        acc_i[f] += att * (source[a, b, k, f] - acc_i[f])
                        acc_t[f] += dtau
                        lin[f] += w_cells[a, b, k, f] * ds
            for f in range(nf):
                out_rem[f, r] = acc_i[f] + bg[f] * math.expm1(-acc_t[f]) - lin[f]
