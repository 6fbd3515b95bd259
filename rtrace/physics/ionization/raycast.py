"""numba kernels that cast rays from a point source and pay for the recombinations they meet.

A source's sphere of directions is divided into HEALPix pixels (Górski et
al. 2005), one ray per pixel, each carrying an equal share of the photon
rate. Rays start at a coarse level and split into their four nested children
whenever the ray spacing ``r sqrt(dOmega)`` exceeds a chosen fraction of a
cell (the adaptive ray tree of Abel & Wandelt 2002), so every cell is
crossed by several rays at any distance. A ray crosses cells exactly
(Amanatides & Woo 1987); the part of its cone between radii ``r1`` and
``r2`` has the volume ``dOmega (r2^3 - r1^3) / 3``.

The rays sample each cell with the volumes of the cone segments whose
centre lines cross it; their sum ``W`` is close to the cell's volume but not
equal to it. So that photons and recombinations are counted alike, a source
is cast in two passes over the same ray tree (the splits depend only on the
distance from the source, never on the gas):

1. ``MEASURE``: every ray runs to a given radius and adds its segment
   volumes to ``W`` of the cells it crosses.
2. ``PAY``: every ray pays, for each segment, the cell's unpaid
   recombinations in proportion to its share of ``W``: a cell whose
   recombinations per second are ``R`` costs a segment of volume ``v``
   ``R v / W`` photons per second. A cell that all its rays cross with
   photons to spare is thus paid exactly ``R``; where a ray's photons run
   out, the segment is paid in part and the ray stops. The paid share of
   each cell, ``sum(paid v) / W``, is its photoionized volume fraction, and
   the recombinations it implies equal the photons absorbed, to rounding.

A first, sparser ``PAY`` pass with ``W`` taken as the cell volume finds how
far each ray reaches; each ray of the ``MEASURE`` pass then runs a little
farther than that (and any ray of the second ``PAY`` pass that still has
photons where its measurement ended makes the two passes run again,
farther). Photons are conserved ray by ray: nothing is created or lost at a
split.
"""

import numba
import numpy as np

from .healpix import pix2vec_nest

__all__ = ["cast_source", "limit_pyramid", "add_paid_share", "sum_threads", "box_cost", "MAX_LEVEL", "PAY", "MEASURE"]

#: Finest HEALPix level of the ray tree: 12 * 4^10 = 12.6 million rays, spaced
#: 1e-3 rad apart (0.5 cell at 500 cells from the source).
MAX_LEVEL = 10
#: Pass kinds.
PAY, MEASURE = 0, 1

_FRONT, _ESCAPE, _REACHED, _SPLIT, _MISS = 0, 1, 2, 3, 4


@numba.njit(cache=True)
def _slab(s, d, lo, hi, t_in, t_out):
    """Narrow ``(t_in, t_out)`` to where ``s + t d`` lies in ``[lo, hi)`` on one axis."""
    if d == 0.0:
        if s < lo or s >= hi:
            return 1.0, 0.0
        return t_in, t_out
    a = (lo - s) / d
    b = (hi - s) / d
    if a > b:
        a, b = b, a
    return max(t_in, a), min(t_out, b)


@numba.njit(cache=True)
def _box_entry(S, d, lo, hi, t_from):
    """Ray parameters ``(t_in, t_out)``, ``t_in >= t_from``, where ``S + t d`` is inside the box.

    ``t_in > t_out`` means the ray misses the box after ``t_from``.
    """
    t_in, t_out = _slab(S[0], d[0], lo[0], hi[0], t_from, np.inf)
    t_in, t_out = _slab(S[1], d[1], lo[1], hi[1], t_in, t_out)
    return _slab(S[2], d[2], lo[2], hi[2], t_in, t_out)


@numba.njit(cache=True)
def _cell_of(p, origin, cell, n):
    i = int(np.floor((p - origin) / cell))
    return min(max(i, 0), n - 1)


@numba.njit(cache=True)
def _next_boundary(s, d, origin, cell, i):
    """Ray parameter of the next cell boundary on one axis, its spacing and the index step."""
    if d > 0.0:
        return (origin + (i + 1) * cell - s) / d, cell / d, 1
    if d < 0.0:
        return (origin + i * cell - s) / d, -cell / d, -1
    return np.inf, np.inf, 0


