"""The numba HEALPix kernels (NESTED ordering) against healpy.

Reference: healpy (https://healpy.readthedocs.io; Zonca et al. 2019, JOSS 4,
1298), the general-purpose Python HEALPix library: ``healpy.pix2vec``,
``healpy.vec2pix``, ``healpy.pix2xyf``, ``healpy.xyf2pix`` and
``healpy.get_all_neighbours`` with ``nest=True``.
"""

import healpy as hp
import numba
import numpy as np
import pytest

from rtrace.physics.ionization.healpix import (
    compact_bits,
    nest2xyf,
    nside_for_level,
    pix2vec_nest,
    spread_bits,
    vec2pix_nest,
    xyf2nest,
)

VEC2PIX_LEVELS = (0, 3, 7, 10, 13)
N_RANDOM = 200_000
# Distance (radians) from a pixel boundary within which a disagreement with
# healpy is put down to rounding rather than to a wrong pixel.
BOUNDARY_TOL = 1e-12


# Vectorising wrappers: looping in compiled code keeps 200k-point comparisons
# fast, and also exercises the kernels the way callers use them (from njit).
@numba.njit
def _pix2vec_many(nside, ipix):
    out = np.empty((ipix.size, 3))
    for i in range(ipix.size):
        x, y, z = pix2vec_nest(nside, ipix[i])
        out[i, 0] = x
        out[i, 1] = y
        out[i, 2] = z
    return out


@numba.njit
def _vec2pix_many(nside, xyz):
    out = np.empty(xyz.shape[0], dtype=np.int64)
    for i in range(xyz.shape[0]):
        out[i] = vec2pix_nest(nside, xyz[i, 0], xyz[i, 1], xyz[i, 2])
    return out


@numba.njit
def _nest2xyf_many(nside, ipix):
    out = np.empty((ipix.size, 3), dtype=np.int64)
    for i in range(ipix.size):
        ix, iy, f = nest2xyf(nside, ipix[i])
        out[i, 0] = ix
        out[i, 1] = iy
        out[i, 2] = f
    return out


@numba.njit
def _xyf2nest_many(nside, ix, iy, face):
    out = np.empty(ix.size, dtype=np.int64)
    for i in range(ix.size):
        out[i] = xyf2nest(nside, ix[i], iy[i], face[i])
    return out


def _sph(z, phi):
    z = np.asarray(z, dtype=float)
    phi = np.asarray(phi, dtype=float)
    z, phi = np.broadcast_arrays(z, phi)
    s = np.sqrt((1.0 - z) * (1.0 + z))
    return np.stack([s * np.cos(phi), s * np.sin(phi), z], axis=1)


