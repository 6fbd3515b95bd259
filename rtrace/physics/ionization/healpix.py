"""HEALPix pixel geometry in the NESTED ordering, as scalar numba kernels.

The sphere is cut into 12 equal-area base faces (four round each pole and
four straddling the equator); every face is split into ``nside x nside``
pixels, ``nside = 2**level``, giving ``12 * nside**2`` pixels of equal area.
The geometry follows Górski et al. (2005, ApJ 622, 759): the equatorial zone
``|z| <= 2/3`` and the two polar caps ``|z| > 2/3``, with pixel boundaries that
are straight lines in ``(z, phi)`` at the equator and curves
``(1 - |z|) * phi_t**2 = const`` in the caps.

In the NESTED ordering the index of a pixel is
``face * nside**2 + interleave(ix, iy)``, where ``(ix, iy)`` are the pixel's
integer coordinates inside its face and the bits of ``ix`` and ``iy`` are
interleaved (``ix`` on the even bits).  Consequently pixel ``p`` at level
``l`` has the four children ``4p .. 4p+3`` at level ``l+1``, and all of its
descendants at level ``l+k`` form the contiguous range
``[p * 4**k, (p+1) * 4**k)``; the parent of ``p`` is ``p // 4``.  A ray tree
built on this numbering refines a ray by splitting it into its four children.

Functions (all ``numba.njit``, scalar, allocation-free, callable from other
compiled kernels and ``prange`` loops; integers are int64 throughout, so
``nside`` up to ``2**29`` is representable):

``nside_for_level(level)``
    ``2**level``.
``spread_bits(v)`` / ``compact_bits(v)``
    Move the low 32 bits of ``v`` to the even bit positions, and back.
``xyf2nest(nside, ix, iy, face)`` / ``nest2xyf(nside, ipix)``
    Face coordinates ``(ix, iy, face)`` <-> nested pixel index.
``pix2vec_nest(nside, ipix)``
    Unit vector ``(x, y, z)`` of the centre of pixel ``ipix``.
``vec2pix_nest(nside, x, y, z)``
    Index of the pixel containing the direction ``(x, y, z)`` (any non-zero
    length).  Points exactly on a boundary go to the pixel on the side of
    larger edge-line index (the boundary is attributed by ``floor``).
"""

import math

import numba
import numpy as np

__all__ = [
    "nside_for_level",
    "spread_bits",
    "compact_bits",
    "xyf2nest",
    "nest2xyf",
    "pix2vec_nest",
    "vec2pix_nest",
]

# Face tables of the nested scheme (Górski et al. 2005).  Faces 0-3 touch the
# north pole, 4-7 straddle the equator, 8-11 touch the south pole.
# _FACE_RING * nside: the ring (rings of pixel centres counted from the north
# pole, the equator being ring 2 * nside) through the face's southern corner;
# the face centre lies nside rings further north.
# _FACE_PHI: longitude of the face centre in units of pi/4.
_FACE_RING = np.array([2, 2, 2, 2, 3, 3, 3, 3, 4, 4, 4, 4], dtype=np.int64)
_FACE_PHI = np.array([1, 3, 5, 7, 0, 2, 4, 6, 1, 3, 5, 7], dtype=np.int64)

_TWO_THIRDS = 2.0 / 3.0
_QUARTER_PI = 0.25 * math.pi
_TWO_OVER_PI = 2.0 / math.pi


@numba.njit(cache=True, fastmath=False)
def nside_for_level(level):
    """HEALPix ``nside`` of refinement level ``level`` (``2**level``)."""
    return np.int64(1) << np.int64(level)


@numba.njit(cache=True, fastmath=False)
def spread_bits(v):
    """Put bit ``k`` of ``v`` (``0 <= v < 2**32``) at bit ``2k`` of the result."""
    # Binary "magic number" dilation: each step doubles the gap between groups
    # of bits, so 32 input bits need five steps instead of a 32-step loop.
    x = np.int64(v) & np.int64(0x00000000FFFFFFFF)
    x = (x | (x << 16)) & np.int64(0x0000FFFF0000FFFF)
    x = (x | (x << 8)) & np.int64(0x00FF00FF00FF00FF)
    x = (x | (x << 4)) & np.int64(0x0F0F0F0F0F0F0F0F)
    x = (x | (x << 2)) & np.int64(0x3333333333333333)
    x = (x | (x << 1)) & np.int64(0x5555555555555555)
    return x


@numba.njit(cache=True, fastmath=False)
def compact_bits(v):
    """Inverse of :func:`spread_bits`: gather the even bits of ``v`` (odd bits ignored)."""
    x = np.int64(v) & np.int64(0x5555555555555555)
    x = (x | (x >> 1)) & np.int64(0x3333333333333333)
    x = (x | (x >> 2)) & np.int64(0x0F0F0F0F0F0F0F0F)
    x = (x | (x >> 4)) & np.int64(0x00FF00FF00FF00FF)
    x = (x | (x >> 8)) & np.int64(0x0000FFFF0000FFFF)
    x = (x | (x >> 16)) & np.int64(0x00000000FFFFFFFF)
    return x


