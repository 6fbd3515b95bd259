"""The axis kernels' opacity table indexed by the temperature's bits (``rtrace.transfer.ttable``).

Checked against the IEEE 754 layout of the floats (the node and weight must give back the
temperature exactly), against Rybicki & Lightman (1979) eq. 5.18a evaluated here from
astropy's constants (with the package's Gaunt factor, tested against independent values in
``test_gaunt*.py``), and the axis kernels against each other for both field precisions.
"""

import math

import numpy as np
import pytest
from astropy import constants as const

from rtrace.physics.gaunt import gaunt_cgs
from rtrace.transfer import kernels, ttable
from rtrace.transfer.tracer import FrequencyTables


def _node_and_weight(temp):
    """Node and interpolation weight of each temperature, as the kernels compute them from the bits."""
    shift, base = ttable.bit_layout(temp.dtype)
    bits = temp.view(np.int32 if temp.dtype == np.float32 else np.int64).astype(np.int64)
    node = ((bits >> shift) - base) & ttable.INDEX_MASK
    weight = (bits & ((1 << shift) - 1)) / float(1 << shift)
    return node, weight


def _node_temperature(node):
    # node j is T = 2^(j >> 10) (1 + (j & 1023) / 1024): IEEE 754-2008 binary formats (biased exponent, then
    # the fraction bits), built here from the definition rather than from the bits
    j = np.asarray(node, np.int64)
    return np.ldexp(1.0 + (j & ((1 << ttable.NODE_BITS) - 1)) / 2.0**ttable.NODE_BITS, j >> ttable.NODE_BITS)


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_node_and_weight_give_back_the_temperature(rng, dtype):
    temp = np.exp(rng.uniform(0.0, math.log(ttable.T_TOP), 20000)).astype(dtype)
    temp[:4] = np.array([1.0, 2.0, 1.0e4, np.nextafter(ttable.T_TOP, 0)], dtype)
    node, weight = _node_and_weight(temp)
    lo, hi = _node_temperature(node), _node_temperature(node + 1)
    assert np.all((weight >= 0) & (weight < 1))
    # within a binade the floats are evenly spaced, so T is exactly the linear point between its nodes
    np.testing.assert_array_equal(lo + weight * (hi - lo), temp.astype(float))


def _rybicki_lightman(nu, temp):
    """alpha_nu / (n_e n_i) for Z = 1 (cm5): R&L (1979) eq. 5.18a, constants from astropy (cgs, Gaussian)."""
    e, m, h, c, k = (const.e.esu.value, const.m_e.cgs.value, const.h.cgs.value, const.c.cgs.value, const.k_B.cgs.value)
    pref = 4.0 * e**6 / (3.0 * m * h * c) * math.sqrt(2.0 * math.pi / (3.0 * k * m))
    return pref * temp**-0.5 * nu**-3 * -np.expm1(-h * nu / (k * temp)) * gaunt_cgs(nu, temp)


def test_table_matches_the_free_free_opacity(rng):
    nus = np.array([1.0e8, 1.4e9, 5.0e9, 3.0e10, 1.0e11])
    tables = FrequencyTables(nus)
    table, bound = ttable.opacity_table(tables.log_t0, tables.inv_dlog_t, tables.gtab, tables.hk, tables.alpha_pref)
    temp = np.exp(rng.uniform(math.log(10.0), math.log(1.0e9), 3000))
    node, weight = _node_and_weight(temp)
    for f, nu in enumerate(nus):
        ours = table[node, 0, f] + weight * table[node, 1, f]
        # Gaunt table in ln T (< 5e-7, gaunt.log_temperature_table) plus this table's interpolation in T
        # (< 2e-7, ttable's docstring): 1e-6 allowed
        np.testing.assert_allclose(ours, _rybicki_lightman(nu, temp), rtol=1e-6, atol=0)
        assert np.all(bound[node] >= np.maximum(table[node, 0, f], table[node, 0, f] + table[node, 1, f]))
    assert np.all(table[(33 << ttable.NODE_BITS) :] == 0.0)  # past T_TOP: nothing (the exact path)


