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

The passes are Python functions that run a ``nogil`` numba worker over
ranges of blocks, rows or rays on threads
(:func:`rtrace.transfer.tasks.run_tasks`, one any-layout specialisation),
not ``prange`` loops, whose compilation cost several times the loops
themselves; the chunks write disjoint output exactly as the ``prange``
iterations did. Workers use ``error_model="numpy"`` (a thick cell's
``1 / (1 - att)`` is ``inf``, not an exception) and do per-cell work in
their own loop, not through a helper taking arrays (see :mod:`kernels`).
"""

import math

import numba
import numpy as np

from ..physics.planck import SERIES_LIMIT, one_minus_exp_series
from .kernels import (
    BLOCK_SHIFT,
    _cell_coefficients,
    _radio_source,
    _radio_stimulated,
    _share_from_ratio,
    _table_position,
)
from .tasks import run_tasks

BLOCK_MASK = (1 << BLOCK_SHIFT) - 1

# Rays thicker than this carry the transmission to the observer as exp(tau behind - tau), not as a
# running product started from e^{-tau} (which underflows near 745).
_DIRECT_TAU = 500.0


def block_slots(blocks):
    """Slots of the emitting blocks: ``(slots, where)``.

    ``slots`` (same shape as ``blocks``, int64) holds each emitting block's
    index in the compact per-cell arrays and -1 for blocks with no emitting
    gas; ``where`` ``(nblock, 3)`` the block indices of the slots, in C order.
    """
    where = np.ascontiguousarray(np.argwhere(blocks != 0), np.int64)  # C order always: one specialisation
    slots = np.full(blocks.shape, -1, np.int64)
    slots[tuple(where.T)] = np.arange(where.shape[0])
    return slots, where


def cell_coefficient_grids(
    nn_cells,
    temp,
    log_t0,
    inv_dlog_t,
    gtab,
    hk,
    alpha_pref,
    b_pref,
    em_ions,
    where,
    alpha,
    source,
    em,
    ratio=None,
    em_ratio=False,
):
    """Fill the compact per-cell arrays of the emitting blocks ``where`` (:func:`block_slots`).

    ``alpha[s, i, j, k, :]`` (cm-1) and ``source[s, i, j, k, :]`` (``B_nu(T)``,
    cgs) of cell ``where[s] * W + (i, j, k)`` (``W = alpha.shape[1]`` cells
    per block side); ``em[s, i, j, k]`` the emission-measure weight
    (``n_e x ion term``, times ``ratio`` where ``em_ratio``). ``nn_cells`` is
    ``n_e x ion term`` and ``temp`` the temperature, both ``(A, B, C)`` (any
    strides). The arrays must come zeroed: cells with ``nn = 0`` and cells
    beyond the grid are left alone (alpha 0: never read as gas). Frequencies
    are the last (contiguous) axis. Same coefficients as the tracer's
    kernels (:func:`kernels._cell_coefficients`), with the He III share of
    the ion term from ``ratio`` (``n_e / ion term``, same layout, or None
    where the two are equal: :func:`rtrace.transfer.cell_cache.ratio_of`);
    ``em_ions`` is unused here (the arguments are the tracer's
    ``FrequencyTables.args()``).
    """
    gtab_t = np.ascontiguousarray(gtab.transpose(0, 2, 1))
    run_tasks(
        _coefficient_blocks,
        where.shape[0],
        nn_cells,
        temp,
        float(log_t0),
        float(inv_dlog_t),
        gtab,
        gtab_t,
        hk,
        float(hk.max()),
        alpha_pref,
        b_pref,
        where,
        alpha,
        source,
        em,
        ratio,
        bool(em_ratio),
        relax_layout=True,
    )


@numba.njit(cache=True, error_model="numpy", nogil=True)
def _coefficient_blocks(
    s_lo,
    s_hi,
    nn_cells,
    temp,
    log_t0,
    inv_dlog_t,
    gtab,
    gtab_t,
    hk,
    hk_max,
    alpha_pref,
    b_pref,
    where,
    alpha,
    source,
    em,
    ratio,
    em_ratio,
):
    """Blocks ``s_lo <= s < s_hi`` of :func:`cell_coefficient_grids` (one task of :func:`run_tasks`)."""
    na, nb, nc = nn_cells.shape
    nw = alpha.shape[1]
    nf = hk.shape[0]
    kap = np.empty(nf)
    src = np.empty(nf)
    for s in range(s_lo, s_hi):
        for i in range(nw):
            a = where[s, 0] * nw + i
            if a >= na:
                break
            for j in range(nw):
                b = where[s, 1] * nw + j
                if b >= nb:
                    break
                for k in range(nw):
                    c = where[s, 2] * nw + k
                    if c >= nc:
                        break
                    nn = float(nn_cells[a, b, c])
                    if nn > 0.0:
                        share = 0.0 if ratio is None else _share_from_ratio(float(ratio[a, b, c]))
                        t = float(temp[a, b, c])
                        inv_t = 1.0 / t
                        if hk_max * inv_t < SERIES_LIMIT:
                            # the radio regime (the common case): kernels._cell_coefficients written out with the
                            # same operations in the same order (a per-cell call of a helper taking arrays costs
                            # an atomic reference-count update per array: kernels module docstring)
                            it, wt = _table_position(t, log_t0, inv_dlog_t, gtab_t.shape[1])
                            a0 = nn * math.sqrt(inv_t)
                            if share > 0.0:
                                for f in range(nf):
                                    uu = hk[f] * inv_t
                                    g1 = gtab_t[0, it, f] + wt * (gtab_t[0, it + 1, f] - gtab_t[0, it, f])
                                    g2 = gtab_t[1, it, f] + wt * (gtab_t[1, it + 1, f] - gtab_t[1, it, f])
                                    alpha[s, i, j, k, f] = (
                                        a0 * alpha_pref[f] * _radio_stimulated(uu) * (g1 + share * (g2 - g1))
                                    )
                                    source[s, i, j, k, f] = _radio_source(t, uu, b_pref[0, f], b_pref[1, f])
                            else:
                                for f in range(nf):
                                    uu = hk[f] * inv_t
                                    g = gtab_t[0, it, f] + wt * (gtab_t[0, it + 1, f] - gtab_t[0, it, f])
                                    alpha[s, i, j, k, f] = a0 * alpha_pref[f] * _radio_stimulated(uu) * g
                                    source[s, i, j, k, f] = _radio_source(t, uu, b_pref[0, f], b_pref[1, f])
                        else:
                            _cell_coefficients(
                                nn, share, t, log_t0, inv_dlog_t, gtab, gtab_t, hk, hk_max, alpha_pref, b_pref, kap, src
                            )
                            for f in range(nf):
                                alpha[s, i, j, k, f] = kap[f]
                                source[s, i, j, k, f] = src[f]
                        weight = nn
                        if ratio is not None:  # noqa: SIM102 (apart: numba prunes it when ratio is None)
                            if em_ratio:
                                weight = nn * float(ratio[a, b, c])
                        em[s, i, j, k] = weight


def _row_stride(count, seg_da):
    """Rays of a phase whose cell columns differ by at least this never share a cell in any layer."""
    if count.shape[0] == 0 or seg_da.shape[1] == 0:
        return 1
    first = np.arange(seg_da.shape[1]) < count[:, None]  # a layer's listed segments (else its first)
    da = np.where(first, seg_da, seg_da[:, :1])
    return int((da.max(axis=1) - da.min(axis=1)).max()) + 1


def sensitivity_pass(
    alpha,
    source,
    slots,
    k_lo,
    forward,
    i0,
    n_i,
    j0,
    n_j,
    count,
    seg_da,
    seg_db,
    seg_ds,
    ray_i,
    ray_tau,
    bg,
    weight,
    out_w,
):
    """Add, for every ray of the phase and cell it crosses, ``weight * ds * dI/dL_c`` to ``out_w[cell]``.

    ``alpha``, ``source``, ``out_w``: the compact per-cell arrays ``(nblock, W, W, W, nfreq)``
    of :func:`cell_coefficient_grids`, ``slots`` their blocks (:func:`block_slots`). ``ray_i``/``ray_tau``
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
    stride = _row_stride(count, seg_da)
    for cls in range(stride):
        run_tasks(
            _sensitivity_rows,
            (n_i - cls + stride - 1) // stride,
            cls,
            stride,
            alpha,
            source,
            slots,
            int(k_lo),
            bool(forward),
            int(i0),
            int(j0),
            int(n_j),
            count,
            seg_da,
            seg_db,
            seg_ds,
            ray_i,
            ray_tau,
            bg,
            float(weight),
            out_w,
            relax_layout=True,
        )


