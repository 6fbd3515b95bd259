"""Numba kernels: the formal solution of the transfer equation through grid cells.

Each kernel returns, for every ray, the summary of its path through the cells
it was given: the emergent intensity with nothing entering from behind
(``I_seg``), the optical depth (``tau_seg``) and the emission measure. These
summaries combine exactly with :func:`rtrace.transfer.compositing.composite`.

Per cell (piecewise-constant coefficients, LTE so ``S = B_nu(T_e)``):
``I <- I e^{-dtau} + S (1 - e^{-dtau})``, ``dtau = alpha_nu ds``, with
``alpha_nu`` from Rybicki & Lightman (1979) eq. 5.18b and Kirchhoff's law.
Per-cell factors (``ln T``, ``T^-1/2``, the Gaunt-table index, ``n_e n_i ds``)
are computed once and reused for every frequency. The axis-aligned kernels
read ``alpha_nu / (n_e n_i)`` instead from a per-frequency table indexed by
the temperature's bits (:mod:`rtrace.transfer.ttable`): no logarithm, square
root or division per cell and frequency.

The Gaunt tables ``gtab`` are ``(2, nfreq, n_T)``: row 0 for ion charge Z = 1
(H II, He II), row 1 for Z = 2 (He III). For a hydrogen-helium plasma
``sum Z^2 n_i - n_e = 2 n_HeIII``, so the He III share of the ion term,
``4 n_HeIII / sum Z^2 n_i = 2 (1 - n_e / ion term)``, follows from the two
fields the kernels already have (:func:`_helium3_share`); a cell with ion
term equal to ``n_e`` (hydrogen, singly ionized helium) reads only row 0.
The emission measure is ``sum n_e^2 ds`` or, with ``em_ions``,
``sum n_e (ion term) ds``. In the radio regime
(``h nu/kT < 1e-3``) the stimulated-emission factor and ``1/(e^u - 1)`` are
replaced by their Taylor series, truncated where the next term is below
1e-14 relative, so no transcendental is evaluated per frequency; likewise
``1 - e^{-dtau}`` for ``dtau < 1e-3``. Where a cell is in that regime at
every frequency the frequency loop has no branch, and the running sums of a
ray keep their frequencies contiguous, so the loop vectorises; a single
frequency keeps the sums in registers.

Kernels are compiled with ``error_model="numpy"``: a float division then has no
division-by-zero branch (numba's default raises ZeroDivisionError), without which
no loop holding a division vectorises. Inside a loop meant to vectorise, a
table read at a per-cell index (a gather) keeps the whole loop scalar, so the
single-frequency kernel reads its opacity table in a loop of its own.

The axis kernels and :func:`emitting_blocks` are Python functions that run a
``nogil`` numba worker over ranges of planes on threads
(:func:`rtrace.transfer.tasks.run_tasks`), not ``prange`` loops: numba's
``parallel=True`` cost them 5-6x their compile time. So does :func:`trace_sheared`
(threads over its blocks of rows), with one any-layout specialisation
(``relax_layout``), so the contiguous arrays and the transposed views of an
oblique view share one compiled kernel. In these workers a per-cell call of a
helper taking arrays is avoided: each array argument costs an atomic
reference-count update per call, which a ``prange`` body did not pay but a
plain loop does (:func:`_row_coefficients`).

:func:`trace_sheared` gathers each task's cells :data:`_TILE` layers at a time
into a tile ordered (layer, a, b) and, where c is the array's axis of unit
stride, asks the CPU to prefetch the columns ahead (:func:`_prefetch`):
read layer by layer, a C-ordered grid seen nearly along its last axis is a
stride through memory per cell, which the hardware prefetcher does not follow.
An array index that numba cannot prove non-negative gets a negative-index
wraparound (a select) on every access, which keeps a loop scalar: the sweep's
loops index with ``np.uint64`` values or with ranges from 0.

Kernels trust their inputs: the Python layer validates them.
"""

import math

import numba
import numpy as np
from llvmlite import ir
from llvmlite.binding import llvm_version_info
from numba.core import cgutils, types
from numba.extending import intrinsic

from ..physics.planck import SERIES_LIMIT, inverse_expm1, one_minus_exp, one_minus_exp_series
from .tasks import run_tasks
from .ttable import FREQUENCY_CHUNK, INDEX_MASK, T_TOP, bit_layout, opacity_table

__all__ = [
    "trace_along_last_axis",
    "one_frequency_along_last_axis",
    "trace_along_middle_axis",
    "layer_segments",
    "trace_sheared",
    "emitting_blocks",
    "BLOCK_SHIFT",
]

_ROW_BLOCK = 16  # rows of rays per parallel task in trace_sheared
BLOCK_SHIFT = 3  # emitting_blocks: blocks of 2**BLOCK_SHIFT = 8 cells per axis
_TILE = 1 << BLOCK_SHIFT  # layers trace_sheared gathers at a time: one block of cells along c
_AHEAD = 8  # trace_sheared's tile gather along c: prefetch the cells this many columns ahead


# the intrinsic's name carries its pointer type: "p0" (opaque pointers) from LLVM 15 on, "p0i8" before (numba 0.59's
# llvmlite is built on LLVM 14)
_PREFETCH_NAME = "llvm.prefetch.p0" if llvm_version_info[0] >= 15 else "llvm.prefetch.p0i8"


@intrinsic
def _prefetch(typingctx, arr, i, j, k):
    """Ask the CPU to fetch element ``arr[i, j, k]`` into cache (LLVM's ``llvm.prefetch``; no effect on results).

    The tile gather of :func:`trace_sheared` reads a short run of layers per column, each column 1 row of
    the array apart: too far apart for the hardware prefetcher, so it waits on memory at every column.
    """
    sig = types.void(arr, i, j, k)

    def codegen(context, builder, signature, args):
        aryty = signature.args[0]
        ary = context.make_array(aryty)(context, builder, args[0])
        inds = [context.cast(builder, v, t, types.intp) for v, t in zip(args[1:], signature.args[1:], strict=True)]
        ptr = cgutils.get_item_pointer2(
            context,
            builder,
            ary.data,
            cgutils.unpack_tuple(builder, ary.shape),
            cgutils.unpack_tuple(builder, ary.strides),
            aryty.layout,
            inds,
            wraparound=False,
        )
        i8p, i32 = ir.IntType(8).as_pointer(), ir.IntType(32)
        fn = cgutils.get_or_insert_function(
            builder.module, ir.FunctionType(ir.VoidType(), [i8p, i32, i32, i32]), _PREFETCH_NAME
        )
        builder.call(fn, [builder.bitcast(ptr, i8p), i32(0), i32(3), i32(1)])  # read, keep in all caches, data
        return context.get_dummy_value()

    return sig, codegen


@numba.njit(cache=True, error_model="numpy", inline="always")
def _table_position(temp, log_t0, inv_dlog_t, n_t):
    """Index and weight of ``ln T`` on the uniform Gaunt-table grid (clamped to the table)."""
    x = (math.log(temp) - log_t0) * inv_dlog_t
    if x < 0.0:
        x = 0.0
    elif x > n_t - 1.0:
        x = n_t - 1.0
    i = int(x)
    if i > n_t - 2:
        i = n_t - 2
    return i, x - i


@numba.njit(cache=True, error_model="numpy", inline="always")
def _helium3_share(ne, ni):
    """He III share of the ion term, ``4 n_HeIII / ion term = 2 (ni - ne) / ni``, in [0, 1] (0 unless ni > ne).

    Charge neutrality of H + He gas: ``n_e = n_HII + n_HeII + 2 n_HeIII`` and the ion term
    ``n_HII + n_HeII + 4 n_HeIII`` (R&L 1979 eq. 5.18b sums Z^2 n_i), so their difference is ``2 n_HeIII``.
    """
    if ni > ne:
        return min(2.0 * (ni - ne) / ni, 1.0)
    return 0.0


@numba.njit(cache=True, error_model="numpy", inline="always")
def _share_from_ratio(ratio):
    """:func:`_helium3_share` from ``ratio = n_e / ion term``."""
    return min(max(2.0 * (1.0 - ratio), 0.0), 1.0)


