"""The last-axis kernels' vectorised and cell-by-cell paths against a direct evaluation.

The single-frequency kernel evaluates whole rays in a branch-free loop when every cell is in the
radio regime and optically thin, eight rays side by side, and redoes a ray cell by cell otherwise;
the several-frequency kernel chooses the series or exact forms per cell. Both read the opacity
factor from a table indexed by the temperature's bits (``rtrace.transfer.ttable``). Both paths are checked here against
the formal solution for piecewise-constant cells, ``I <- I e^{-dtau} + B_nu (1 - e^{-dtau})``, with
alpha_nu from Rybicki & Lightman (1979) eq. 5.18b (``absorption_cgs``) and B_nu from Planck's law
(``planck_cgs``), evaluated here in numpy cell by cell.
"""

import numpy as np
import pytest

from rtrace.physics.freefree import absorption_cgs
from rtrace.physics.planck import planck_cgs
from rtrace.transfer import kernels
from rtrace.transfer.tracer import FrequencyTables

DS = 3.0e15  # cm (about 1e-3 pc)


def direct(ne, temp, nu, forward):
    """``(I, tau, EM)`` along the last axis, one cell at a time in float64 numpy."""
    ne64, t64 = ne.astype(float), temp.astype(float)
    inten = np.zeros(ne.shape[:2])
    tau = np.zeros(ne.shape[:2])
    em = np.zeros(ne.shape[:2])
    order = range(ne.shape[2]) if forward else range(ne.shape[2] - 1, -1, -1)
    for k in order:
        on = ne64[:, :, k] > 0
        t = np.where(on, t64[:, :, k], 1.0e4)
        dtau = np.where(on, absorption_cgs(nu, t, ne64[:, :, k], ne64[:, :, k]) * DS, 0.0)
        inten += -np.expm1(-dtau) * (planck_cgs(nu, t) - inten)
        tau += dtau
        em += ne64[:, :, k] ** 2 * DS
    return inten, tau, em


def grid(rng, n=(6, 7, 40)):
    """float32 fields: smooth-ish random n_e and T, some neutral cells, one optically thick ray."""
    ne = rng.uniform(5.0, 205.0, n).astype(np.float32)
    temp = rng.uniform(5.0e3, 2.0e4, n).astype(np.float32)
    ne[rng.random(n) < 0.2] = 0.0  # neutral cells (temperature kept, not used)
    ne[0, 0, :] = 0.0  # a ray with no emitting cell
    ne[1, 2, 5:9] = 3.0e5  # dtau > SERIES_LIMIT at 5 GHz: the cell-by-cell path
    temp[2, 3, 10] = 50.0  # h nu / kT > SERIES_LIMIT at 5 GHz: the same
    return ne, temp


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
@pytest.mark.parametrize("forward", [True, False])
@pytest.mark.parametrize("nu", [5.0e9, 1.0e12])
def test_one_frequency_kernel_matches_direct_transfer(rng, forward, nu, dtype):
    ne, temp = (x.astype(dtype) for x in grid(rng))
    tables = FrequencyTables(np.array([nu]))
    out_i, out_tau = np.zeros((1,) + ne.shape[:2]), np.zeros((1,) + ne.shape[:2])
    out_em = np.zeros(ne.shape[:2])
    kernels.one_frequency_along_last_axis(ne, ne, temp, DS, forward, *tables.args(), out_i, out_tau, out_em)
    inten, tau, em = direct(ne, temp, nu, forward)
    assert out_i[0, 0, 0] == 0.0 and out_tau[0, 0, 0] == 0.0 and out_em[0, 0] == 0.0
    if nu < 1e10:
        assert tau[1, 2] > 1.0  # the thick ray really is thick at 5 GHz
    else:
        assert np.all(4.8e-11 * nu / temp > 1e-3)  # h nu / kT (h/k ~ 4.8e-11 K s, from memory): no radio series
    # the Gaunt factor comes from a table in ln T (linear interpolation), the opacity factor from one linear in
    # T between nodes 2^-10 apart (rtrace.transfer.ttable): together below 1e-6 relative
    np.testing.assert_allclose(out_tau[0], tau, rtol=1e-6, atol=0)
    np.testing.assert_allclose(out_i[0], inten, rtol=1e-6, atol=0)
    np.testing.assert_allclose(out_em, em, rtol=1e-6, atol=0)