@numba.njit(cache=True, error_model="numpy", nogil=True)
def _sensitivity_rows(
    t_lo,
    t_hi,
    cls,
    stride,
    alpha,
    source,
    slots,
    k_lo,
    forward,
    i0,
    j0,
    n_j,
    count,
    seg_da,
    seg_db,
    seg_ds,
    ray_i,
    ray_tau,
    bg,
    weight,
    out_w,
):
    """Rows ``p = cls + t * stride``, ``t_lo <= t < t_hi``, of :func:`sensitivity_pass` (one :func:`run_tasks` task)."""
    nk = count.shape[0]
    nf = bg.shape[0]
    na, nb = slots.shape[0] << BLOCK_SHIFT, slots.shape[1] << BLOCK_SHIFT
    acc_i = np.empty(nf)  # intensity emitted behind, so far (no background)
    back = np.empty(nf)  # e^{-tau behind}
    front = np.empty(nf)  # e^{-(tau - tau behind)}: transmission to the observer
    behind = np.empty(nf)  # tau behind, for rays too thick to start from e^{-tau}
    for t in range(t_lo, t_hi):
        p = cls + t * stride
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
                    slot = slots[a >> BLOCK_SHIFT, b >> BLOCK_SHIFT, k >> BLOCK_SHIFT]
                    if slot < 0:
                        continue  # a block of cells with no emitting gas
                    la, lb, lk = a & BLOCK_MASK, b & BLOCK_MASK, k & BLOCK_MASK
                    if alpha[slot, la, lb, lk, 0] == 0.0:
                        continue  # no gas (alpha is 0 at every frequency or none)
                    ds = seg_ds[s, g]
                    for f in range(nf):
                        kap = alpha[slot, la, lb, lk, f]
                        src = source[slot, la, lb, lk, f]
                        dtau = kap * ds
                        if dtau < SERIES_LIMIT:
                            att = one_minus_exp_series(dtau)  # 1 - e^{-dtau}
                            grow = 1.0 + dtau * (1.0 + dtau * (0.5 + dtau * (1.0 / 6.0 + dtau / 24.0)))
                        else:
                            att = -math.expm1(-dtau)
                            grow = 1.0 / (1.0 - att)  # e^{dtau}
                        acc_i[f] += att * (src - acc_i[f])
                        back[f] *= 1.0 - att
                        if ray_tau[f, r] < _DIRECT_TAU:
                            front[f] = min(front[f] * grow, 1.0)
                        else:  # e^{-tau} would underflow: take it directly
                            behind[f] += dtau
                            front[f] = math.exp(min(behind[f] - ray_tau[f, r], 0.0))
                        i_out = acc_i[f] + bg[f] * back[f]
                        out_w[slot, la, lb, lk, f] += weight * ds * kap * (src - i_out) * front[f]