@numba.njit(cache=True, error_model="numpy", inline="always")
def _radio_stimulated(uu):
    """``1 - e^{-u}`` to u^4 for ``u < SERIES_LIMIT`` (omitted terms < 1e-14 relative; A&S 4.2.1)."""
    return uu * (1.0 - uu * (0.5 - uu * (1.0 / 6.0 - uu * (1.0 / 24.0))))


@numba.njit(cache=True, error_model="numpy", inline="always")
def _radio_source(temp, uu, b_planck, b_rj):
    """``B_nu`` for ``u = h nu / kT < SERIES_LIMIT`` with no division: ``(2 h nu^3/c^2)(1/u - 1/2 + u/12)``.

    The 1/u term is ``(2 nu^2 k / c^2) T`` (``b_rj T``); omitted terms < 1e-14 relative (A&S 23.1.1;
    cf. physics.planck.inverse_expm1).
    """
    return b_rj * temp + b_planck * (uu * (1.0 / 12.0) - 0.5)


@numba.njit(cache=True, error_model="numpy", inline="always")
def _opacity_and_source(f, temp, inv_t, i, wt, share, gtab, hk, alpha_pref, b_pref):
    """At frequency ``f``: ``alpha_nu / (n_e n_i T^-1/2)`` (cm5) and ``S = B_nu(T)``.

    ``gtab`` (2, nfreq, n_T) is the Gaunt factor per charge (Z = 1, 2) and
    frequency on a uniform ``ln T`` grid, mixed by the He III ``share`` of the ion term;
    ``hk = h nu / k``; ``alpha_pref = A nu^-3`` (R&L 5.18b); ``b_pref`` (2, nfreq):
    ``2 h nu^3 / c^2`` and ``2 nu^2 k / c^2`` (the Rayleigh-Jeans factor, so the
    radio branch needs no division).
    """
    uu = hk[f] * inv_t
    g = gtab[0, f, i] + wt * (gtab[0, f, i + 1] - gtab[0, f, i])
    if share > 0.0:
        g += share * (gtab[1, f, i] + wt * (gtab[1, f, i + 1] - gtab[1, f, i]) - g)
    if uu < SERIES_LIMIT:
        stim = _radio_stimulated(uu)
        source = _radio_source(temp, uu, b_pref[0, f], b_pref[1, f])
    else:
        stim = one_minus_exp(uu)
        source = b_pref[0, f] * inverse_expm1(uu)
    return alpha_pref[f] * stim * g, source


@numba.njit(cache=True, error_model="numpy")
def _cell_coefficients(nn, share, temp, log_t0, inv_dlog_t, gtab, gtab_t, hk, hk_max, alpha_pref, b_pref, kap, src):
    """Fill ``kap[f] = alpha_nu`` (cm-1, R&L 5.18b with ``n_e n_i = nn``) and ``src[f] = B_nu(T)``.

    Per-cell factors (``ln T`` table position, ``T^-1/2``, ``1/T``) are computed
    once. Where every frequency is in the radio regime (``h nu_max / kT <
    SERIES_LIMIT``, the common case) the frequency loop has no branch and reads
    the Gaunt table transposed (``gtab_t`` (2, n_T, nfreq)), so it vectorises.
    ``share`` is the He III share of the ion term (:func:`_helium3_share`):
    the Z = 2 row is read only where it is positive.
    """
    i, wt = _table_position(temp, log_t0, inv_dlog_t, gtab_t.shape[1])
    inv_t = 1.0 / temp
    _coefficients_at(
        i, wt, nn * math.sqrt(inv_t), share, temp, inv_t, gtab, gtab_t, hk, hk_max, alpha_pref, b_pref, kap, src
    )


@numba.njit(cache=True, error_model="numpy", inline="always")
def _coefficients_at(i, wt, a0, share, temp, inv_t, gtab, gtab_t, hk, hk_max, alpha_pref, b_pref, kap, src, at=0):
    """:func:`_cell_coefficients` from the cell's table position ``(i, wt)``, ``a0 = n_e n_i T^-1/2`` and ``1/T``.

    Writes ``kap[at + f]`` and ``src[at + f]``: a flat buffer row needs no view per cell (a view costs two
    reference-count updates).
    """
    if hk_max * inv_t < SERIES_LIMIT:
        if share > 0.0:
            for f in range(hk.shape[0]):
                uu = hk[f] * inv_t
                g1 = gtab_t[0, i, f] + wt * (gtab_t[0, i + 1, f] - gtab_t[0, i, f])
                g2 = gtab_t[1, i, f] + wt * (gtab_t[1, i + 1, f] - gtab_t[1, i, f])
                kap[at + f] = a0 * alpha_pref[f] * _radio_stimulated(uu) * (g1 + share * (g2 - g1))
                src[at + f] = _radio_source(temp, uu, b_pref[0, f], b_pref[1, f])
        else:
            for f in range(hk.shape[0]):
                uu = hk[f] * inv_t
                g = gtab_t[0, i, f] + wt * (gtab_t[0, i + 1, f] - gtab_t[0, i, f])
                kap[at + f] = a0 * alpha_pref[f] * _radio_stimulated(uu) * g
                src[at + f] = _radio_source(temp, uu, b_pref[0, f], b_pref[1, f])
    else:
        for f in range(hk.shape[0]):
            kappa, source = _opacity_and_source(f, temp, inv_t, i, wt, share, gtab, hk, alpha_pref, b_pref)
            kap[at + f] = a0 * kappa
            src[at + f] = source


@numba.njit(cache=True, error_model="numpy", inline="always")
def _cross(kap, src, ds, acc_i, acc_t):
    """One cell crossed over path ``ds``: ``I <- I e^{-dtau} + S (1 - e^{-dtau})``, ``tau += dtau``, all frequencies.

    The series for ``1 - e^{-dtau}`` is used unless some frequency has
    ``dtau >= SERIES_LIMIT`` (then each takes the exact form), so thin cells
    run a branch-free, vectorisable loop.
    """
    nf = kap.shape[0]
    thick = False
    for f in range(nf):
        thick |= kap[f] * ds >= SERIES_LIMIT
    if thick:
        for f in range(nf):
            dtau = kap[f] * ds
            acc_i[f] += one_minus_exp(dtau) * (src[f] - acc_i[f])
            acc_t[f] += dtau
    else:
        for f in range(nf):
            dtau = kap[f] * ds
            acc_i[f] += one_minus_exp_series(dtau) * (src[f] - acc_i[f])
            acc_t[f] += dtau


def trace_along_last_axis(
    ne, ni, temp, ds, forward, log_t0, inv_dlog_t, gtab, hk, alpha_pref, b_pref, em_ions, out_i, out_tau, out_em
):
    """Rays along the contiguous last axis of ``(A, B, L)`` arrays.

    ``forward`` is True when rays travel toward increasing index. Outputs are
    ``(nfreq, A, B)`` (intensity, optical depth) and ``(A, B)`` (EM); they must
    be zero on entry. For a single frequency :func:`one_frequency_along_last_axis`
    is faster (the tracer chooses; each is compiled only when first used). Each
    cell's opacity factors come from :func:`rtrace.transfer.ttable.opacity_table`
    at the node given by the temperature's bits (no logarithm or square root; the
    table's row of a node holds every frequency, so the frequency loop reads it
    contiguously). A cell that is thin at every frequency (the table's per-node
    bound), in the radio regime, inside the table and without He III takes one
    branch-free loop over the frequencies; any other the exact forms
    (:func:`_coefficients_at`, :func:`_cross`). The table moves ``dtau`` by up to
    ~2e-7 relative (:mod:`rtrace.transfer.ttable`). More than
    :data:`ttable.FREQUENCY_CHUNK` frequencies are taken in chunks (one table
    and one pass over the cells each), which bounds the table's memory.
    """
    if hk.shape[0] > FREQUENCY_CHUNK:
        _by_frequency_chunks(
            trace_along_last_axis,
            ne,
            ni,
            temp,
            ds,
            forward,
            log_t0,
            inv_dlog_t,
            gtab,
            hk,
            alpha_pref,
            b_pref,
            em_ions,
            out_i,
            out_tau,
            out_em,
        )
        return
    table, bound = opacity_table(log_t0, inv_dlog_t, gtab, hk, alpha_pref)
    shift, base = bit_layout(temp.dtype)
    gtab_t = np.ascontiguousarray(gtab.transpose(0, 2, 1))
    sconst = _source_constants(hk, b_pref)
    run_tasks(
        _last_axis_planes,
        ne.shape[0],
        ne,
        ni,
        temp,
        _temperature_bits(temp),
        shift,
        base,
        table,
        bound,
        sconst,
        float(ds),
        bool(forward),
        float(log_t0),
        float(inv_dlog_t),
        gtab,
        gtab_t,
        hk,
        float(hk.max()),
        alpha_pref,
        b_pref,
        bool(em_ions),
        out_i,
        out_tau,
        out_em,
    )