def _fields(rng, dtype, shape=(5, 9, 33)):
    ne = rng.uniform(5.0, 205.0, shape)
    temp = np.exp(rng.uniform(math.log(3.0e3), math.log(3.0e4), shape))
    ne[rng.random(shape) < 0.2] = 0.0
    ne[1, 2, 5:9] = 3.0e5  # optically thick cells at 1 GHz: the exact path
    temp[2, 3, 10] = 50.0  # h nu / kT above the radio series at 1 THz
    temp[3, 4, 12] = 9.0e9  # above T_TOP: the exact path
    return ne.astype(dtype), temp.astype(dtype)


@pytest.mark.parametrize("forward", [True, False])
def test_axis_kernels_agree_for_both_precisions(rng, forward):
    # the last-axis kernels (one and several frequencies) and the middle-axis kernel on the same cells, float32
    # and float64 fields: the several-frequency kernels share the table and the arithmetic (rounding-level
    # agreement); the two precisions agree within the float32 rounding of the fields themselves
    nus = np.array([1.0e9, 5.0e9, 1.0e12])
    tables = FrequencyTables(nus)
    found = {}
    for dtype in (np.float32, np.float64):
        ne, temp = _fields(np.random.default_rng(7), dtype)
        shape = (nus.size,) + ne.shape[:2]
        last = [np.zeros(shape), np.zeros(shape), np.zeros(ne.shape[:2])]
        kernels.trace_along_last_axis(ne, ne, temp, 3.0e15, forward, *tables.args(), *last)
        mid = [np.zeros(shape), np.zeros(shape), np.zeros(ne.shape[:2])]
        kernels.trace_along_middle_axis(
            *(x.transpose(0, 2, 1) for x in (ne, ne, temp)), 3.0e15, forward, *tables.args(), *mid
        )
        for f in range(nus.size):
            one = [np.zeros((1,) + ne.shape[:2]), np.zeros((1,) + ne.shape[:2]), np.zeros(ne.shape[:2])]
            kernels.one_frequency_along_last_axis(
                ne, ne, temp, 3.0e15, forward, *FrequencyTables(nus[f : f + 1]).args(), *one
            )
            # a ray with any cell off the table's path is redone cell by cell with the Gaunt table in ln T by the
            # single-frequency kernel, but only that cell by the others: the table's ~2e-7 apart
            np.testing.assert_allclose(one[0][0], last[0][f], rtol=1e-6, atol=0)
            np.testing.assert_allclose(one[1][0], last[1][f], rtol=1e-6, atol=0)
        for a, b in zip(last, mid, strict=True):
            np.testing.assert_allclose(a, b, rtol=1e-12, atol=0)
        assert last[1][0, 1, 2] > 1.0  # the thick ray is thick at 1 GHz
        found[dtype] = last
    for a, b in zip(found[np.float32], found[np.float64], strict=True):
        np.testing.assert_allclose(a, b, rtol=1e-5, atol=0)


def test_many_frequencies_are_traced_in_chunks(rng):
    # more frequencies than one table holds (ttable.FREQUENCY_CHUNK): the kernels take them in chunks; each
    # frequency must equal the single-frequency trace of the same cells, and the EM is summed once
    nus = np.geomspace(0.5e9, 50.0e9, ttable.FREQUENCY_CHUNK + 5)
    ne, temp = _fields(rng, np.float32)
    tables = FrequencyTables(nus)
    shape = (nus.size,) + ne.shape[:2]
    last = [np.zeros(shape), np.zeros(shape), np.zeros(ne.shape[:2])]
    kernels.trace_along_last_axis(ne, ne, temp, 3.0e15, True, *tables.args(), *last)
    mid = [np.zeros(shape), np.zeros(shape), np.zeros(ne.shape[:2])]
    kernels.trace_along_middle_axis(*(x.transpose(0, 2, 1) for x in (ne, ne, temp)), 3.0e15, True, *tables.args(), *mid)
    for f in (0, ttable.FREQUENCY_CHUNK - 1, ttable.FREQUENCY_CHUNK, nus.size - 1):
        one = [np.zeros((1,) + ne.shape[:2]), np.zeros((1,) + ne.shape[:2]), np.zeros(ne.shape[:2])]
        kernels.one_frequency_along_last_axis(ne, ne, temp, 3.0e15, True, *FrequencyTables(nus[f : f + 1]).args(), *one)
        for got in (last, mid):
            np.testing.assert_allclose(got[0][f], one[0][0], rtol=1e-6, atol=0)
            np.testing.assert_allclose(got[1][f], one[1][0], rtol=1e-6, atol=0)
            np.testing.assert_allclose(got[2], one[2], rtol=1e-12, atol=0)