@numba.njit(cache=True)
def _march(
    demand,
    paid,
    cost,
    use_cost,
    scale,
    acc,
    tid,
    lo,
    origin,
    cell,
    hi_corner,
    S,
    d,
    r,
    photons,
    domega,
    level,
    max_level,
    split_area,
    r_stop,
    mode,
):
    """Follow one ray from radius ``r``; returns ``(status, r_end, photons_left, absorbed)``.

    Status: 0 its photons ran out at ``r_end`` (``PAY``); 1 it left (or never
    reaches) the grid; 2 it reached ``r_stop``; 3 it must split at ``r_end``.
    ``photons`` are in units of the source's rate. In ``PAY`` a segment of
    cell c costs ``cost[c] scale v`` when ``use_cost`` (``cost = demand
    (1 - paid) / W`` over the box), else ``demand[c] (1 - paid[c]) scale v``
    (the cell volume standing in for ``W``); the paid volume goes to
    ``acc[tid]`` when ``acc`` has cells. In ``MEASURE`` the segment volume
    goes there. Volumes are in units of the cell volume; ``acc`` and
    ``cost`` are indexed from the box corner ``lo``.
    """
    nx, ny, nz = demand.shape
    if level < max_level and domega * r * r > split_area:
        return _SPLIT, r, photons, 0.0
    t_in, t_out = _box_entry(S, d, origin, hi_corner, r)
    if t_in > t_out or t_out <= r:
        return _ESCAPE, r, photons, 0.0
    if t_in > r:
        r = t_in
        if level < max_level and domega * r * r > split_area:
            return _SPLIT, r, photons, 0.0
    if r >= r_stop:
        return _REACHED, r, photons, 0.0
    i = _cell_of(S[0] + r * d[0], origin[0], cell[0], nx)
    j = _cell_of(S[1] + r * d[1], origin[1], cell[1], ny)
    k = _cell_of(S[2] + r * d[2], origin[2], cell[2], nz)
    # Amanatides & Woo (1987): ray parameter of the next boundary on each axis, spacing and step.
    tx, dtx, sx = _next_boundary(S[0], d[0], origin[0], cell[0], i)
    ty, dty, sy = _next_boundary(S[1], d[1], origin[1], cell[1], j)
    tz, dtz, sz = _next_boundary(S[2], d[2], origin[2], cell[2], k)
    third = domega / (3.0 * cell[0] * cell[1] * cell[2])  # cone volume in cell volumes, per r^3
    record = acc.shape[1] > 0
    absorbed = 0.0
    while True:
        if level < max_level and domega * r * r > split_area:
            return _SPLIT, r, photons, absorbed
        r_next = min(tx, ty, tz, r_stop)
        if r_next < r:
            r_next = r
        v = third * (r_next - r) * (r_next * r_next + r_next * r + r * r)
        if mode == MEASURE:
            acc[tid, i - lo[0], j - lo[1], k - lo[2]] += v
        else:
            if use_cost:
                rate = cost[i - lo[0], j - lo[1], k - lo[2]] * scale
            else:
                rate = demand[i, j, k] * (1.0 - paid[i, j, k]) * scale
            if rate > 0.0:
                need = rate * v
                if need >= photons:
                    part = photons / rate
                    if record:
                        acc[tid, i - lo[0], j - lo[1], k - lo[2]] += part
                    r_front = (r * r * r + part / third) ** (1.0 / 3.0)
                    return _FRONT, min(r_front, r_next), 0.0, absorbed + photons
                photons -= need
                absorbed += need
            if record:
                acc[tid, i - lo[0], j - lo[1], k - lo[2]] += v
        r = r_next
        if r >= r_stop:
            return _REACHED, r, photons, absorbed
        if tx <= ty and tx <= tz:
            tx += dtx
            i += sx
            if i < 0 or i >= nx:
                return _ESCAPE, r, photons, absorbed
        elif ty <= tz:
            ty += dty
            j += sy
            if j < 0 or j >= ny:
                return _ESCAPE, r, photons, absorbed
        else:
            tz += dtz
            k += sz
            if k < 0 or k >= nz:
                return _ESCAPE, r, photons, absorbed


