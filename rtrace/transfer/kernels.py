"""Numba kernels: the formal solution of the transfer equation through grid cells.

Each kernel returns, for every ray, the summary of its path through the cells
it was given: the emergent intensity with nothing entering from behind
(``I_seg``), the optical depth (``tau_seg``) and the emission measure. These
summaries combine exactly with :func:`rtrace.transfer.compositing.composite`.

Per cell (piecewise-constant coefficients, LTE so ``S = B_nu(T_e)``):
``I <- I e^{-dtau} + S (1 - e^{-dtau})``, ``dtau = alpha_nu ds``, with
``alpha_nu`` from Rybicki & Lightman (1979) eq. 5.18b and Kirchhoff's law.
Per-cell factors (``ln T``, ``T^-1/2``, the Gaunt-table index, ``n_e n_i ds``)
are computed once and reused for every frequency. In the radio regime
(``h nu/kT < 1e-3``) the stimulated-emission factor and ``1/(e^u - 1)`` are
replaced by their Taylor series, truncated where the next term is below
1e-14 relative, so no transcendental is evaluated per frequency; likewise
``1 - e^{-dtau}`` for ``dtau < 1e-3``.

Kernels trust their inputs: the Python layer validates them.
"""

import math

import numba
from numba import prange

from ..physics.planck import inverse_expm1, one_minus_exp

__all__ = ["trace_along_last_axis", "trace_along_middle_axis", "trace_rays"]


@numba.njit(cache=True, inline="always")
def _add_cell(out_i, out_tau, a, b, nn_ds, temp, log_t0, inv_dlog_t, gtab, hk, alpha_pref, b_pref):
    """Apply one cell of path ``ds`` to the running ray sums ``out_*[:, a, b]``.

    ``nn_ds = n_e * ion_term * ds`` (cm-5); ``gtab`` is the Gaunt factor per
    frequency on a uniform ``ln T`` grid; ``hk = h nu / k``;
    ``alpha_pref = A nu^-3`` (R&L 5.18b); ``b_pref = 2 h nu^3 / c^2``.
    """
    n_t = gtab.shape[1]
    x = (math.log(temp) - log_t0) * inv_dlog_t
    if x < 0.0:
        x = 0.0
    elif x > n_t - 1.0:
        x = n_t - 1.0
    i = int(x)
    if i > n_t - 2:
        i = n_t - 2
    wt = x - i
    inv_t = 1.0 / temp
    a0 = nn_ds * math.sqrt(inv_t)
    for f in range(hk.shape[0]):
        uu = hk[f] * inv_t
        g = gtab[f, i] + wt * (gtab[f, i + 1] - gtab[f, i])
        dtau = alpha_pref[f] * a0 * one_minus_exp(uu) * g        # R&L 5.18b times ds
        om = one_minus_exp(dtau)
        out_i[f, a, b] += om * (b_pref[f] * inverse_expm1(uu) - out_i[f, a, b])   # S = B_nu(T)
        out_tau[f, a, b] += dtau


@numba.njit(cache=True, parallel=True)
def trace_along_last_axis(ne, ni, temp, ds, forward, log_t0, inv_dlog_t, gtab, hk, alpha_pref, b_pref,
                          out_i, out_tau, out_em):
    """Rays along the contiguous last axis of ``(A, B, L)`` arrays.

    ``forward`` is True when rays travel toward increasing index. Outputs are
    ``(nfreq, A, B)`` (intensity, optical depth) and ``(A, B)`` (EM); they must
    be zero on entry.
    """
    na, nb, nl = ne.shape
    for a in prange(na):
        for b in range(nb):
            em = 0.0
            for s in range(nl):
                l = s if forward else nl - 1 - s
                nn = float(ne[a, b, l]) * float(ni[a, b, l])
                if nn > 0.0:
                    em += nn * ds
                    _add_cell(out_i, out_tau, a, b, nn * ds, float(temp[a, b, l]),
                              log_t0, inv_dlog_t, gtab, hk, alpha_pref, b_pref)
            out_em[a, b] = em