@pytest.mark.parametrize("forward", [True, False])
def test_several_frequency_kernel_matches_direct_transfer(rng, forward):
    # frequencies where the grid's thick ray is thick (1 GHz), thin radio (5, 30 GHz), and h nu / kT above the
    # radio series' limit in every cell (1 THz): each cell's vectorised and exact paths against the direct sum
    ne, temp = grid(rng, n=(5, 9, 33))  # 9 rays a row: the single-frequency kernel's group of 8 and a tail
    nus = np.array([1.0e9, 5.0e9, 3.0e10, 1.0e12])
    tables = FrequencyTables(nus)
    out_i, out_tau = np.zeros((nus.size,) + ne.shape[:2]), np.zeros((nus.size,) + ne.shape[:2])
    out_em = np.zeros(ne.shape[:2])
    kernels.trace_along_last_axis(ne, ne, temp, DS, forward, *tables.args(), out_i, out_tau, out_em)
    for f, nu in enumerate(nus):
        inten, tau, em = direct(ne, temp, nu, forward)
        np.testing.assert_allclose(out_tau[f], tau, rtol=1e-6, atol=0)
        np.testing.assert_allclose(out_i[f], inten, rtol=1e-6, atol=0)
        np.testing.assert_allclose(out_em, em, rtol=1e-6, atol=0)
    # the single-frequency kernel agrees with the several-frequency one at each frequency
    for f in range(nus.size):
        one_i, one_tau, one_em = np.zeros((1,) + ne.shape[:2]), np.zeros((1,) + ne.shape[:2]), np.zeros(ne.shape[:2])
        kernels.one_frequency_along_last_axis(
            ne, ne, temp, DS, forward, *FrequencyTables(nus[f : f + 1]).args(), one_i, one_tau, one_em
        )
        np.testing.assert_allclose(one_i[0], out_i[f], rtol=1e-6, atol=0)
        np.testing.assert_allclose(one_tau[0], out_tau[f], rtol=1e-6, atol=0)


@pytest.mark.parametrize("nus", [[5.0e9], [1.0e9, 5.0e9, 3.0e10], [5.0e9, 1.0e12]])
def test_oblique_row_coefficients_match_the_physics_and_the_cell_helper(rng, nus):
    # The oblique sweep's per-row pass writes out _coefficients_at by hand (no per-cell call with arrays):
    # alpha_nu (R&L 1979 eq. 5.18b, absorption_cgs, with He III cells) and B_nu (Planck's law, planck_cgs) per
    # cell, zero where n_e n_i = 0, the largest alpha_nu returned; and it must agree with the per-cell helper
    # (_cell_coefficients) to rounding, in the radio series (GHz) and the exact (1 THz, 50 K) branches.
    nus = np.array(nus)
    n = 60
    ne = rng.uniform(5.0, 205.0, n)
    ni = ne * np.where(rng.random(n) < 0.3, 1.1, 1.0)  # ion term above n_e: He III present
    temp = rng.uniform(5.0e3, 2.0e4, n)
    temp[4] = 50.0  # h nu / kT > SERIES_LIMIT at 1 THz
    ne[rng.random(n) < 0.2] = 0.0
    ni[ne == 0] = 0.0
    tables = FrequencyTables(nus)
    log_t0, inv_dlog_t, gtab, hk, alpha_pref, b_pref, _ = tables.args()
    gtab_t = np.ascontiguousarray(gtab.transpose(0, 2, 1))
    nn = ne * ni
    share = np.array([kernels._helium3_share(a, b) for a, b in zip(ne, ni, strict=True)])
    x_row = (np.log(temp) - log_t0) * inv_dlog_t
    kap, src = np.full(n * nus.size, np.nan), np.full(n * nus.size, np.nan)
    kmax = kernels._row_coefficients(
        0, n - 1, nn, share, temp, x_row, gtab, gtab_t, hk, float(hk.max()), alpha_pref, b_pref, kap, src
    )
    kap, src = kap.reshape(n, nus.size), src.reshape(n, nus.size)
    on = nn > 0
    assert share.max() > 0 and not on.all()
    assert np.all(kap[~on] == 0.0) and np.all(src[~on] == 0.0)
    want_kap = np.stack([absorption_cgs(nu, temp[on], ne[on], ni[on]) for nu in nus], axis=1)
    want_src = np.stack([planck_cgs(nu, temp[on]) for nu in nus], axis=1)
    # the Gaunt factor comes from a table in ln T (linear interpolation), the opacity factor from one linear in
    # T between nodes 2^-10 apart (rtrace.transfer.ttable): together below 1e-6 relative
    np.testing.assert_allclose(kap[on], want_kap, rtol=1e-6, atol=0)
    np.testing.assert_allclose(src[on], want_src, rtol=1e-6, atol=0)
    assert kmax == kap.max()
    for c in np.flatnonzero(on):
        k1, s1 = np.empty(nus.size), np.empty(nus.size)
        kernels._cell_coefficients(
            nn[c], share[c], temp[c], log_t0, inv_dlog_t, gtab, gtab_t, hk, float(hk.max()), alpha_pref, b_pref, k1, s1
        )
        np.testing.assert_allclose(kap[c], k1, rtol=1e-13, atol=0)
        np.testing.assert_allclose(src[c], s1, rtol=1e-13, atol=0)