@numba.njit(cache=True, parallel=True)
def cast_source(
    demand,
    paid,
    cost,
    use_cost,
    scale,
    acc,
    lo,
    origin,
    cell,
    S,
    root_level,
    max_level,
    split_area,
    inside,
    order,
    limits,
    use_limits,
    mode,
    ends,
    stats,
):
    """Cast the ray tree of one source (one pass, see the module notes).

    Parameters
    ----------
    demand : ndarray (nx, ny, nz) float32
        Recombinations per second and cell if the cell were fully photoionized.
    paid : ndarray (nx, ny, nz) float32
        Share of ``demand`` already paid by other sources (0..1).
    cost : ndarray float32
        ``demand (1 - paid) / W`` over the box from ``lo`` (``W`` the volume the
        rays sample in each cell, in cell volumes); used when ``use_cost``.
    scale : float
        1 / the source's photon rate (photons are counted in units of it).
    acc : ndarray (threads, bx, by, bz) float32
        Per-thread sums of paid (``PAY``) or crossed (``MEASURE``) volume for the
        box from ``lo``; a zero-size box records nothing.
    origin, cell, S : ndarray (3,) float64
        Grid lower corner, cell size and source position [cm].
    root_level, max_level : int
        HEALPix levels of the first rays and the finest rays.
    split_area : float
        Rays split where ``dOmega r^2`` exceeds this area [cm^2].
    inside : bool
        The source lies inside the grid.
    order : ndarray int64
        A permutation of the root pixels (balances the threads' work).
    limits : ndarray float32
        With ``use_limits``, the distance [cm] at which each ray stops, for every
        pixel of every level: level ``l`` from index ``12 (4^l - 1) / 3`` (see
        :func:`limit_pyramid`); otherwise rays never stop short.
    mode : int
        ``PAY`` or ``MEASURE``.
    ends : ndarray (12 4^max_level,) float32
        Output: where each finest-level pixel's ray ended [cm]: at its front;
        inf if it left the grid with photons; NaN if it reached its limit with
        photons left (``PAY``); 0 if it never reached the grid.
    stats : ndarray (n_roots, 4) float64
        Output per root, in units of the source's rate: photons absorbed,
        escaped through the grid boundary, never reaching the grid (outside
        sources), left at the limits.
    """
    n_roots = order.size
    lo_corner = origin
    hi_corner = origin + cell * np.asarray(demand.shape, np.float64)
    centre = 0.5 * (lo_corner + hi_corner)
    box_radius = 0.5 * np.sqrt(np.sum((hi_corner - lo_corner) ** 2))
    to_centre = centre - S
    dist_centre = np.sqrt(np.sum(to_centre**2))
    depth = 3 * (max_level - root_level) + 4
    for n in numba.prange(n_roots):
        tid = numba.get_thread_id()
        root = order[n]
        stack_level = np.empty(depth, np.int64)
        stack_pix = np.empty(depth, np.int64)
        stack_r = np.empty(depth, np.float64)
        stack_photons = np.empty(depth, np.float64)
        stack_level[0] = root_level
        stack_pix[0] = root
        stack_r[0] = 0.0
        stack_photons[0] = 1.0 / (12.0 * 4.0**root_level)
        top = 1
        d = np.empty(3)
        while top > 0:
            top -= 1
            level = stack_level[top]
            pix = stack_pix[top]
            r = stack_r[top]
            photons = stack_photons[top]
            nside = np.int64(1) << level
            domega = 4.0 * np.pi / (12.0 * nside * nside)
            d[0], d[1], d[2] = pix2vec_nest(nside, pix)
            r_stop = np.inf
            if use_limits:
                r_stop = np.float64(limits[4 * (nside * nside - 1) + pix])  # 12 (4^l - 1) / 3 + pix
            absorbed = 0.0
            r_end = r
            if not inside and r == 0.0:
                t_in, t_out = _box_entry(S, d, lo_corner, hi_corner, 0.0)
                if t_in > t_out:
                    # the centre line misses the box; the cone around it may still touch it
                    cos_sep = (d[0] * to_centre[0] + d[1] * to_centre[1] + d[2] * to_centre[2]) / dist_centre
                    sep = np.arccos(min(1.0, max(-1.0, cos_sep)))
                    reach = np.arcsin(min(1.0, box_radius / dist_centre)) + 2.0 * np.sqrt(domega)
                    status = _SPLIT if (sep <= reach and level < max_level) else _MISS
                elif level < max_level and domega * t_in * t_in > split_area:
                    status = _SPLIT  # children start at the source too: nothing is absorbed on the way
                else:
                    status, r_end, photons, absorbed = _march(
                        demand,
                        paid,
                        cost,
                        use_cost,
                        scale,
                        acc,
                        tid,
                        lo,
                        origin,
                        cell,
                        hi_corner,
                        S,
                        d,
                        r,
                        photons,
                        domega,
                        level,
                        max_level,
                        split_area,
                        r_stop,
                        mode,
                    )
            else:
                status, r_end, photons, absorbed = _march(
                    demand,
                    paid,
                    cost,
                    use_cost,
                    scale,
                    acc,
                    tid,
                    lo,
                    origin,
                    cell,
                    hi_corner,
                    S,
                    d,
                    r,
                    photons,
                    domega,
                    level,
                    max_level,
                    split_area,
                    r_stop,
                    mode,
                )
            stats[n, 0] += absorbed
            if status == _SPLIT:
                for c in range(4):
                    stack_level[top] = level + 1
                    stack_pix[top] = 4 * pix + c
                    stack_r[top] = r_end
                    stack_photons[top] = 0.25 * photons
                    top += 1
                continue
            end = r_end
            if status == _ESCAPE:
                stats[n, 1] += photons
                end = np.inf if photons > 0.0 else r_end
            elif status == _MISS:
                stats[n, 2] += photons
                end = 0.0
            elif status == _REACHED:
                stats[n, 3] += photons
                end = np.nan if (photons > 0.0 and mode == PAY) else r_end
            span = np.int64(1) << (2 * (max_level - level))
            for q in range(pix * span, (pix + 1) * span):
                ends[q] = end