def _by_frequency_chunks(
    kernel, ne, ni, temp, ds, forward, log_t0, inv_dlog_t, gtab, hk, alpha_pref, b_pref, em_ions, out_i, out_tau, out_em
):
    """``kernel`` over at most :data:`ttable.FREQUENCY_CHUNK` frequencies at a time (bounds its opacity table)."""
    for f0 in range(0, hk.shape[0], FREQUENCY_CHUNK):
        part = slice(f0, f0 + FREQUENCY_CHUNK)
        em = out_em if f0 == 0 else np.zeros_like(out_em)  # the EM once
        kernel(
            ne,
            ni,
            temp,
            ds,
            forward,
            log_t0,
            inv_dlog_t,
            np.ascontiguousarray(gtab[:, part]),
            hk[part],
            alpha_pref[part],
            np.ascontiguousarray(b_pref[:, part]),
            em_ions,
            out_i[part],
            out_tau[part],
            em,
        )


def _source_constants(hk, b_pref):
    """``(3, nfreq)`` rows ``b_rj, -b_planck / 2, b_planck (h nu / k) / 12`` of the radio-regime source function.

    ``B_nu = b_rj T + b_planck (u / 12 - 1/2)`` with ``u = h nu / kT`` (:func:`_radio_source`) is
    ``row0 T + row1 + row2 / T``.
    """
    return np.ascontiguousarray(np.stack([b_pref[1], -0.5 * b_pref[0], b_pref[0] * hk / 12.0]), float)


@numba.njit(cache=True, error_model="numpy", nogil=True, fastmath={"contract"})
def _last_axis_planes(
    lo,
    hi,
    ne,
    ni,
    temp,
    tbits,
    shift,
    base,
    table,
    bound,
    sconst,
    ds,
    forward,
    log_t0,
    inv_dlog_t,
    gtab,
    gtab_t,
    hk,
    hk_max,
    alpha_pref,
    b_pref,
    em_ions,
    out_i,
    out_tau,
    out_em,
):
    """Planes ``lo <= a < hi`` of :func:`trace_along_last_axis` (one task of :func:`run_tasks`)."""
    nb, nl = ne.shape[1], ne.shape[2]
    nf = hk.shape[0]
    mask = (1 << shift) - 1
    inv_step = 1.0 / (1 << shift)
    top = table.shape[0] - 1
    for a in range(lo, hi):
        kap, src = np.empty(nf), np.empty(nf)
        acc = np.empty((2, nf))  # the ray's I and tau
        acc_i, acc_t = acc[0], acc[1]
        for b in range(nb):
            acc_i[:] = 0.0
            acc_t[:] = 0.0
            em = 0.0
            for s in range(nl):
                l = s if forward else nl - 1 - s
                ne_c, ni_c = float(ne[a, b, l]), float(ni[a, b, l])
                nn = ne_c * ni_c
                if nn > 0.0:
                    em += (nn if em_ions else ne_c * ne_c) * ds
                    bits = np.int64(tbits[a, b, l])
                    node = min(max((bits >> shift) - base, 0), top)
                    t = float(temp[a, b, l])
                    inv_t = 1.0 / t
                    c0 = nn * ds
                    if (
                        (t >= 1.0)
                        & (t < T_TOP)
                        & (hk_max * inv_t < SERIES_LIMIT)
                        & (c0 * bound[node] < SERIES_LIMIT)
                        & (ni_c <= ne_c)
                    ):
                        # thin at every frequency, radio regime, no He III: one branch-free loop per cell
                        # (few arrays in the loop, so that the compiler's aliasing checks allow it to vectorise)
                        c1 = c0 * float(bits & mask) * inv_step
                        for f in range(nf):
                            dtau = c0 * table[node, 0, f] + c1 * table[node, 1, f]
                            acc[0, f] += one_minus_exp_series(dtau) * (
                                sconst[0, f] * t + sconst[1, f] + sconst[2, f] * inv_t - acc[0, f]
                            )
                            acc[1, f] += dtau
                    else:
                        it, wt = _table_position(t, log_t0, inv_dlog_t, gtab.shape[2])
                        _coefficients_at(
                            it,
                            wt,
                            nn * math.sqrt(inv_t),
                            _helium3_share(ne_c, ni_c),
                            t,
                            inv_t,
                            gtab,
                            gtab_t,
                            hk,
                            hk_max,
                            alpha_pref,
                            b_pref,
                            kap,
                            src,
                        )
                        _cross(kap, src, ds, acc_i, acc_t)
            for f in range(nf):
                out_i[f, a, b] = acc_i[f]
                out_tau[f, a, b] = acc_t[f]
            out_em[a, b] = em


_LN2 = math.log(2.0)
_SQRT2 = math.sqrt(2.0)


@numba.njit(cache=True, error_model="numpy", inline="always")
def _log_from_bits(bits, mant):
    """``ln T`` of a positive normal double from its bits (``bits``) and its mantissa ``mant`` in [1, 2).

    ``T = m 2^e``; with ``m`` moved into [sqrt(1/2), sqrt(2)), ``ln m = 2 atanh(s)``,
    ``s = (m - 1) / (m + 1)``, by its series to ``s^17`` (A&S 4.1.27; |s| < 0.172, omitted
    terms < 1e-14 absolute), so the loop holding it vectorises (no libm call).
    """
    e = float((bits >> 52) - 1023)
    if mant > _SQRT2:
        mant *= 0.5
        e += 1.0
    sv = (mant - 1.0) / (mant + 1.0)
    s2 = sv * sv
    series = 1.0 + s2 * (
        1.0 / 3.0
        + s2
        * (
            1.0 / 5.0
            + s2
            * (
                1.0 / 7.0
                + s2 * (1.0 / 9.0 + s2 * (1.0 / 11.0 + s2 * (1.0 / 13.0 + s2 * (1.0 / 15.0 + s2 * (1.0 / 17.0)))))
            )
        )
    )
    return e * _LN2 + 2.0 * sv * series


_RAYS = 8  # rays of one_frequency_along_last_axis advanced side by side (the recurrence)


def one_frequency_along_last_axis(
    ne, ni, temp, ds, forward, log_t0, inv_dlog_t, gtab, hk, alpha_pref, b_pref, em_ions, out_i, out_tau, out_em
):
    """:func:`trace_along_last_axis` for a single frequency, with the ray sums in registers.

    Rays are taken :data:`_RAYS` (8) at a time. For each, the cell's opacity factor
    ``alpha_nu / (n_e n_i)`` is read from :func:`rtrace.transfer.ttable.opacity_table` at
    the node given by the temperature's bits (integer operations, no logarithm, square root
    or division; the table read is a loop of its own, which the compiler leaves scalar),
    then one branch-free loop makes ``dtau``, ``e^{-dtau}``, ``S (1 - e^{-dtau})`` and the
    sums of ``dtau`` and the EM weight (vectorised), and the rays' transfer recurrences
    ``I <- I e^{-dtau} + S (1 - e^{-dtau})`` run side by side in the order of travel, so one
    ray's dependence chain does not serialise the core. A ray with a cell outside the radio
    regime, outside the table (below 1 K or from :data:`ttable.T_TOP`), with
    ``dtau >= SERIES_LIMIT`` or with He III (ion term above ``n_e``, which needs the Z = 2
    Gaunt row) is redone cell by cell with the exact forms (:func:`_one_frequency_ray`).

    The table's interpolation, linear in ``T`` between nodes ``2^-10`` apart in relative
    terms, moves ``dtau`` by up to ~2e-7 relative from the former per-cell evaluation
    (:mod:`rtrace.transfer.ttable`); the sums of ``dtau`` and of the EM weight are added in
    any order (``fastmath`` reassociation: rounding-level differences).
    """
    if hk.shape[0] != 1:
        raise ValueError(f"one_frequency_along_last_axis: one frequency, got {hk.shape[0]}")
    table = opacity_table(log_t0, inv_dlog_t, gtab, hk, alpha_pref)[0]  # 2^16 rows: the node is masked
    shift, base = bit_layout(temp.dtype)
    run_tasks(
        _one_frequency_planes,
        ne.shape[0],
        ne,
        ni,
        temp,
        _temperature_bits(temp),
        shift,
        base,
        table,
        float(ds),
        bool(forward),
        float(log_t0),
        float(inv_dlog_t),
        gtab,
        hk,
        alpha_pref,
        b_pref,
        bool(em_ions),
        out_i,
        out_tau,
        out_em,
    )