def _special_points(nside, rng):
    """Directions on or next to the places where pixel boundaries and the
    quadrant / zone switches of the algorithm sit."""
    pts = []
    # Poles, exact and with other lengths; points a hair off the poles.
    pts.append(
        np.array(
            [
                [0.0, 0.0, 1.0],
                [0.0, 0.0, -1.0],
                [0.0, 0.0, 3.5],
                [0.0, 0.0, -1e-3],
                [-0.0, -0.0, 1.0],
                [1e-300, 0.0, 1.0],
                [0.0, -1e-300, -1.0],
                [1e-17, 1e-17, 1.0],
                [-1e-17, 1e-17, -1.0],
            ]
        )
    )
    phi_grid = np.concatenate([np.linspace(0.0, 2 * np.pi, 4097), rng.uniform(0.0, 2 * np.pi, 2000)])
    for z in (
        0.0,
        2.0 / 3.0,
        -2.0 / 3.0,
        np.nextafter(2.0 / 3.0, 1.0),
        np.nextafter(2.0 / 3.0, 0.0),
        np.nextafter(-2.0 / 3.0, -1.0),
        np.nextafter(-2.0 / 3.0, 0.0),
    ):
        pts.append(_sph(z, phi_grid))
    # The quadrant lines phi = 0, pi/2, pi, 3pi/2, exactly and just either side,
    # crossed with a z grid that includes the zone switches and the poles.
    ulp = np.spacing(2.0 / 3.0)
    near_cap = 2.0 / 3.0 + ulp * np.arange(-8, 9)
    z_grid = np.concatenate(
        [
            np.linspace(-1.0, 1.0, 2001),
            near_cap,
            -near_cap,
            [0.0],
            1.0 - np.logspace(-16, -1, 40),
            -1.0 + np.logspace(-16, -1, 40),
        ]
    )
    for k in range(4):
        base = k * np.pi / 2
        for phi in (
            base,
            np.nextafter(base, 10.0),
            np.nextafter(base, -10.0),
            base + 1e-15,
            base - 1e-15,
            base + 1e-9,
            base - 1e-9,
            base + 2 * np.pi - 1e-15,
        ):
            pts.append(_sph(z_grid, phi))
    # A lattice of floating-point neighbours of the corners where the cap edge
    # |z| = 2/3 meets a quadrant line, with phi exactly 0, pi/2 or a hair below
    # 2 pi: rounding puts some of them just inside a cap with
    # nside sqrt(3 (1 - |z|)) rounded up to nside.
    zs = 2.0 / 3.0 + np.spacing(2.0 / 3.0) * np.arange(-50, 200, 2)
    rs = np.sqrt(5.0) / 3.0 + np.spacing(np.sqrt(5.0) / 3.0) * np.arange(-50, 50, 2)
    zz, rr = (a.ravel() for a in np.meshgrid(zs, rs))
    for sign in (1.0, -1.0):
        for a, b in ((rr, 0.0 * rr), (rr, np.full_like(rr, -1e-300)), (0.0 * rr, rr)):
            pts.append(np.column_stack([a, b, sign * zz]))
    # Exact coordinate axes (zero components, signed zeros), not normalised.
    for x, y in ((1.0, 0.0), (0.0, 1.0), (-1.0, 0.0), (0.0, -1.0), (1.0, -0.0), (-1.0, -0.0), (2.0, 2.0), (-3.0, 3.0)):
        pts.append(np.column_stack([np.full(z_grid.size, x), np.full(z_grid.size, y), 5 * z_grid]))
    # Equator and z = +-2/3 at the exact longitudes of pixel corners there.
    phi_corner = np.arange(8 * nside + 1) * (np.pi / (4 * nside))
    for z in (0.0, 2 / 3, -2 / 3):
        pts.append(_sph(z, phi_corner))
    return np.concatenate(pts)


def _pixel_vertices(nside, rng, npix_sample=2000):
    pix = rng.integers(0, 12 * nside * nside, npix_sample)
    corners = hp.boundaries(nside, pix, step=1, nest=True)  # (n, 3, 4)
    corners = np.reshape(corners, (-1, 3, 4)) if corners.ndim == 3 else corners[None]
    return np.transpose(corners, (0, 2, 1)).reshape(-1, 3)


def _angle(a, b):
    """Angle between the directions of the rows of a and b (radians)."""
    a = a / np.linalg.norm(a, axis=1)[:, None]
    b = b / np.linalg.norm(b, axis=1)[:, None]
    return 2.0 * np.arcsin(np.clip(0.5 * np.linalg.norm(a - b, axis=1), 0.0, 1.0))


def _compare_vec2pix(nside, xyz):
    """vec2pix_nest against healpy.vec2pix.

    Returns ``(bad, healpy_wrong)``: the indices of the points where the
    pixels differ, and a boolean mask (over those points) of the ones where
    healpy's pixel cannot contain the point.  Every disagreement must be
    explained: healpy itself puts some direction within BOUNDARY_TOL of the
    point into our pixel, and healpy's pixel is either a neighbour of ours
    (healpy.get_all_neighbours: the point is on their shared boundary up to
    rounding) or cannot contain the point at all (index out of range, or
    centre farther away than healpy.max_pixrad).
    """
    xyz = np.ascontiguousarray(xyz, dtype=float)
    npix = 12 * nside * nside
    mine = _vec2pix_many(nside, xyz)
    ref = hp.vec2pix(nside, xyz[:, 0], xyz[:, 1], xyz[:, 2], nest=True)
    assert mine.min() >= 0 and mine.max() < npix
    max_rad = hp.max_pixrad(nside) * (1.0 + 1e-9)
    assert (_angle(xyz, _pix2vec_many(nside, mine)) <= max_rad).all()
    bad = np.flatnonzero(mine != ref)
    if bad.size == 0:
        return bad, np.zeros(0, dtype=bool)
    pts, ours, theirs = xyz[bad], mine[bad], ref[bad]

    # Probe a ring of displacements around each disputed point.
    u = pts / np.linalg.norm(pts, axis=1)[:, None]
    helper = np.where(np.abs(u[:, 2:3]) < 0.9, [[0.0, 0.0, 1.0]], [[1.0, 0.0, 0.0]])
    e1 = np.cross(u, helper)
    e1 /= np.linalg.norm(e1, axis=1)[:, None]
    e2 = np.cross(u, e1)
    ang = np.linspace(0.0, 2 * np.pi, 64, endpoint=False)
    d = np.cos(ang)[None, :, None] * e1[:, None, :] + np.sin(ang)[None, :, None] * e2[:, None, :]
    found = np.zeros(bad.size, dtype=bool)
    for eps in (BOUNDARY_TOL / 100, BOUNDARY_TOL / 10, BOUNDARY_TOL):
        probe = (u[:, None, :] + eps * d).reshape(-1, 3)
        got = hp.vec2pix(nside, probe[:, 0], probe[:, 1], probe[:, 2], nest=True).reshape(bad.size, -1)
        found |= (got == ours[:, None]).any(axis=1)
    assert found.all(), (
        f"nside={nside}: points not within {BOUNDARY_TOL} of our pixel per healpy: "
        f"{pts[~found][:5]}, ours {ours[~found][:5]}, healpy {theirs[~found][:5]}"
    )

    in_range = (theirs >= 0) & (theirs < npix)
    adjacent = np.zeros(bad.size, dtype=bool)
    adjacent[in_range] = (
        hp.get_all_neighbours(nside, theirs[in_range], nest=True).reshape(8, -1) == ours[in_range]
    ).any(axis=0)
    far = ~in_range
    far[in_range] = _angle(pts[in_range], _pix2vec_many(nside, theirs[in_range])) > max_rad
    assert (adjacent | far).all(), (
        f"nside={nside}: unexplained disagreement at {pts[~(adjacent | far)][:5]}: "
        f"ours {ours[~(adjacent | far)][:5]}, healpy {theirs[~(adjacent | far)][:5]}"
    )
    return bad, far & ~adjacent