def limit_pyramid(finest, max_level):
    """Every level's stop distances from the finest level's: a ray stops where its farthest descendant does.

    Returns a flat float32 array, level ``l`` at index ``12 (4^l - 1) / 3``.
    """
    out = np.empty(4 * (4 ** (max_level + 1) - 1), np.float32)
    _fill_pyramid(np.asarray(finest, np.float32), max_level, out)
    return out


@numba.njit(cache=True)
def _fill_pyramid(finest, max_level, out):
    top = 4 * (4**max_level - 1)
    out[top : top + finest.size] = finest
    for level in range(max_level - 1, -1, -1):
        start, child = 4 * (4**level - 1), 4 * (4 ** (level + 1) - 1)
        for p in range(12 * 4**level):
            c = child + 4 * p
            out[start + p] = max(out[c], out[c + 1], out[c + 2], out[c + 3])


@numba.njit(cache=True, parallel=True)
def add_paid_share(paid_volume, weight, lo, demand, paid, assigned):
    """``paid <- 1 - (1 - paid)(1 - f)`` with ``f = paid_volume / W`` in the box from ``lo``.

    ``assigned[a]`` receives the recombinations per second (per unit of the
    rate scale used for ``demand``) that the change of ``paid`` implies in
    slab ``lo[0] + a``: ``demand (1 - paid_before) f``, the counterpart of
    the photons the rays absorbed there.
    """
    n0, n1, n2 = paid_volume.shape
    for a in numba.prange(n0):
        total = 0.0
        for b in range(n1):
            for c in range(n2):
                w = weight[a, b, c]
                v = paid_volume[a, b, c]
                if w > 0.0 and v > 0.0:
                    f = min(1.0, v / w)
                    i, j, k = lo[0] + a, lo[1] + b, lo[2] + c
                    before = np.float64(paid[i, j, k])
                    paid[i, j, k] = 1.0 - (1.0 - before) * (1.0 - f)
                    total += np.float64(demand[i, j, k]) * (1.0 - before) * f
        assigned[a] = total


@numba.njit(cache=True, parallel=True)
def sum_threads(acc, out):
    """``out = acc.sum(axis=0)`` (the threads' partial sums) and ``acc = 0``, in parallel over slabs."""
    n_threads, n0, n1, n2 = acc.shape
    for a in numba.prange(n0):
        for b in range(n1):
            for c in range(n2):
                total = np.float32(0.0)
                for t in range(n_threads):
                    total += acc[t, a, b, c]
                    acc[t, a, b, c] = 0.0
                out[a, b, c] = total


@numba.njit(cache=True, parallel=True)
def box_cost(demand, paid, weight, lo, out):
    """``out = demand (1 - paid) / W`` over the box from ``lo`` (0 where no ray samples a cell)."""
    n0, n1, n2 = weight.shape
    for a in numba.prange(n0):
        for b in range(n1):
            for c in range(n2):
                w = weight[a, b, c]
                i, j, k = lo[0] + a, lo[1] + b, lo[2] + c
                out[a, b, c] = demand[i, j, k] * (1.0 - paid[i, j, k]) / w if w > 0.0 else 0.0