def _temperature_bits(temp):
    """``temp`` viewed as integers of its own width (no copy)."""
    return temp.view(np.int32 if temp.dtype == np.float32 else np.int64)


@numba.njit(cache=True, error_model="numpy", nogil=True, fastmath={"reassoc", "contract"})
def _one_frequency_planes(
    lo,
    hi,
    ne,
    ni,
    temp,
    tbits,
    shift,
    base,
    table,
    ds,
    forward,
    log_t0,
    inv_dlog_t,
    gtab,
    hk,
    alpha_pref,
    b_pref,
    em_ions,
    out_i,
    out_tau,
    out_em,
):
    """Planes ``lo <= a < hi`` of :func:`one_frequency_along_last_axis` (one task of :func:`run_tasks`)."""
    nb, nl = ne.shape[1], ne.shape[2]
    hk0, bp0, brj0 = hk[0], b_pref[0, 0], b_pref[1, 0]
    # B_nu = b_rj T + b_planck (u / 12 - 1/2), u = h nu / kT (_radio_source), with constant factors apart
    s_half, s_twelfth = -0.5 * bp0, bp0 * hk0 / 12.0
    mask = (1 << shift) - 1
    inv_step = 1.0 / (1 << shift)
    for a in range(lo, hi):
        keep = np.empty((_RAYS, nl))  # per ray of the group: e^{-dtau}, S (1 - e^{-dtau})
        gain = np.empty((_RAYS, nl))
        tau_sum = np.zeros(_RAYS)
        em_sum = np.zeros(_RAYS)
        bad = np.zeros(_RAYS, np.int64)
        k_node = np.empty(nl)
        k_step = np.empty(nl)
        for b0 in range(0, nb, _RAYS):
            for j in range(_RAYS):
                b = b0 + j
                if b >= nb:  # past the last ray: cells that change nothing
                    keep[j, :] = 1.0
                    gain[j, :] = 0.0
                    continue
                for l in range(nl):  # the table's node from T's bits (a gather: left scalar)
                    node = ((np.int64(tbits[a, b, l]) >> shift) - base) & INDEX_MASK
                    k_node[l] = table[node, 0, 0]
                    k_step[l] = table[node, 1, 0]
                keep_j, gain_j = keep[j], gain[j]
                n_bad = 0
                tau = 0.0
                em = 0.0
                for l in range(nl):  # dtau (R&L 5.18b times ds), e^{-dtau}, S (1 - e^{-dtau}): vectorised
                    ne_c, ni_c = float(ne[a, b, l]), float(ni[a, b, l])
                    nn = ne_c * ni_c
                    on = nn > 0.0
                    frac = float(np.int64(tbits[a, b, l]) & mask) * inv_step
                    dtau = nn * ds * (k_node[l] + frac * k_step[l]) if on else 0.0
                    tau += dtau
                    em += (nn if em_ions else ne_c * ne_c) if on else 0.0
                    t = float(temp[a, b, l])
                    n_bad += (
                        1
                        if on
                        & (
                            (t < 1.0)
                            | (t >= T_TOP)
                            | math.isnan(t)
                            | (hk0 >= SERIES_LIMIT * t)
                            | (dtau >= SERIES_LIMIT)
                            | (ni_c > ne_c)
                        )
                        else 0
                    )
                    t = t if t > 0.0 else 1.0e4
                    att = one_minus_exp_series(dtau)
                    keep_j[l] = 1.0 - att
                    gain_j[l] = att * (brj0 * t + s_half + s_twelfth / t)
                tau_sum[j] = tau
                em_sum[j] = em * ds
                bad[j] = n_bad
            # the recurrence I <- I e^{-dtau} + S (1 - e^{-dtau}) of the group's rays side by side, so that one
            # ray's dependence chain does not serialise the core
            i0, i1, i2, i3, i4, i5, i6, i7 = 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0
            for s in range(nl):
                l = s if forward else nl - 1 - s
                i0 = i0 * keep[0, l] + gain[0, l]
                i1 = i1 * keep[1, l] + gain[1, l]
                i2 = i2 * keep[2, l] + gain[2, l]
                i3 = i3 * keep[3, l] + gain[3, l]
                i4 = i4 * keep[4, l] + gain[4, l]
                i5 = i5 * keep[5, l] + gain[5, l]
                i6 = i6 * keep[6, l] + gain[6, l]
                i7 = i7 * keep[7, l] + gain[7, l]
            for j, i_acc in enumerate((i0, i1, i2, i3, i4, i5, i6, i7)):
                b = b0 + j
                if b < nb:
                    t_acc = tau_sum[j]
                    if bad[j]:
                        i_acc, t_acc = _one_frequency_ray(
                            ne, ni, temp, a, b, ds, forward, log_t0, inv_dlog_t, gtab, hk, alpha_pref, b_pref
                        )
                    out_i[0, a, b] = i_acc
                    out_tau[0, a, b] = t_acc
                    out_em[a, b] = em_sum[j]


@numba.njit(cache=True, error_model="numpy", inline="always")
def _one_frequency_ray(ne, ni, temp, a, b, ds, forward, log_t0, inv_dlog_t, gtab, hk, alpha_pref, b_pref):
    """One ray of :func:`one_frequency_along_last_axis` cell by cell with the exact forms: ``(I, tau)``."""
    nl = ne.shape[2]
    n_t = gtab.shape[2]
    i_acc, t_acc = 0.0, 0.0
    for s in range(nl):
        l = s if forward else nl - 1 - s
        ne_c, ni_c = float(ne[a, b, l]), float(ni[a, b, l])
        nn = ne_c * ni_c
        if nn > 0.0:
            t = float(temp[a, b, l])
            it, wt = _table_position(t, log_t0, inv_dlog_t, n_t)
            inv_t = 1.0 / t
            kappa, source = _opacity_and_source(
                0, t, inv_t, it, wt, _helium3_share(ne_c, ni_c), gtab, hk, alpha_pref, b_pref
            )
            dtau = nn * ds * math.sqrt(inv_t) * kappa  # R&L 5.18b times ds
            i_acc += one_minus_exp(dtau) * (source - i_acc)
            t_acc += dtau
    return i_acc, t_acc