@numba.njit(cache=True, fastmath=False)
def xyf2nest(nside, ix, iy, face):
    """Nested index of the pixel at ``(ix, iy)`` (each in ``[0, nside)``) of base face ``face``."""
    n = np.int64(nside)
    return np.int64(face) * n * n + (spread_bits(ix) | (spread_bits(iy) << 1))


@numba.njit(cache=True, fastmath=False)
def nest2xyf(nside, ipix):
    """Face coordinates ``(ix, iy, face)`` of nested pixel ``ipix``."""
    n = np.int64(nside)
    npface = n * n
    p = np.int64(ipix)
    face = p // npface
    # npface is a power of two, so the remainder is a mask.
    local = p & (npface - 1)
    return compact_bits(local), compact_bits(local >> 1), face


@numba.njit(cache=True, fastmath=False)
def pix2vec_nest(nside, ipix):
    """Unit vector ``(x, y, z)`` (float64) of the centre of nested pixel ``ipix``.

    ``ipix`` must lie in ``[0, 12 * nside**2)``; it is not checked.
    """
    n = np.int64(nside)
    ix, iy, face = nest2xyf(n, ipix)
    # Ring number counted from the north pole, 1 .. 4*nside-1: moving along
    # either face axis steps one ring towards the pole.
    jr = _FACE_RING[face] * n - ix - iy - 1

    if jr < n:
        # North cap: ring jr holds 4*jr pixels and 1 - z = jr**2 / (3 nside**2).
        # sin(theta) comes from 1 - z directly because z is within rounding of
        # 1 at the first rings of a fine grid, where sqrt(1 - z*z) loses all
        # its digits.
        nr = jr
        q = float(nr) / float(n)
        t = q * q / 3.0
        z = 1.0 - t
        sth = math.sqrt(t * (2.0 - t))
    elif jr > 3 * n:
        nr = 4 * n - jr
        q = float(nr) / float(n)
        t = q * q / 3.0
        z = t - 1.0
        sth = math.sqrt(t * (2.0 - t))
    else:
        # Equatorial zone: rings equally spaced in z, 4*nside pixels each.
        nr = n
        z = 2.0 * (float(2 * n - jr) / float(n)) / 3.0
        sth = math.sqrt((1.0 - z) * (1.0 + z))

    # Longitude in units of pi/(4 nr): a step along +ix moves east by one
    # unit, along +iy west by one; the face centre sits at _FACE_PHI * nr.
    # In the equatorial rings the alternating half-pixel shift falls out of
    # the parity of ix - iy.
    k = _FACE_PHI[face] * nr + ix - iy
    if k < 0:
        k += 8 * nr
    elif k >= 8 * nr:
        k -= 8 * nr
    phi = _QUARTER_PI * (float(k) / float(nr))
    return sth * math.cos(phi), sth * math.sin(phi), z


@numba.njit(cache=True, fastmath=False)
def vec2pix_nest(nside, x, y, z):
    """Nested index (int64) of the pixel containing the direction ``(x, y, z)``.

    The vector need not be normalised but must be non-zero.
    """
    n = np.int64(nside)
    rho = math.sqrt(x * x + y * y)
    r = math.sqrt(rho * rho + z * z)
    zn = z / r
    za = abs(zn)
    # Longitude in quadrants, in [0, 4].
    tt = math.atan2(y, x) * _TWO_OVER_PI
    if tt < 0.0:
        tt += 4.0

    if za <= _TWO_THIRDS:
        # In u = nside (tt + 1/2) and v = (3/4) nside z the equatorial pixel
        # edges are the lines u - v = k and u + v = k for integer k, so the
        # two floors below count edge lines crossed; every nside lines a face
        # edge is crossed.
        u = n * (0.5 + tt)
        v = n * (0.75 * zn)
        jp = np.int64(math.floor(u - v))
        jm = np.int64(math.floor(u + v))
        # tt just below 4 can round up to the face corner at phi = 2 pi; the
        # exact value is below it, so keep the index inside the last face.
        jp = min(jp, 5 * n - 1)
        jm = min(jm, 5 * n - 1)
        fp = jp // n
        fm = jm // n
        if fp == fm:
            face = fp | 4  # equatorial face (fp == 4 wraps to face 4)
        elif fp < fm:
            face = fp  # north polar face
        else:
            face = fm + 8  # south polar face
        ix = jm & (n - 1)
        iy = n - (jp & (n - 1)) - 1
        return xyf2nest(n, ix, iy, face)

    # Polar caps: with tp the position inside the quadrant (0..1) and
    # s = nside * sqrt(3 (1 - |z|)) (s = ring number at ring centres), the
    # pixel edges are s * tp = k and s * (1 - tp) = k.  sqrt(3 (1 - |z|)) is
    # evaluated as sin(theta) * sqrt(3 / (1 + |z|)) so that it keeps full
    # relative precision next to the pole.
    q = min(np.int64(tt), np.int64(3))
    tp = tt - q
    s = n * (rho / r) * math.sqrt(3.0 / (1.0 + za))
    # A point on the cap boundary |z| = 2/3 has s = nside up to rounding and
    # belongs to the outermost cap ring.
    jp = min(np.int64(tp * s), n - 1)
    jm = min(np.int64((1.0 - tp) * s), n - 1)
    if zn >= 0.0:
        return xyf2nest(n, n - jm - 1, n - jp - 1, q)
    return xyf2nest(n, jp, jm, q + 8)