def test_nside_for_level():
    for level in range(30):
        assert nside_for_level(level) == hp.order2nside(level)


@pytest.mark.parametrize("level", [0, 1, 2, 3, 4])
def test_pix2vec_all_pixels(level):
    nside = nside_for_level(level)
    ipix = np.arange(12 * nside * nside, dtype=np.int64)
    mine = _pix2vec_many(nside, ipix)
    ref = np.column_stack(hp.pix2vec(nside, ipix, nest=True))
    assert np.abs(mine - ref).max() < 1e-12
    assert np.abs(np.linalg.norm(mine, axis=1) - 1.0).max() < 1e-15


@pytest.mark.parametrize("level", [7, 10, 13])
def test_pix2vec_deep_levels(level, rng):
    # Random pixels plus the first and last pixels of every face (the face
    # corners, including the rings next to the poles).
    nside = nside_for_level(level)
    npface = nside * nside
    ends = np.concatenate([f * npface + np.r_[0:64, npface - 64 : npface] for f in range(12)])
    ipix = np.concatenate([rng.integers(0, 12 * npface, 50_000), ends]).astype(np.int64)
    mine = _pix2vec_many(nside, ipix)
    ref = np.column_stack(hp.pix2vec(nside, ipix, nest=True))
    assert np.abs(mine - ref).max() < 1e-12
    assert np.abs(np.linalg.norm(mine, axis=1) - 1.0).max() < 1e-15


def test_pix2vec_pole_precision():
    # The pixels touching the poles at nside = 2**13: sin(theta) ~ 1e-4 there,
    # and the transverse components must keep their relative precision
    # (sqrt(1 - z*z) would lose ~8 digits).
    nside = nside_for_level(13)
    npface = nside * nside
    ipix = np.array([f * npface + npface - 1 for f in range(4)] + [f * npface for f in range(8, 12)], dtype=np.int64)
    mine = _pix2vec_many(nside, ipix)
    ref = np.column_stack(hp.pix2vec(nside, ipix, nest=True))
    # All eight lie on the rings next to the poles; healpy's theta is exact to
    # rounding only at the north pole (pi - theta loses digits), and the two
    # rings are mirror images.
    theta_north = hp.pix2ang(nside, ipix[:4], nest=True)[0]
    assert np.ptp(theta_north) == 0.0
    sth_ref = np.sin(theta_north[0])
    rho = np.hypot(mine[:, 0], mine[:, 1])
    assert np.abs(rho / sth_ref - 1.0).max() < 1e-14
    assert np.abs(mine[:, :2] / ref[:, :2] - 1.0).max() < 1e-14


