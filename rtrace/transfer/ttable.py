"""Per-frequency tables of the whole free-free opacity factor, indexed by the bits of the temperature.

The axis-aligned kernels need, per cell and frequency,
``alpha_nu / (n_e n_i) = A nu^-3 T^-1/2 (1 - e^{-h nu / kT}) g_ff(nu, T)``
(Rybicki & Lightman 1979, eq. 5.18b). Evaluating it per cell costs a
logarithm (the Gaunt table is uniform in ``ln T``), a square root and a
division. Here it is tabulated once per set of frequencies on nodes that are
uniform within each binade of ``T`` (``T = 2^e (1 + m / 2^NODE_BITS)``), so a
kernel finds the node and the interpolation weight from the float's bits
with integer operations alone: for a float32 ``T`` the node is
``(bits >> (23 - NODE_BITS)) - (127 << NODE_BITS)`` and the weight the low
``23 - NODE_BITS`` bits over ``2^(23 - NODE_BITS)`` (for float64, 52 and 1023).
Within a binade the float values are evenly spaced, so the interpolation is
linear in ``T`` between nodes ``2^-NODE_BITS`` apart in relative terms.

The node values are the kernels' former per-cell expression (the Gaunt
factor interpolated linearly in ``ln T`` on :func:`rtrace.physics.gaunt.log_temperature_table`,
times the exact ``T^-1/2`` and stimulated-emission factor), so the only new
error is that of linear interpolation in ``T`` over a relative step of
``2^-10``: ``(1/8)(2^-10)^2 T^2 |f''| / f``, at most ``(3/32) 2^-20 = 9e-8``
for the ``T^-1/2`` factor and ~2e-8 from the curvature of the Gaunt factor in
``ln T`` (measured: 1.8e-7 relative at most on whole images, against 1e-6
allowed; ``tests/test_kernels_ttable.py``). Nodes cover 1 K to ``T_TOP``
(2^33 K = 8.6e9 K, below the Gaunt table's end at 1e10 K, where it is
clamped); cells outside, and cells outside the radio regime, are left to
the kernels' exact path.
"""

import hashlib
import threading

import numpy as np

from ..physics.planck import SERIES_LIMIT

__all__ = ["FREQUENCY_CHUNK", "INDEX_MASK", "NODE_BITS", "T_TOP", "bit_layout", "opacity_table"]

NODE_BITS = 10  # mantissa bits that select a node: 1024 nodes per binade
_BINADES = 33  # nodes from 1 K (2^0) to 2^33 K
T_TOP = 2.0**_BINADES  # cells at or above this temperature take the exact path
_ROWS = 1 << 16  # table rows: a masked index needs no clamp (rows past T_TOP are zero)
INDEX_MASK = _ROWS - 1

_cache = {}  # key -> table (the last few sets of frequencies)
_lock = threading.Lock()  # bricks may be traced on several threads (dask)
_CACHE_SIZE = 2
FREQUENCY_CHUNK = 16  # frequencies per table (and per kernel call) in the several-frequency kernels


def bit_layout(dtype):
    """``(shift, base)`` for fields of ``dtype``: node ``= (bits >> shift) - base`` (masked by :data:`INDEX_MASK`).

    IEEE 754 binary32 (8 exponent bits, bias 127, 23 fraction bits) and binary64 (11, 1023, 52);
    snapshots store float32 or float64 only.
    """
    dtype = np.dtype(dtype)
    if dtype == np.float32:
        return 23 - NODE_BITS, 127 << NODE_BITS
    if dtype == np.float64:
        return 52 - NODE_BITS, 1023 << NODE_BITS
    raise ValueError(f"temperature table: fields must be float32 or float64, got {dtype}")


def _node_temperatures():
    """The ``_BINADES * 2^NODE_BITS + 1`` node temperatures (K), exact binary fractions."""
    j = np.arange((_BINADES << NODE_BITS) + 1, dtype=np.int64)
    return ((j + (1023 << NODE_BITS)) << (52 - NODE_BITS)).view(np.float64)


def opacity_table(log_t0, inv_dlog_t, gtab, hk, alpha_pref):
    """The table of ``K_f(T) = alpha_nu / (n_e n_i)`` (cm5, ion charge 1, ``gtab[0]``): ``(table, bound)``.

    ``table`` is ``(rows, 2, nfreq)``: per node, ``K_f`` and its step to the next node; ``bound`` ``(rows,)``
    is the largest ``K_f`` at either end of the node's segment over the frequencies (a cell
    with ``n_e n_i ds bound < SERIES_LIMIT`` is thin at every frequency). A cell has
    ``dtau_f = n_e n_i ds K_f(T)``. ``rows`` is 2^16 for one frequency (a node index
    masked by :data:`INDEX_MASK` stays inside; rows past :data:`T_TOP` are zero), else
    the 33 792 nodes below ``T_TOP`` (a kernel clamps the index). Memory: 1 MB for one
    frequency, 0.54 MB per frequency otherwise (the kernels take at most
    :data:`FREQUENCY_CHUNK` frequencies per table). Kept for the last two sets of
    frequencies (a trace makes its frequency tables once per call; the Gaunt rows are
    cached the same way).
    """
    key = (
        float(log_t0),
        float(inv_dlog_t),
        np.asarray(hk, float).tobytes(),
        np.asarray(alpha_pref, float).tobytes(),
        hashlib.blake2b(np.ascontiguousarray(gtab[0])).digest(),
    )
    with _lock:
        found = _cache.get(key)
    if found is None:
        found = _build(
            float(log_t0),
            float(inv_dlog_t),
            np.asarray(gtab[0], float),
            np.asarray(hk, float),
            np.asarray(alpha_pref, float),
        )
        for arr in found:
            arr.flags.writeable = False
        with _lock:
            while len(_cache) >= _CACHE_SIZE:
                _cache.pop(next(iter(_cache)))
            _cache[key] = found
    return found


def _build(log_t0, inv_dlog_t, grows, hk, alpha_pref):
    temp = _node_temperatures()
    n_t = grows.shape[1]
    # the Gaunt factor as the kernels interpolated it: linear in ln T, clamped to the table
    x = np.clip((np.log(temp) - log_t0) * inv_dlog_t, 0.0, n_t - 1.0)
    it = np.minimum(x.astype(np.int64), n_t - 2)
    wt = x - it
    inv_t = 1.0 / temp
    g = grows[:, it] + wt * (grows[:, it + 1] - grows[:, it])  # (nfreq, nodes)
    uu = hk[:, None] * inv_t
    # 1 - e^{-u}: the kernels' series below SERIES_LIMIT (A&S 4.2.1), else exact
    stim = np.where(uu < SERIES_LIMIT, uu * (1.0 - uu * (0.5 - uu * (1.0 / 6.0 - uu * (1.0 / 24.0)))), -np.expm1(-uu))
    k = (np.sqrt(inv_t) * alpha_pref[:, None]) * stim * g
    nf, segments = hk.shape[0], temp.shape[0] - 1
    # one frequency: 2^16 rows, so the single-frequency kernel masks the node instead of clamping it
    rows = _ROWS if nf == 1 else segments
    table = np.zeros((rows, 2, nf))
    table[:segments, 0, :nf] = k[:, :-1].T
    table[:segments, 1, :nf] = (k[:, 1:] - k[:, :-1]).T
    bound = np.zeros(rows)
    bound[:segments] = np.maximum(k[:, :-1], k[:, 1:]).max(axis=0)
    return table, bound