def trace_along_middle_axis(
    ne, ni, temp, ds, forward, log_t0, inv_dlog_t, gtab, hk, alpha_pref, b_pref, em_ions, out_i, out_tau, out_em
):
    """Rays along the middle axis of ``(A, L, C)`` arrays (C contiguous).

    Each ray advances one plane at a time and whole rows of rays are updated
    together, so memory is read contiguously. Each cell's opacity factors come
    from :func:`rtrace.transfer.ttable.opacity_table` at the node given by the
    temperature's bits, as in :func:`trace_along_last_axis`: a cell thin at every
    frequency (the table's per-node bound), in the radio regime, inside the table
    and without He III takes one branch-free loop over the frequencies, any other
    the exact forms; frequencies in chunks as there. Outputs are ``(nfreq, A, C)``
    and ``(A, C)``; they must be zero on entry.
    """
    if hk.shape[0] > FREQUENCY_CHUNK:
        _by_frequency_chunks(
            trace_along_middle_axis,
            ne,
            ni,
            temp,
            ds,
            forward,
            log_t0,
            inv_dlog_t,
            gtab,
            hk,
            alpha_pref,
            b_pref,
            em_ions,
            out_i,
            out_tau,
            out_em,
        )
        return
    table, bound = opacity_table(log_t0, inv_dlog_t, gtab, hk, alpha_pref)
    shift, base = bit_layout(temp.dtype)
    gtab_t = np.ascontiguousarray(gtab.transpose(0, 2, 1))
    sconst = _source_constants(hk, b_pref)
    # the contiguous arrays and the transposed views are compiled apart: the any-layout code ('A') for
    # contiguous arrays costs ~1.5x in run time (measured), and a specialisation of this kernel compiles in ~1 s
    run_tasks(
        _middle_axis_rows,
        ne.shape[0],
        ne,
        ni,
        temp,
        _temperature_bits(temp),
        shift,
        base,
        table,
        bound,
        sconst,
        float(ds),
        bool(forward),
        float(log_t0),
        float(inv_dlog_t),
        gtab,
        gtab_t,
        hk,
        float(hk.max()),
        alpha_pref,
        b_pref,
        bool(em_ions),
        out_i,
        out_tau,
        out_em,
    )


@numba.njit(cache=True, error_model="numpy", nogil=True, fastmath={"contract"})
def _middle_axis_rows(
    lo,
    hi,
    ne,
    ni,
    temp,
    tbits,
    shift,
    base,
    table,
    bound,
    sconst,
    ds,
    forward,
    log_t0,
    inv_dlog_t,
    gtab,
    gtab_t,
    hk,
    hk_max,
    alpha_pref,
    b_pref,
    em_ions,
    out_i,
    out_tau,
    out_em,
):
    """Rows ``lo <= a < hi`` of :func:`trace_along_middle_axis` (one task of :func:`run_tasks`)."""
    nl, nc = ne.shape[1], ne.shape[2]
    nf = hk.shape[0]
    mask = (1 << shift) - 1
    inv_step = 1.0 / (1 << shift)
    top = table.shape[0] - 1
    for a in range(lo, hi):
        kap, src = np.empty(nf), np.empty(nf)
        acc = np.zeros((nc, 2, nf))  # this row's rays: I and tau, frequencies contiguous
        for s in range(nl):
            l = s if forward else nl - 1 - s
            for c in range(nc):
                ne_c, ni_c = float(ne[a, l, c]), float(ni[a, l, c])
                nn = ne_c * ni_c
                if nn > 0.0:
                    out_em[a, c] += (nn if em_ions else ne_c * ne_c) * ds
                    bits = np.int64(tbits[a, l, c])
                    node = min(max((bits >> shift) - base, 0), top)
                    t = float(temp[a, l, c])
                    inv_t = 1.0 / t
                    c0 = nn * ds
                    if (
                        (t >= 1.0)
                        & (t < T_TOP)
                        & (hk_max * inv_t < SERIES_LIMIT)
                        & (c0 * bound[node] < SERIES_LIMIT)
                        & (ni_c <= ne_c)
                    ):
                        c1 = c0 * float(bits & mask) * inv_step  # thin, radio, no He III: as trace_along_last_axis
                        for f in range(nf):
                            dtau = c0 * table[node, 0, f] + c1 * table[node, 1, f]
                            acc[c, 0, f] += one_minus_exp_series(dtau) * (
                                sconst[0, f] * t + sconst[1, f] + sconst[2, f] * inv_t - acc[c, 0, f]
                            )
                            acc[c, 1, f] += dtau
                    else:
                        it, wt = _table_position(t, log_t0, inv_dlog_t, gtab.shape[2])
                        _coefficients_at(
                            it,
                            wt,
                            nn * math.sqrt(inv_t),
                            _helium3_share(ne_c, ni_c),
                            t,
                            inv_t,
                            gtab,
                            gtab_t,
                            hk,
                            hk_max,
                            alpha_pref,
                            b_pref,
                            kap,
                            src,
                        )
                        _cross(kap, src, ds, acc[c, 0], acc[c, 1])
        for c in range(nc):
            for f in range(nf):
                out_i[f, a, c] = acc[c, 0, f]
                out_tau[f, a, c] = acc[c, 1, f]


@numba.njit(cache=True, error_model="numpy", inline="always")
def _sort_few(x, n):
    """Sort ``x[:n]`` in place by insertion.

    A layer has a handful of cuts, and numba compiles this in a fraction of the time its general array sort takes.
    """
    for i in range(1, n):
        v = x[i]
        j = i - 1
        while j >= 0 and x[j] > v:
            x[j + 1] = x[j]
            j -= 1
        x[j + 1] = v


@numba.njit(cache=True, error_model="numpy")
def layer_segments(offset_a, offset_b, rho_a, rho_b, cell_a, cell_b, cell_c, abs_lc, k_lo, k_hi, forward, max_seg):
    """Path segments, per cell layer, shared by every ray of one lattice phase.

    Rays of a lattice commensurate with the grid on axes a and b all sit at the
    same fractional place within their cells, so within layer k (along the
    axis c most nearly parallel to the rays) they cross the same cell
    boundaries at the same depths. A ray whose lattice cell is (i, j) visits,
    in layer k, cells (i + da, j + db, k) for the listed segments, over path
    lengths ds: Amanatides & Woo (1987) traversal done once for all rays.

    ``offset_*``: ray position within its cell at c = 0 (cell units);
    ``rho_* = L_* / L_c``; returns ``(count (nk,), da, db (nk, max_seg) int64,
    ds (nk, max_seg))`` with layers and segments in the order of travel.
    """
    nk = k_hi - k_lo
    count = np.zeros(nk, np.int64)
    da = np.zeros((nk, max_seg), np.int64)
    db = np.zeros((nk, max_seg), np.int64)
    ds = np.zeros((nk, max_seg))
    step_a = rho_a * cell_c / cell_a  # change of the cell-unit position per layer
    step_b = rho_b * cell_c / cell_b
    cuts = np.empty(max_seg + 1)
    for s in range(nk):
        k = k_lo + s if forward else k_hi - 1 - s
        # depths (in layer units, 0..1 from the layer's entry face) where a or b crosses a cell edge
        ua0 = offset_a + step_a * (k if forward else k + 1)
        ub0 = offset_b + step_b * (k if forward else k + 1)
        sa = step_a if forward else -step_a
        sb = step_b if forward else -step_b
        n = 0
        cuts[n] = 0.0
        n += 1
        for u0, su in ((ua0, sa), (ub0, sb)):
            if su != 0.0:
                lo_edge = math.floor(min(u0, u0 + su))
                hi_edge = math.ceil(max(u0, u0 + su))
                for e in range(int(lo_edge), int(hi_edge) + 1):
                    t = (e - u0) / su
                    if 0.0 < t < 1.0 and n < max_seg:
                        cuts[n] = t
                        n += 1
        cuts[n] = 1.0
        n += 1
        _sort_few(cuts, n)
        m = 0
        for q in range(n - 1):
            t0, t1 = cuts[q], cuts[q + 1]
            if t1 - t0 <= 0.0:
                continue
            tm = 0.5 * (t0 + t1)
            da[s, m] = int(math.floor(ua0 + sa * tm))
            db[s, m] = int(math.floor(ub0 + sb * tm))
            ds[s, m] = (t1 - t0) * cell_c / abs_lc
            m += 1
        count[s] = m
    return count, da, db, ds