def remainder_pass(w_cells, slots, k_lo, forward, i0, n_i, j0, n_j, count, seg_da, seg_db, seg_ds, out_linear):
    """``out_linear[f, r] = sum over the cells ray r crosses of W_c ds`` for one phase.

    (``w_cells`` compact ``(nblock, W, W, W, nf)``, ``slots``: :func:`block_slots`).
    """
    run_tasks(
        _remainder_rows,
        n_i,
        w_cells,
        slots,
        int(k_lo),
        bool(forward),
        int(i0),
        int(j0),
        int(n_j),
        count,
        seg_da,
        seg_db,
        seg_ds,
        out_linear,
        relax_layout=True,
    )


@numba.njit(cache=True, error_model="numpy", nogil=True)
def _remainder_rows(p_lo, p_hi, w_cells, slots, k_lo, forward, i0, j0, n_j, count, seg_da, seg_db, seg_ds, out_linear):
    """Rows ``p_lo <= p < p_hi`` of :func:`remainder_pass` (one task of :func:`run_tasks`)."""
    nk = count.shape[0]
    nf = w_cells.shape[4]
    na, nb = slots.shape[0] << BLOCK_SHIFT, slots.shape[1] << BLOCK_SHIFT
    acc = np.empty(nf)
    for p in range(p_lo, p_hi):
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
                    slot = slots[a >> BLOCK_SHIFT, b >> BLOCK_SHIFT, k >> BLOCK_SHIFT]
                    if slot < 0:
                        continue
                    la, lb, lk = a & BLOCK_MASK, b & BLOCK_MASK, k & BLOCK_MASK
                    ds = seg_ds[s, g]
                    for f in range(nf):
                        acc[f] += w_cells[slot, la, lb, lk, f] * ds
            for f in range(nf):
                out_linear[f, r] = acc[f]