@pytest.mark.parametrize("level", VEC2PIX_LEVELS)
def test_vec2pix_matches_healpy(level, rng):
    nside = nside_for_level(level)
    v = rng.normal(size=(N_RANDOM, 3))
    v /= np.linalg.norm(v, axis=1)[:, None]
    # Non-normalised copies of a tenth of them.
    scaled = v[: N_RANDOM // 10] * rng.uniform(1e-3, 1e3, N_RANDOM // 10)[:, None]
    bad, _ = _compare_vec2pix(nside, np.concatenate([v, scaled]))
    # Random points essentially never sit within rounding of a boundary.
    assert bad.size <= 2

    special = _special_points(nside, rng)
    bad, healpy_wrong = _compare_vec2pix(nside, special)
    # healpy (1.20) returns a distant pixel, or an index past 12 nside**2, for
    # a point on |z| = 2/3 a hair west of phi = 0 (phi*2/pi + 4 rounding
    # against the last face); that is the only place it is allowed to be wrong.
    z_over_r = special[:, 2] / np.linalg.norm(special, axis=1)
    phi = np.arctan2(special[:, 1], special[:, 0])
    wrong = bad[healpy_wrong]
    assert (np.abs(np.abs(z_over_r[wrong]) - 2.0 / 3.0) < 1e-15).all()
    assert ((phi[wrong] < 0.0) & (phi[wrong] > -1e-12)).all()

    _, healpy_wrong = _compare_vec2pix(nside, _pixel_vertices(nside, rng))
    assert not healpy_wrong.any()

    # Pixel centres: interior points, so exact agreement and the round trip.
    npix = 12 * nside * nside
    ipix = (np.arange(npix) if npix <= 200_000 else rng.integers(0, npix, 200_000)).astype(np.int64)
    centres = _pix2vec_many(nside, ipix)
    assert _compare_vec2pix(nside, centres)[0].size == 0
    assert np.array_equal(_vec2pix_many(nside, centres), ipix)


def test_round_trip_level6():
    nside = nside_for_level(6)
    ipix = np.arange(12 * nside * nside, dtype=np.int64)
    assert np.array_equal(_vec2pix_many(nside, _pix2vec_many(nside, ipix)), ipix)


@pytest.mark.parametrize("level", range(13))
def test_children_nest_in_parent(level, rng):
    nside = nside_for_level(level)
    nchild = 12 * (2 * nside) ** 2
    child = (np.arange(nchild) if nchild <= 50_000 else rng.integers(0, nchild, 50_000)).astype(np.int64)
    centres = _pix2vec_many(2 * nside, child)
    parent = _vec2pix_many(nside, centres)
    assert np.array_equal(parent, child // 4)
    # External check that the nested numbering is healpy's.
    assert np.array_equal(hp.vec2pix(nside, *centres.T, nest=True), child // 4)
    # Descendants three levels down form the range [4**3 p, 4**3 (p + 1)).
    if level <= 10:
        deep = rng.integers(0, 12 * (8 * nside) ** 2, 20_000).astype(np.int64)
        assert np.array_equal(_vec2pix_many(nside, _pix2vec_many(8 * nside, deep)), deep >> 6)


@pytest.mark.parametrize("level", [0, 5, 13, 20, 29])
def test_face_coordinates(level, rng):
    nside = nside_for_level(level)
    n = 20_000
    ix = np.concatenate([rng.integers(0, nside, n), [0, nside - 1, 0, nside - 1]]).astype(np.int64)
    iy = np.concatenate([rng.integers(0, nside, n), [0, 0, nside - 1, nside - 1]]).astype(np.int64)
    face = np.concatenate([rng.integers(0, 12, n), [0, 5, 11, 11]]).astype(np.int64)
    ipix = _xyf2nest_many(nside, ix, iy, face)
    assert np.array_equal(ipix, hp.xyf2pix(nside, ix, iy, face, nest=True))
    back = _nest2xyf_many(nside, ipix)
    ref = np.column_stack(hp.pix2xyf(nside, ipix, nest=True))
    assert np.array_equal(back, ref)
    assert np.array_equal(back, np.column_stack([ix, iy, face]))
    if level == 29:
        assert ipix.max() > 2**61  # genuinely needs 64-bit arithmetic


def test_bit_helpers():
    # Against the definition of bit interleaving, evaluated bit by bit in
    # Python integers (healpy's face coordinates are checked above).
    rng = np.random.default_rng(7)
    for v in np.concatenate([rng.integers(0, 2**32, 2000), [0, 1, 2**31, 2**32 - 1]]):
        v = int(v)
        expect = sum(((v >> k) & 1) << (2 * k) for k in range(32))
        assert spread_bits(v) == expect
        assert compact_bits(expect) == v
        # Odd bits are ignored (a nested index holds iy there).
        assert compact_bits(expect | ((expect << 1) & (2**63 - 1))) == v