def trace_sheared(
    nn_cells,
    temp,
    blocks,
    lo,
    hi,
    off,
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
    log_t0,
    inv_dlog_t,
    gtab,
    hk,
    alpha_pref,
    b_pref,
    em_ions,
    out_i,
    out_tau,
    out_em,
    ratio=None,
):
    """A block of ``n_i x n_j`` parallel rays of one lattice phase, swept layer by layer.

    ``nn_cells`` holds ``n_e x ion term`` per cell (one array read instead of
    two: the layers are read with a stride, so each stream costs) and
    ``temp`` the temperature, both ``(A, B, C)`` views with C the axis most
    nearly parallel to the rays; ray ``(i0 + p, j0 + q)`` is output index
    ``p * n_j + q``. Rays are
    taken in blocks of rows that advance together layer by layer: for each
    layer the block first evaluates, once per cell it can reach, the
    absorption coefficient and source function at every frequency, then each
    segment of :func:`layer_segments` applies them to a whole row of rays
    (a cell is crossed by ~1 + |rho_a| + |rho_b| ray segments, so the
    transcendentals are not repeated per crossing). The cells are read
    :data:`_TILE` layers (one block of cells along c) at a time into a tile,
    with the columns ahead prefetched where c is the axis of unit stride, and
    each layer's rows then come from the tile with unit stride; a single frequency in the radio
    regime without He III has a vectorised row pass (:func:`_radio_row`).
    ``blocks`` is
    :func:`emitting_blocks` of ``nn_cells`` (same axis order): cells of a
    block with no emitting cell are not read, and each row's crossings are
    confined to the span of its emitting cells, so neutral gas costs almost
    nothing (empty-space skipping; the sums are unchanged, since a cell with
    ``n_e n_i = 0`` adds nothing to I, tau or EM). Cells outside
    ``lo <= index < hi`` (the brick, in global cell indices) contribute
    nothing. The arrays may be the whole grid or a brick's own sub-array:
    global cell ``(x, y, k)`` is element ``(x, y, k) - off`` (``off`` (3,)
    int64, the global index of element 0; zeros for the whole grid), so
    lattice and layer indices stay global and every brick shares one ray
    lattice. Outputs ``(nfreq, 1, n_i n_j)`` and ``(1, n_i n_j)`` must be zero
    on entry. ``ratio`` is ``n_e / ion term`` per cell in the same layout as
    ``nn_cells`` (:func:`rtrace.transfer.cell_cache.ratio_of`), or None where
    the two are equal in every cell (then nothing more is read): it gives the
    He III share of the ion term (:func:`_share_from_ratio`) and the
    ``n_e^2`` emission measure. ``nn_buf`` holds each cell's emission-measure
    weight (``n_e^2`` or ``n_e x ion term``).
    """
    nk = count.shape[0]
    gtab_t = np.ascontiguousarray(gtab.transpose(0, 2, 1))
    span_a = span_b = tile_a = tile_b = 0
    if nk > 0:
        first = np.arange(seg_da.shape[1]) < count[:, None]  # a layer's listed segments (else its first)
        da = np.where(first, seg_da, seg_da[:, :1])
        db = np.where(first, seg_db, seg_db[:, :1])
        span_a = int((da.max(axis=1) - da.min(axis=1)).max())
        span_b = int((db.max(axis=1) - db.min(axis=1)).max())
        # the spread of the offsets over any _TILE consecutive layers: the rows and columns a tile gathers
        window = min(_TILE, nk)
        tile_a = int(
            (_windows(da.max(axis=1), window).max(axis=1) - _windows(da.min(axis=1), window).min(axis=1)).max()
        )
        tile_b = int(
            (_windows(db.max(axis=1), window).max(axis=1) - _windows(db.min(axis=1), window).min(axis=1)).max()
        )
    # the tile gather prefetches columns ahead where c is the axis of unit stride
    along_c = nn_cells.strides[2] < nn_cells.strides[1]
    run_tasks(
        _sheared_row_blocks,
        (n_i + _ROW_BLOCK - 1) // _ROW_BLOCK,
        nn_cells,
        temp,
        blocks,
        lo,
        hi,
        off,
        int(k_lo),
        bool(forward),
        int(i0),
        int(n_i),
        int(j0),
        int(n_j),
        count,
        seg_da,
        seg_db,
        seg_ds,
        float(log_t0),
        float(inv_dlog_t),
        gtab,
        gtab_t,
        hk,
        float(hk.max()),
        alpha_pref,
        b_pref,
        bool(em_ions),
        out_i,
        out_tau,
        out_em,
        ratio,
        span_a,
        span_b,
        tile_a,
        tile_b,
        bool(along_c),
        relax_layout=True,
    )


def _windows(x, n):
    """Sliding windows of ``n`` consecutive elements of ``x`` (a view, ``(len(x) - n + 1, n)``)."""
    return np.lib.stride_tricks.sliding_window_view(x, n)