@numba.njit(cache=True, parallel=True)
def trace_along_middle_axis(ne, ni, temp, ds, forward, log_t0, inv_dlog_t, gtab, hk, alpha_pref, b_pref,
                            out_i, out_tau, out_em):
    """Rays along the middle axis of ``(A, L, C)`` arrays (C contiguous).

    Each ray advances one plane at a time and whole rows of rays are updated
    together, so memory is read contiguously. Outputs are ``(nfreq, A, C)``
    and ``(A, C)``; they must be zero on entry.
    """
    na, nl, nc = ne.shape
    for a in prange(na):
        for s in range(nl):
            l = s if forward else nl - 1 - s
            for c in range(nc):
                nn = float(ne[a, l, c]) * float(ni[a, l, c])
                if nn > 0.0:
                    out_em[a, c] += nn * ds
                    _add_cell(out_i, out_tau, a, c, nn * ds, float(temp[a, l, c]),
                              log_t0, inv_dlog_t, gtab, hk, alpha_pref, b_pref)


@numba.njit(cache=True, inline="always")
def _axis_start(o, d, size, k_lo, k_hi, t_in, big):
    """Amanatides & Woo (1987) start state on one axis: cell index, step, next boundary t, t per cell."""
    p = o + t_in * d
    k = int(math.floor(p / size))
    k = min(max(k, k_lo), k_hi - 1)
    if d > 0.0:
        return k, 1, t_in + ((k + 1) * size - p) / d, size / d
    if d < 0.0:
        return k, -1, t_in + (k * size - p) / d, -size / d
    return k, 0, big, big


@numba.njit(cache=True, parallel=True)
def trace_rays(ne, ni, temp, cell, lo, hi, origins, direction, log_t0, inv_dlog_t, gtab, hk, alpha_pref,
               b_pref, out_i, out_tau, out_em):
    """Parallel rays in any direction through the brick ``lo <= index < hi`` of ``(nx, ny, nz)`` arrays.

    Amanatides & Woo (1987) traversal gives the exact path length in every
    cell. ``origins`` (nray, 3) are points on the rays in cm relative to the
    grid's lower corner; ``direction`` is the unit vector of travel; ``cell``
    the cell size per axis in cm; ``lo``, ``hi`` (3,) integer index bounds.
    Outputs ``(nfreq, 1, nray)`` and ``(1, nray)`` must be zero on entry.
    """
    nray = origins.shape[0]
    big = 1.0e300
    for r in prange(nray):
        t_in = -big
        t_out = big
        miss = False
        for ax in range(3):
            o = origins[r, ax]
            d = direction[ax]
            x_lo = lo[ax] * cell[ax]
            x_hi = hi[ax] * cell[ax]
            if d == 0.0:
                if o < x_lo or o >= x_hi:
                    miss = True
            else:
                t0 = (x_lo - o) / d
                t1 = (x_hi - o) / d
                if t0 > t1:
                    t0, t1 = t1, t0
                t_in = max(t_in, t0)
                t_out = min(t_out, t1)
        if miss or t_out <= t_in:
            continue
        # Per-axis traversal state as scalars: no allocation inside the ray loop.
        i0, s0, m0, d0 = _axis_start(origins[r, 0], direction[0], cell[0], lo[0], hi[0], t_in, big)
        i1, s1, m1, d1 = _axis_start(origins[r, 1], direction[1], cell[1], lo[1], hi[1], t_in, big)
        i2, s2, m2, d2 = _axis_start(origins[r, 2], direction[2], cell[2], lo[2], hi[2], t_in, big)
        t = t_in
        em = 0.0
        while t < t_out:
            t_next = min(m0, m1, m2, t_out)
            ds = t_next - t
            nn = float(ne[i0, i1, i2]) * float(ni[i0, i1, i2])
            if nn > 0.0 and ds > 0.0:
                em += nn * ds
                _add_cell(out_i, out_tau, 0, r, nn * ds, float(temp[i0, i1, i2]),
                          log_t0, inv_dlog_t, gtab, hk, alpha_pref, b_pref)
            t = t_next
            if m0 <= m1 and m0 <= m2:
                i0 += s0
                m0 += d0
                if i0 < lo[0] or i0 >= hi[0]:
                    break
            elif m1 <= m2:
                i1 += s1
                m1 += d1
                if i1 < lo[1] or i1 >= hi[1]:
                    break
            else:
                i2 += s2
                m2 += d2
                if i2 < lo[2] or i2 >= hi[2]:
                    break
        out_em[0, r] = em