def remainder_trace(
    alpha, source, w_cells, slots, k_lo, forward, ray_a, ray_b, ray_phase, count, seg_da, seg_db, seg_ds, bg, out_rem
):
    """Trace a list of rays on the per-cell coefficients and return their remainders directly.

    Ray ``r`` enters the grid's columns at cell ``(ray_a[r], ray_b[r])`` and
    follows the layer segments of lattice phase ``ray_phase[r]``
    (``count[phase]``, ``seg_*[phase]``: :func:`kernels.layer_segments` of
    every phase, stacked); rays listed next to each other should share cells
    (the same cell column, other phases), so that they are read from cache;
    ``out_rem[f, r] = I + I_bg (e^{-tau} - 1) - sum_c W_c ds`` (the formal
    solution of :func:`kernels._cross`, cell by cell; ``alpha``, ``source``,
    ``w_cells`` compact ``(nblock, W, W, W, nf)``, ``slots``: :func:`block_slots`).
    For the refined pixels of a split trace: only the rays whose tubes touch
    them (:func:`mark_rays`) are traced, and the coefficients are read, not
    recomputed.
    """
    run_tasks(
        _remainder_rays,
        ray_a.shape[0],
        alpha,
        source,
        w_cells,
        slots,
        int(k_lo),
        bool(forward),
        ray_a,
        ray_b,
        ray_phase,
        count,
        seg_da,
        seg_db,
        seg_ds,
        bg,
        out_rem,
        relax_layout=True,
    )