@pytest.mark.parametrize("nu", [5.0e9, 3.0e10])
def test_oblique_radio_row_matches_the_physics_and_the_general_row_pass(rng, nu):
    # The oblique sweep's single-frequency pass for rows in the radio regime without He III (_radio_row: the
    # table position, the Gaunt-table gather and the coefficients in separate loops) against alpha_nu (R&L 1979
    # eq. 5.18b, absorption_cgs) and B_nu (Planck's law, planck_cgs), zero where n_e n_i = 0, and bit for bit
    # against the general row pass (_row_coefficients), which does the same operations in the same order.
    n = 77
    ne = rng.uniform(5.0, 205.0, n)
    temp = rng.uniform(5.0e3, 2.0e4, n)
    ne[rng.random(n) < 0.2] = 0.0
    temp[ne == 0] = 1.0e4  # what the sweep's row buffer holds there
    tables = FrequencyTables(np.array([nu]))
    log_t0, inv_dlog_t, gtab, hk, alpha_pref, b_pref, _ = tables.args()
    gtab_t = np.ascontiguousarray(gtab.transpose(0, 2, 1))
    nn = ne * ne
    x_row = (np.log(temp) - log_t0) * inv_dlog_t
    kap, src = np.full(n, np.nan), np.full(n, np.nan)
    kmax = kernels._radio_row(
        n,
        nn,
        temp,
        x_row,
        gtab_t,
        hk[0],
        alpha_pref[0],
        b_pref[0, 0],
        b_pref[1, 0],
        np.empty(n, np.int64),
        np.empty(n),
        kap,
        src,
    )
    on = nn > 0
    assert 0 < on.sum() < n
    assert np.all(kap[~on] == 0.0) and np.all(src[~on] == 0.0)
    np.testing.assert_allclose(kap[on], absorption_cgs(nu, temp[on], ne[on], ne[on]), rtol=1e-6, atol=0)
    np.testing.assert_allclose(src[on], planck_cgs(nu, temp[on]), rtol=1e-6, atol=0)
    assert kmax == kap.max()
    k2, s2 = np.full(n, np.nan), np.full(n, np.nan)
    first, last = np.flatnonzero(on)[[0, -1]]
    kmax2 = kernels._row_coefficients(
        first, last, nn, np.zeros(n), temp, x_row, gtab, gtab_t, hk, float(hk.max()), alpha_pref, b_pref, k2, s2
    )
    assert np.array_equal(kap[first : last + 1], k2[first : last + 1]) and kmax2 == kmax
    assert np.array_equal(src[first : last + 1], s2[first : last + 1])