@numba.njit(cache=True, error_model="numpy", nogil=True)
def _sheared_row_blocks(
    blk_lo,
    blk_hi,
    nn_cells,
    temp,
    blocks,
    lo,
    hi,
    off,
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
    log_t0,
    inv_dlog_t,
    gtab,
    gtab_t,
    hk,
    hk_max,
    alpha_pref,
    b_pref,
    em_ions,
    out_i,
    out_tau,
    out_em,
    ratio,
    span_a,
    span_b,
    tile_a,
    tile_b,
    along_c,
):
    """Blocks of rows ``blk_lo <= blk < blk_hi`` of :func:`trace_sheared` (one task of :func:`run_tasks`).

    The block's cells are read :data:`_TILE` layers (one block of cells along c) at a time into tiles
    ordered (layer, a, b), layer innermost, with the columns ahead prefetched where c is the axis of
    unit stride (``along_c``); each layer is then read from the tile with unit stride. Read layer by
    layer, a C-ordered grid seen along its last axis is a stride through memory per cell.
    """
    nk = count.shape[0]
    nf = hk.shape[0]
    width = n_j + span_b
    t_rows, t_cols = _ROW_BLOCK + tile_a, n_j + tile_b
    for blk in range(blk_lo, blk_hi):
        p_lo = blk * _ROW_BLOCK
        p_hi = min(n_i, p_lo + _ROW_BLOCK)
        # this block's cells of one layer: n_e n_i, alpha_nu per frequency, S_nu
        row_first = np.empty(_ROW_BLOCK + span_a, np.int64)  # buffer columns of a row's emitting cells
        row_last = np.empty(_ROW_BLOCK + span_a, np.int64)
        row_kmax = np.empty(_ROW_BLOCK + span_a)  # a row's largest alpha_nu
        nn_buf = np.empty((_ROW_BLOCK + span_a, width))
        kap_buf = np.empty((_ROW_BLOCK + span_a, width, nf))
        src_buf = np.empty((_ROW_BLOCK + span_a, width, nf))
        # one row of the layer's cells: n_e n_i, He III share, T and the table position in ln T
        nn_row, sh_row, t_row, x_row = np.empty(width), np.empty(width), np.empty(width), np.empty(width)
        it_row, g_row = np.empty(width, np.int64), np.empty(width)  # _radio_row's table index, Gaunt factor
        # the cells of _TILE layers (the fields' own dtype), rows tx_lo.., columns ty_lo.. (0 where no block emits)
        tile_nn = np.empty((_TILE, t_rows, t_cols), nn_cells.dtype)
        tile_t = np.empty((_TILE, t_rows, t_cols), temp.dtype)
        tile_r = np.empty((_TILE, t_rows, t_cols) if ratio is not None else (1, 1, 1), nn_cells.dtype)
        tile, t_k0, tx_lo, ty_lo = -1, 0, 0, 0
        # the block's rays (its rows are its own), frequencies contiguous
        acc_i = np.zeros(((p_hi - p_lo) * n_j, nf))
        acc_t = np.zeros(((p_hi - p_lo) * n_j, nf))
        kap_flat = kap_buf.reshape((_ROW_BLOCK + span_a, width * nf))
        src_flat = src_buf.reshape((_ROW_BLOCK + span_a, width * nf))
        acc_i_flat = acc_i.reshape(-1)
        acc_t_flat = acc_t.reshape(-1)
        for s in range(nk):
            k = k_lo + s if forward else k_lo + nk - 1 - s
            kl = k - off[2]
            if kl // _TILE != tile:
                # gather the next tile: the layers of this brick in [tile * _TILE, (tile + 1) * _TILE) (local)
                tile = kl // _TILE
                t_k0 = max(tile * _TILE, k_lo - off[2])
                t_k1 = min(tile * _TILE + _TILE, k_lo + nk - off[2])
                tx_lo, tx_hi, ty_lo, ty_hi = hi[0], lo[0], hi[1], lo[1]
                for kq in range(t_k0, t_k1):
                    sq = kq + off[2] - k_lo if forward else k_lo + nk - 1 - (kq + off[2])
                    a_min, a_max, b_min, b_max = _segment_spread(seg_da, seg_db, sq, count[sq])
                    tx_lo = min(tx_lo, max(i0 + p_lo + a_min, lo[0]))
                    tx_hi = max(tx_hi, min(i0 + p_hi + a_max, hi[0]))
                    ty_lo = min(ty_lo, max(j0 + b_min, lo[1]))
                    ty_hi = max(ty_hi, min(j0 + n_j + b_max, hi[1]))
                # indices are unsigned (numba then adds no negative-index wraparound to each access); the tile is
                # one block of cells along c (bk), read layer-innermost: along c, a run of adjacent cells; along b,
                # each cache line serves the next columns
                bk = np.uint64(tile)
                n_k = t_k1 - t_k0
                uk0 = np.uint64(t_k0)
                for xr in range(tx_hi - tx_lo):
                    xl = np.uint64(tx_lo + xr - off[0])
                    bx = xl >> BLOCK_SHIFT
                    for yc in range(ty_hi - ty_lo):
                        yl = np.uint64(ty_lo + yc - off[1])
                        if along_c and yc + _AHEAD < ty_hi - ty_lo:
                            # the (one or two) cache lines of the run: its first and last cells
                            ya, k_first, k_last = yl + np.uint64(_AHEAD), uk0, uk0 + np.uint64(n_k - 1)
                            _prefetch(nn_cells, xl, ya, k_first)
                            _prefetch(nn_cells, xl, ya, k_last)
                            _prefetch(temp, xl, ya, k_first)
                            _prefetch(temp, xl, ya, k_last)
                            if ratio is not None:
                                _prefetch(ratio, xl, ya, k_first)
                                _prefetch(ratio, xl, ya, k_last)
                        if blocks[bx, yl >> BLOCK_SHIFT, bk]:
                            for kk in range(n_k):
                                tile_nn[kk, xr, yc] = nn_cells[xl, yl, uk0 + np.uint64(kk)]
                                tile_t[kk, xr, yc] = temp[xl, yl, uk0 + np.uint64(kk)]
                            if ratio is not None:
                                for kk in range(n_k):
                                    tile_r[kk, xr, yc] = ratio[xl, yl, uk0 + np.uint64(kk)]
                        else:
                            for kk in range(n_k):
                                tile_nn[kk, xr, yc] = 0.0
            a_min, a_max, b_min, b_max = _segment_spread(seg_da, seg_db, s, count[s])
            x_lo = max(i0 + p_lo + a_min, lo[0])
            x_hi = min(i0 + p_hi + a_max, hi[0])
            y_lo = max(j0 + b_min, lo[1])
            y_hi = min(j0 + n_j + b_max, hi[1])
            n_y = y_hi - y_lo
            lt = np.uint64(kl - t_k0)  # the layer's place in the tile
            for xb in range(x_hi - x_lo):
                ur = np.uint64(x_lo + xb - tx_lo)
                first, last = width, np.int64(-1)  # not a literal -1 (a 2nd compile of the callee)
                t_min, sh_max = 1.0e4, 0.0  # over the row's emitting cells
                for yb in range(n_y):
                    uc = np.uint64(y_lo - ty_lo) + np.uint64(yb)
                    nn = float(tile_nn[lt, ur, uc])
                    share, weight = 0.0, nn
                    if ratio is not None and nn > 0.0:
                        r = float(tile_r[lt, ur, uc])
                        share = _share_from_ratio(r)
                        weight = nn if em_ions else nn * r
                    nn_buf[xb, yb] = weight
                    nn_row[yb] = nn
                    sh_row[yb] = share
                    t = float(tile_t[lt, ur, uc]) if nn > 0.0 else 1.0e4
                    t_row[yb] = t
                    if nn > 0.0:
                        first = yb if yb < first else first
                        last = yb
                        t_min = t if t < t_min else t_min
                        sh_max = share if share > sh_max else sh_max
                row_first[xb] = first
                row_last[xb] = last
                if last < 0:
                    continue
                # the row's table positions in one vectorised loop (ln T from the float's bits; a loop writing
                # more arrays than this is left scalar by the compiler's aliasing checks)
                for yb in range(n_y):
                    bits = np.float64(t_row[yb]).view(np.int64)
                    mant = np.int64((bits & 0xFFFFFFFFFFFFF) | 0x3FF0000000000000).view(np.float64)
                    x_row[yb] = (_log_from_bits(bits, mant) - log_t0) * inv_dlog_t
                if nf == 1 and sh_max == 0.0 and hk_max * (1.0 / t_min) < SERIES_LIMIT:
                    row_kmax[xb] = _radio_row(
                        n_y,
                        nn_row,
                        t_row,
                        x_row,
                        gtab_t,
                        hk[0],
                        alpha_pref[0],
                        b_pref[0, 0],
                        b_pref[1, 0],
                        it_row,
                        g_row,
                        kap_flat[xb],
                        src_flat[xb],
                    )
                else:
                    row_kmax[xb] = _row_coefficients(
                        first,
                        last,
                        nn_row,
                        sh_row,
                        t_row,
                        x_row,
                        gtab,
                        gtab_t,
                        hk,
                        hk_max,
                        alpha_pref,
                        b_pref,
                        kap_flat[xb],
                        src_flat[xb],
                    )
            for p in range(p_lo, p_hi):
                r0 = (p - p_lo) * n_j
                for g in range(count[s]):
                    x = i0 + p + seg_da[s, g]
                    if x < x_lo or x >= x_hi:
                        continue
                    xb = x - x_lo
                    if row_last[xb] < 0:
                        continue  # no emitting cell in this row of the layer
                    ds = seg_ds[s, g]
                    yb0 = j0 + seg_db[s, g] - y_lo  # buffer column of ray q = 0
                    q_lo = max(0, row_first[xb] - yb0)
                    q_hi = min(n_j, row_last[xb] + 1 - yb0)
                    if row_kmax[xb] * ds < SERIES_LIMIT:
                        # every cell of the row thin at every frequency: no branch (a cell without emission has
                        # alpha_nu = S = 0 and weight 0, so it changes nothing)
                        # (unsigned indices: with no negative-index wraparound per access, the loops vectorise)
                        ux, e0, c0 = np.uint64(xb), np.uint64(p * n_j + q_lo), np.uint64(yb0 + q_lo)
                        for j in range(q_hi - q_lo):
                            out_em[0, e0 + np.uint64(j)] += nn_buf[ux, c0 + np.uint64(j)] * ds
                        # rays q_lo..q_hi and their cells are contiguous runs of (ray or cell, frequency)
                        m0, k0 = np.uint64((r0 + q_lo) * nf), c0 * np.uint64(nf)
                        for j in range((q_hi - q_lo) * nf):
                            uj = np.uint64(j)
                            dtau = kap_flat[ux, k0 + uj] * ds
                            acc_i_flat[m0 + uj] += one_minus_exp_series(dtau) * (
                                src_flat[ux, k0 + uj] - acc_i_flat[m0 + uj]
                            )
                            acc_t_flat[m0 + uj] += dtau
                    else:
                        # some cell optically thick at some frequency: _cross per cell, written out on the flat
                        # rows (a view per crossing costs two atomic reference-count updates per array)
                        kap_row, src_row = kap_flat[xb], src_flat[xb]
                        for q in range(q_lo, q_hi):
                            yb = yb0 + q
                            nn = nn_buf[xb, yb]
                            if nn > 0.0:
                                out_em[0, p * n_j + q] += nn * ds
                                c0, r = yb * nf, (r0 + q) * nf
                                thick = False
                                for f in range(nf):
                                    thick |= kap_row[c0 + f] * ds >= SERIES_LIMIT
                                if thick:
                                    for f in range(nf):
                                        dtau = kap_row[c0 + f] * ds
                                        acc_i_flat[r + f] += one_minus_exp(dtau) * (src_row[c0 + f] - acc_i_flat[r + f])
                                        acc_t_flat[r + f] += dtau
                                else:
                                    for f in range(nf):
                                        dtau = kap_row[c0 + f] * ds
                                        acc_i_flat[r + f] += one_minus_exp_series(dtau) * (
                                            src_row[c0 + f] - acc_i_flat[r + f]
                                        )
                                        acc_t_flat[r + f] += dtau
        for r in range((p_hi - p_lo) * n_j):
            for f in range(nf):
                out_i[f, 0, p_lo * n_j + r] = acc_i[r, f]
                out_tau[f, 0, p_lo * n_j + r] = acc_t[r, f]