@numba.njit(cache=True, error_model="numpy", nogil=True)
def _remainder_rays(
    r_lo,
    r_hi,
    alpha,
    source,
    w_cells,
    slots,
    k_lo,
    forward,
    ray_a,
    ray_b,
    ray_phase,
    count,
    seg_da,
    seg_db,
    seg_ds,
    bg,
    out_rem,
):
    """Rays ``r_lo <= r < r_hi`` of :func:`remainder_trace` (one task of :func:`run_tasks`)."""
    nk = count.shape[1]
    nf = w_cells.shape[4]
    na, nb = slots.shape[0] << BLOCK_SHIFT, slots.shape[1] << BLOCK_SHIFT
    acc_i = np.empty(nf)
    acc_t = np.empty(nf)
    lin = np.empty(nf)
    for r in range(r_lo, r_hi):
        ph = ray_phase[r]
        for f in range(nf):
            acc_i[f] = 0.0
            acc_t[f] = 0.0
            lin[f] = 0.0
        for s in range(nk):
            k = k_lo + s if forward else k_lo + nk - 1 - s
            for g in range(count[ph, s]):
                a = ray_a[r] + seg_da[ph, s, g]
                b = ray_b[r] + seg_db[ph, s, g]
                if a < 0 or b < 0 or a >= na or b >= nb:
                    continue
                slot = slots[a >> BLOCK_SHIFT, b >> BLOCK_SHIFT, k >> BLOCK_SHIFT]
                if slot < 0:
                    continue
                la, lb, lk = a & BLOCK_MASK, b & BLOCK_MASK, k & BLOCK_MASK
                if alpha[slot, la, lb, lk, 0] == 0.0:
                    continue
                ds = seg_ds[ph, s, g]
                for f in range(nf):
                    dtau = alpha[slot, la, lb, lk, f] * ds
                    att = one_minus_exp_series(dtau) if dtau < SERIES_LIMIT else -math.expm1(-dtau)
                    acc_i[f] += att * (source[slot, la, lb, lk, f] - acc_i[f])
                    acc_t[f] += dtau
                    lin[f] += w_cells[slot, la, lb, lk, f] * ds
        for f in range(nf):
            out_rem[f, r] = acc_i[f] + bg[f] * math.expm1(-acc_t[f]) - lin[f]


@numba.njit(cache=True)
def mark_rays(pix_row, pix_col, p0, e1, e2, inv, i0, j0, mask):
    """Set ``mask[I - i0, J - j0]`` for every lattice ray whose tube may touch one of the listed pixels.

    Ray ``(I, J)`` sits at ``p0 + I e1 + J e2`` (pixel units, (column, row));
    its tube (the parallelogram of ``e1``, ``e2`` about it) lies within half
    ``|e1| + |e2|`` of it on each axis, so a ray is marked when that box
    overlaps pixel ``(pix_row[n], pix_col[n])``: every ray the pixel's
    footprint mean needs, and a few more. ``inv`` is the inverse of the
    matrix with columns ``e1``, ``e2``.
    """
    n_i, n_j = mask.shape
    half_c = 0.5 * (abs(e1[0]) + abs(e2[0]))
    half_r = 0.5 * (abs(e1[1]) + abs(e2[1]))
    for n in range(pix_row.shape[0]):
        c_lo, c_hi = pix_col[n] - half_c, pix_col[n] + 1.0 + half_c
        r_lo, r_hi = pix_row[n] - half_r, pix_row[n] + 1.0 + half_r
        i_min, i_max, j_min, j_max = 1e300, -1e300, 1e300, -1e300
        for corner in range(4):
            x = (c_lo if corner & 1 else c_hi) - p0[0]
            y = (r_lo if corner & 2 else r_hi) - p0[1]
            ii = inv[0, 0] * x + inv[0, 1] * y
            jj = inv[1, 0] * x + inv[1, 1] * y
            i_min, i_max = min(i_min, ii), max(i_max, ii)
            j_min, j_max = min(j_min, jj), max(j_max, jj)
        for i in range(max(int(math.floor(i_min)) - i0, 0), min(int(math.ceil(i_max)) - i0 + 1, n_i)):
            for j in range(max(int(math.floor(j_min)) - j0, 0), min(int(math.ceil(j_max)) - j0 + 1, n_j)):
                col = p0[0] + (i + i0) * e1[0] + (j + j0) * e2[0]
                row = p0[1] + (i + i0) * e1[1] + (j + j0) * e2[1]
                if c_lo < col < c_hi and r_lo < row < r_hi:
                    mask[i, j] = True


# the compiled kernels behind the Python entry points (their signatures, for the warm-up's checks)
cell_coefficient_grids.dispatcher = _coefficient_blocks
sensitivity_pass.dispatcher = _sensitivity_rows
remainder_pass.dispatcher = _remainder_rows
remainder_trace.dispatcher = _remainder_rays