@numba.njit(cache=True, error_model="numpy", nogil=True)
def _radio_row(n, nn_row, t_row, x_row, gtab_t, hk0, ap0, bp0, brj0, it_row, g_row, kap_row, src_row):
    """:func:`_row_coefficients` for one frequency, no He III and every cell in the radio regime (the common case).

    Cells ``0 <= yb < n`` in three loops, two of them vectorised (the
    table read at a per-cell index, a gather, has a loop of its own), the same operations in the same order.
    """
    n_t = gtab_t.shape[1]
    top = n_t - 1.0
    for yb in range(n):  # the table position, clamped to the table by selects
        xt = x_row[yb]
        xt = xt if xt > 0.0 else 0.0
        xt = xt if xt < top else top
        it = int(xt)
        it = it if it < n_t - 2 else n_t - 2
        it_row[yb] = it
        g_row[yb] = xt - it
    for yb in range(n):  # the Gaunt factor (the gather)
        it = it_row[yb]
        g_row[yb] = gtab_t[0, it, 0] + g_row[yb] * (gtab_t[0, it + 1, 0] - gtab_t[0, it, 0])
    for yb in range(n):
        t = t_row[yb]
        nn = nn_row[yb]
        inv_t = 1.0 / t
        uu = hk0 * inv_t
        kap_row[yb] = nn * math.sqrt(inv_t) * ap0 * _radio_stimulated(uu) * g_row[yb] if nn > 0.0 else 0.0
        src_row[yb] = _radio_source(t, uu, bp0, brj0) if nn > 0.0 else 0.0
    kmax = 0.0
    for yb in range(n):
        kmax = kap_row[yb] if kap_row[yb] > kmax else kmax
    return kmax


@numba.njit(cache=True, error_model="numpy", nogil=True)
def _row_coefficients(
    first, last, nn_row, sh_row, t_row, x_row, gtab, gtab_t, hk, hk_max, alpha_pref, b_pref, kap_row, src_row
):
    """Cells ``first <= yb <= last`` of one row of :func:`trace_sheared`'s layer buffer: ``alpha_nu`` and ``S_nu``.

    Written into ``kap_row[yb * nf + f]``, ``src_row[yb * nf + f]`` (zero where ``n_e n_i = 0``); returns the largest
    ``alpha_nu``.

    :func:`_coefficients_at` written out with the same operations in the same order (so results are
    identical): called per cell, inlined or not, its array arguments cost an atomic reference-count
    increment and decrement each per cell (the ``prange`` build of the sweep did not pay them), half
    the sweep's time on a fully emitting grid.
    """
    nf = hk.shape[0]
    n_t = gtab.shape[2]
    top = n_t - 1.0
    kmax = 0.0
    for yb in range(first, last + 1):
        nn = nn_row[yb]
        c0 = yb * nf
        if nn > 0.0:
            xt = min(max(x_row[yb], 0.0), top)
            it = min(int(xt), n_t - 2)
            wt = xt - it
            t = t_row[yb]
            inv_t = 1.0 / t
            a0 = nn * math.sqrt(inv_t)
            share = sh_row[yb]
            # _coefficients_at written out (the same operations in the same order)
            if hk_max * inv_t < SERIES_LIMIT:
                if share > 0.0:
                    for f in range(nf):
                        uu = hk[f] * inv_t
                        g1 = gtab_t[0, it, f] + wt * (gtab_t[0, it + 1, f] - gtab_t[0, it, f])
                        g2 = gtab_t[1, it, f] + wt * (gtab_t[1, it + 1, f] - gtab_t[1, it, f])
                        kap_row[c0 + f] = a0 * alpha_pref[f] * _radio_stimulated(uu) * (g1 + share * (g2 - g1))
                        src_row[c0 + f] = _radio_source(t, uu, b_pref[0, f], b_pref[1, f])
                else:
                    for f in range(nf):
                        uu = hk[f] * inv_t
                        g = gtab_t[0, it, f] + wt * (gtab_t[0, it + 1, f] - gtab_t[0, it, f])
                        kap_row[c0 + f] = a0 * alpha_pref[f] * _radio_stimulated(uu) * g
                        src_row[c0 + f] = _radio_source(t, uu, b_pref[0, f], b_pref[1, f])
            else:
                for f in range(nf):
                    uu = hk[f] * inv_t
                    g = gtab[0, f, it] + wt * (gtab[0, f, it + 1] - gtab[0, f, it])
                    if share > 0.0:
                        g += share * (gtab[1, f, it] + wt * (gtab[1, f, it + 1] - gtab[1, f, it]) - g)
                    if uu < SERIES_LIMIT:
                        stim = _radio_stimulated(uu)
                        source = _radio_source(t, uu, b_pref[0, f], b_pref[1, f])
                    else:
                        stim = one_minus_exp(uu)
                        source = b_pref[0, f] * inverse_expm1(uu)
                    kap_row[c0 + f] = a0 * (alpha_pref[f] * stim * g)
                    src_row[c0 + f] = source
            for f in range(nf):
                kmax = max(kmax, kap_row[c0 + f])
        else:
            for f in range(nf):
                kap_row[c0 + f] = 0.0
                src_row[c0 + f] = 0.0
    return kmax


trace_sheared.dispatcher = _sheared_row_blocks  # the compiled kernel (its signatures, for the warm-up's checks)


@numba.njit(cache=True, error_model="numpy", inline="always")
def _segment_spread(seg_da, seg_db, s, n):
    """Smallest and largest cell offsets ``(da_min, da_max, db_min, db_max)`` of layer ``s``'s segments."""
    a_min, a_max, b_min, b_max = seg_da[s, 0], seg_da[s, 0], seg_db[s, 0], seg_db[s, 0]
    for g in range(1, n):
        a_min = min(a_min, seg_da[s, g])
        a_max = max(a_max, seg_da[s, g])
        b_min = min(b_min, seg_db[s, g])
        b_max = max(b_max, seg_db[s, g])
    return a_min, a_max, b_min, b_max


def emitting_blocks(nn_cells):
    """Which blocks of ``2**BLOCK_SHIFT`` cells per axis hold a cell with ``n_e n_i > 0`` (uint8, 1 = some).

    Element ``(i, j, k)`` covers cells ``(i, j, k) * 8`` to ``+ 8`` (fewer at
    the far edges); transposing the result as the cells are transposed keeps
    the two in step. :func:`trace_sheared` skips the blocks marked 0.
    """
    na, nb, nc = nn_cells.shape
    w = 1 << BLOCK_SHIFT
    out = np.zeros(((na + w - 1) >> BLOCK_SHIFT, (nb + w - 1) >> BLOCK_SHIFT, (nc + w - 1) >> BLOCK_SHIFT), np.uint8)
    run_tasks(_mark_blocks, out.shape[0], nn_cells, out)
    return out


@numba.njit(cache=True, error_model="numpy", nogil=True)
def _mark_blocks(lo, hi, nn_cells, out):
    """Slabs ``lo <= bx < hi`` of :func:`emitting_blocks` (one task of :func:`run_tasks`)."""
    na, nb, nc = nn_cells.shape
    w = 1 << BLOCK_SHIFT
    for bx in range(lo, hi):
        for x in range(bx * w, min(na, (bx + 1) * w)):
            for y in range(nb):
                by = y >> BLOCK_SHIFT
                for z in range(nc):
                    if nn_cells[x, y, z] > 0:
                        out[bx, by, z >> BLOCK_SHIFT] = 1
