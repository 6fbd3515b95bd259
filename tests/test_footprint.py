"""The exact cell-to-pixel footprint projector (rtrace.transfer.footprint) against independent references.

References written here in numpy share no code with the projector:

* the footprint kernel ``K`` of one cell and one pixel, integrated over the
  pixel with chord lengths from the slab method (Kay & Kajiya 1986, "Ray
  tracing complex scenes", SIGGRAPH 20, 269, from memory): along each of
  many rows of the pixel the chord length is ``max(0, min(upper) -
  max(lower))`` of the slab bounds, piecewise linear in the position along
  the row, and is integrated exactly between its break points; the rows are
  summed with the midpoint rule (common practice);
* images of ``int q dl`` as the mean over N x N parallel sub-rays per pixel,
  each cut at its exact crossings of the cell faces (slab method; the cell
  sequence along a ray as in Amanatides & Woo 1987, Eurographics '87, 3,
  from memory).
"""

import astropy.units as u
import numpy as np
import pytest

import rtrace
from rtrace.errors import InputError
from rtrace.physics.freefree import absorption_cgs
from rtrace.transfer.footprint import Footprint, project_blocks, project_cells
from rtrace.transfer.tracer import FrequencyTables, _ObliqueRoute

PC = 3.0856775814913673e18  # cm (IAU 2015 B2 parsec, common practice)
CELL = 0.01 * PC

# (los, north): generic ones; los in a coordinate plane with north along a grid axis (faces seen edge-on,
# shadow edges parallel to pixel edges); north along a grid axis; nearly in a coordinate plane.
DIRECTIONS = [
    ((1.0, 2.0, 3.0), (0.3, -0.9, 0.2)),
    ((-0.35, 0.8, 0.52), (0.7, 0.1, 0.6)),
    ((1.0, 2.0, 0.0), (0.0, 0.0, 1.0)),
    ((1.0, 0.0, 3.0), (0.0, 1.0, 0.0)),
    ((1.0, 1.0, 1.0), (0.0, 0.0, 1.0)),
    ((0.02, 1.0, 0.5), (0.0, 0.0, 1.0)),
    ((1.0, 2.0, 3e-4), (0.0, 0.0, 1.0)),
]


def _route(los, north, pix_cells, cell=(1.0, 1.0, 1.0), n=12, npix=16, nu=1e10, fields=None):
    cell = np.asarray(cell, float) * CELL
    if fields is None:
        ne = np.ones((n, n, n))
        t = np.full((n, n, n), 1e4)
    else:
        ne, t = fields
    snap = rtrace.Snapshot.from_arrays(
        temperature=t * u.K,
        cell_size=cell * u.cm,
        electron_density=ne * u.cm**-3,
        ion_density=ne * u.cm**-3,
        dtype=np.float64,
    )
    view = rtrace.View(los=los, north=north, npix=npix, width=npix * pix_cells * CELL * u.cm, distance=1 * u.kpc)
    center, pix = view.resolve(snap)
    return snap, view, _ObliqueRoute(snap, view, center, pix, FrequencyTables(np.array([nu])), 1), center, pix


def _brute_kernel(fp, dx, dy, nrow=4000):
    """K(dx, dy) (cm): chord lengths by slabs, exact along one pixel axis, ``nrow`` midpoint rows across."""
    ga, gb, gc = fp.g_a.copy(), fp.g_b.copy(), fp.g_c.copy()
    ginv = np.linalg.inv(np.column_stack([ga, gb]))
    r = -ginv @ gc  # depth drift of (alpha, beta) per unit depth
    # integrate exactly along the axis across which a face seen edge-on (a jump of the chord) runs
    jump = gb if abs(r[0]) < abs(r[1]) else ga  # the face nearest edge-on runs along this
    if abs(jump[0]) > abs(jump[1]):
        ga, gb, gc = ga[::-1], gb[::-1], gc[::-1]
        dx, dy = dy, dx
        ginv = np.linalg.inv(np.column_stack([ga, gb]))
    # rows only where the shadow can be: y in [dy + min, dy + max] of its corners, within the pixel
    corners = np.array([i * ga + j * gb + k * gc for i in (0, 1) for j in (0, 1) for k in (0, 1)])
    ya, yb = max(0.0, dy + corners[:, 1].min()), min(1.0, dy + corners[:, 1].max())
    if yb <= ya:
        return 0.0
    y = ya + (yb - ya) * (np.arange(nrow) + 0.5) / nrow
    # (alpha, beta) = ginv @ (x - dx, y - dy): slope in x, intercept per row
    slope = ginv[:, 0]
    icpt = ginv[:, 0:1] * (-dx) + ginv[:, 1:2] * (y[None, :] - dy)  # (2, nrow)
    lower = [(np.zeros(nrow), np.zeros(nrow))]  # (slope, intercept) of bounds on the depth t
    upper = [(np.zeros(nrow), np.ones(nrow))]
    x0, x1 = np.zeros(nrow), np.ones(nrow)
    for k in range(2):
        s, c = np.full(nrow, slope[k]), icpt[k]
        if abs(r[k]) < 1e-12:  # slab parallel to the rays: 0 <= alpha <= 1 limits x
            if s[0] == 0.0:
                bad = (c < 0) | (c > 1)
                x1 = np.where(bad, x0, x1)
            else:
                a, b = -c / s, (1 - c) / s
                x0, x1 = np.maximum(x0, np.minimum(a, b)), np.minimum(x1, np.maximum(a, b))
            continue
        lo, hi = (-s / r[k], -c / r[k]), (-s / r[k], (1 - c) / r[k])
        if r[k] < 0:
            lo, hi = hi, lo
        lower.append(lo)
        upper.append(hi)
    x1 = np.maximum(x1, x0)
    funcs = lower + upper
    brk = [x0, x1]
    for i in range(len(funcs)):
        for j in range(i + 1, len(funcs)):
            ds = funcs[i][0] - funcs[j][0]
            with np.errstate(divide="ignore", invalid="ignore"):
                brk.append(np.where(ds != 0, (funcs[j][1] - funcs[i][1]) / np.where(ds != 0, ds, 1), x0))
    xs = np.sort(np.clip(np.stack(brk, axis=1), x0[:, None], x1[:, None]), axis=1)
    top = np.min([s[:, None] * xs + c[:, None] for s, c in upper], axis=0)
    bot = np.max([s[:, None] * xs + c[:, None] for s, c in lower], axis=0)
    chord = np.maximum(top - bot, 0.0)
    per_row = np.sum(0.5 * (chord[:, 1:] + chord[:, :-1]) * np.diff(xs, axis=1), axis=1)
    return fp.lscale * per_row.mean() * (yb - ya)


def test_kernel_in_a_coordinate_plane_with_oblique_north():
    # the known hard case: a face seen exactly edge-on whose shadow edges are oblique to the pixels; K has
    # steep second derivatives along those edges. Pixels of 0.5-8 cells reach 1e-4; pixels of 0.1 cell
    # stop at the node budget a little short of it (reported in Footprint.accuracy)
    rng = np.random.default_rng(12)
    los, north = (1.0, 2.0, 0.0), (0.3, 0.1, 1.0)
    for pix_cells, cell, limit in [
        (0.1, (1.0, 1.0, 1.0), 4e-4),
        (0.5, (1.0, 2.0, 0.5), 1e-4),
        (1.6, (1.0, 1.0, 1.0), 1e-4),
        (8.0, (1.0, 2.0, 0.5), 1e-4),
    ]:
        fp = Footprint.from_route(_route(los, north, pix_cells, cell=cell)[2])
        (x0, x1), (y0, y1) = fp.support
        dx, dy = rng.uniform(x0, x1, 12), rng.uniform(y0, y1, 12)
        ref = np.array([_brute_kernel(fp, a, b) for a, b in zip(dx, dy, strict=True)])
        assert np.max(np.abs(fp.exact(dx, dy) - ref)) <= 2e-6 * fp.kmax
        assert np.max(np.abs(fp(dx, dy) - ref)) <= limit * fp.kmax, pix_cells
        assert fp.accuracy <= limit, (pix_cells, fp.accuracy)


def test_shadow_corner_matches_the_view_projection():
    # d = q0 + ia g_a + ib g_b + ic g_c is where the cell corner projects: (col, row) = rel . (west, north) / pix
    # + (nx/2, ny/2) (the View's sky convention, DESIGN.md)
    for los, north in DIRECTIONS[:4]:
        snap, view, route, center, pix = _route(los, north, 1.6, cell=(1.0, 2.0, 0.5))
        fp = Footprint.from_route(route)
        cell = np.asarray(snap.cell_size, float)
        for idx in ([0, 0, 0], [3, 7, 11], [11, 0, 5]):
            point = np.asarray(snap.origin, float) + np.asarray(idx) * cell - center
            expect = [point @ view.west / pix + view.shape[1] / 2, point @ view.north / pix + view.shape[0] / 2]
            abc = np.asarray(idx)[route.order]
            d = fp.q0 + abc[0] * fp.g_a + abc[1] * fp.g_b + abc[2] * fp.g_c
            assert d == pytest.approx(expect, abs=1e-9)


@pytest.mark.parametrize("los,north", DIRECTIONS)
def test_kernel_sums_to_the_cell_volume_over_the_pixel_area(los, north):
    # sum over pixels of K = int L dA / A_pix = V / A_pix (the chord integrated over the image is the
    # volume; common practice); in shadow units |det(g_a, g_b)| dc / |l_c|, since |det(e1, e2)| =
    # h_a h_b |l_c| / pix^2
    for pix_cells, cell in [(0.5, (1.0, 1.0, 1.0)), (1.6, (1.0, 2.0, 0.5)), (8.0, (2.0, 1.0, 1.0))]:
        snap, view, route, center, pix = _route(los, north, pix_cells, cell=cell)
        fp = Footprint.from_route(route)
        volume = np.prod(np.asarray(snap.cell_size, float))
        assert fp.total() == pytest.approx(volume / pix**2, rel=1e-12)
        (x0, x1), (y0, y1) = fp.support
        rng = np.random.default_rng(5)
        for dx, dy in rng.uniform(0, 1, (3, 2)):
            cols = np.arange(np.floor(dx - x1) - 1, np.ceil(dx - x0) + 2)
            rows = np.arange(np.floor(dy - y1) - 1, np.ceil(dy - y0) + 2)
            ox, oy = np.meshgrid(dx - cols, dy - rows)
            assert fp.exact(ox, oy).sum() == pytest.approx(volume / pix**2, rel=1e-12)
            assert fp(ox, oy).sum() == pytest.approx(volume / pix**2, rel=1e-4)


@pytest.mark.parametrize("los,north", DIRECTIONS)
def test_kernel_against_brute_force(los, north):
    # K interpolated from the table, and the exact evaluation, against the slab reference at random offsets
    rng = np.random.default_rng(11)
    worst = []
    for pix_cells, cell in [
        (0.1, (1.0, 2.0, 0.5)),
        (0.5, (1.0, 1.0, 1.0)),
        (1.6, (1.0, 2.0, 0.5)),
        (8.0, (1.0, 1.0, 1.0)),
        (8.0, (0.5, 1.0, 2.0)),
    ]:
        fp = Footprint.from_route(_route(los, north, pix_cells, cell=cell)[2])
        (x0, x1), (y0, y1) = fp.support
        # offsets spread over the support, plus the table's worst places: its kinks, where it changes most
        offsets = list(zip(rng.uniform(x0, x1, 12), rng.uniform(y0, y1, 12), strict=True))
        ref = np.array([_brute_kernel(fp, dx, dy) for dx, dy in offsets])
        dx, dy = np.array(offsets).T
        kmax = fp.kmax
        assert np.max(np.abs(fp.exact(dx, dy) - ref)) <= 2e-6 * kmax, (pix_cells, cell)
        err = np.max(np.abs(fp(dx, dy) - ref)) / kmax
        assert err <= 1e-4, (pix_cells, cell, err)
        assert fp.accuracy <= 1e-4, (pix_cells, cell, fp.accuracy)
        worst.append(max(err, fp.accuracy))
    print(f"los={los} north={north}: largest |K - K_ref| / max K = {max(worst):.2e}")


# -- images of a random grid against brute-force sub-rays -------------------------------------------


def _grid(n=12, seed=3):
    """Lognormal n_e (sigma = 1 in ln n_e) with cell-to-cell structure, T uniform in 5e3 .. 2e4 K."""
    rng = np.random.default_rng(seed)
    return 1e3 * np.exp(rng.normal(0.0, 1.0, (n, n, n))), rng.uniform(5e3, 2e4, (n, n, n))


def _reference(qs, los, north, npix, pix, nsub, window=None, chunk=40000):
    """Pixel means of int q dl for each q in ``qs`` (nq, n, n, n): nsub x nsub exact sub-rays per pixel.

    ``window`` = (row0, col0, size): only those size x size pixels of the npix x npix image.
    """
    shape = np.array(qs.shape[1:])
    size = shape * CELL
    los = np.asarray(los, float) / np.linalg.norm(los)
    north = np.asarray(north, float)
    north = north - north @ los * los
    north /= np.linalg.norm(north)
    west = np.cross(north, los)
    r0, c0, size_w = window if window is not None else (0, 0, npix)
    sub = (np.arange(size_w * nsub) + 0.5) / nsub - npix / 2
    rows, cols = np.meshgrid(sub + r0, sub + c0, indexing="ij")
    points = size / 2 + (cols.ravel()[:, None] * west + rows.ravel()[:, None] * north) * pix
    flat_q = qs.reshape(len(qs), -1)
    out = np.empty((len(qs), len(points)))
    for s0 in range(0, len(points), chunk):
        p = points[s0 : s0 + chunk]
        ts, t_in, t_out = [], np.full(len(p), -np.inf), np.full(len(p), np.inf)
        for k in range(3):
            if los[k] == 0.0:
                inside = (p[:, k] >= 0) & (p[:, k] <= size[k])
                t_out = np.where(inside, t_out, -np.inf)
                continue
            planes = (np.arange(shape[k] + 1) * CELL - p[:, k : k + 1]) / los[k]
            ts.append(planes)
            t_in = np.maximum(t_in, planes.min(axis=1))
            t_out = np.minimum(t_out, planes.max(axis=1))
        t_out = np.where(t_out > t_in, t_out, t_in)
        tt = np.sort(np.clip(np.concatenate(ts, axis=1), t_in[:, None], t_out[:, None]), axis=1)
        ds = np.diff(tt, axis=1)
        mid = p[:, None, :] + 0.5 * (tt[:, 1:] + tt[:, :-1])[..., None] * los
        idx = np.clip(np.floor(mid / CELL).astype(int), 0, shape - 1)
        flat = np.ravel_multi_index((idx[..., 0], idx[..., 1], idx[..., 2]), tuple(shape))
        for q in range(len(qs)):
            out[q, s0 : s0 + chunk] = np.sum(flat_q[q][flat] * ds, axis=1)
    return out.reshape(len(qs), size_w, nsub, size_w, nsub).mean(axis=(2, 4))


def _project(route, qs):
    fp = Footprint.from_route(route)
    values = qs.transpose(0, *(route.order + 1))  # (a, b, c) order, a transposed view
    out = np.zeros((len(qs),) + route.image_shape)
    lo = np.zeros(3, np.int64)
    project_cells(fp, values, lo, np.asarray(values.shape[1:]), lo, out)
    return out


def _rel_error(got, ref, peak, floor=1e-3):
    bright = ref >= floor * peak
    return float(np.max(np.abs(got[bright] - ref[bright]) / ref[bright]))


IMAGE_DIRECTIONS = [
    ((1.0, 2.0, 3.0), (0.3, -0.9, 0.2)),
    ((-0.35, 0.8, 0.52), (0.7, 0.1, 0.6)),
    ((0.9, -0.25, 0.4), (-0.2, 0.5, 0.9)),
]


@pytest.mark.parametrize("los,north", IMAGE_DIRECTIONS)
def test_em_and_tau_images_against_sub_rays(los, north):
    # EM = int n_e n_i dl and tau = int alpha dl (thin, 10 GHz) per pixel, exact footprint means, against the
    # sub-ray reference; the lattice of one ray per cell (the tracer's default) is several % off
    ne, t = _grid()
    nu = 1e10
    alpha = absorption_cgs(nu, t, ne, ne)
    qs = np.stack([ne * ne, alpha])
    # (pixel size in cells, sub-rays per pixel side, pixels per side of the window compared). The window
    # straddles the left edge of the grid's silhouette at mid height: faint pixels, where the sub-ray
    # reference converges slowest (its error falls as nsub^-2 and is below 3e-4 at these counts, measured
    # against twice the count), and bright ones.
    for pix_cells, nsub, size in [(0.5, 160, 3), (1.6, 200, 3), (4.0, 320, 2)]:
        npix = int(np.ceil(21.0 / pix_cells))
        snap, view, route, center, pix = _route(los, north, pix_cells, npix=npix, nu=nu, fields=(ne, t))
        full = _project(route, qs)
        r0 = npix // 2 - size // 2
        c0 = int(np.argmax(full[0, npix // 2] >= 1e-3 * full[0].max()))
        got = full[:, r0 : r0 + size, c0 : c0 + size]
        ref = _reference(qs, los, north, npix, pix, nsub, (r0, c0, size))
        err_em, err_tau = _rel_error(got[0], ref[0], full[0].max()), _rel_error(got[1], ref[1], full[1].max())
        lattice = rtrace.trace(snap, view, nu * u.Hz, supersample=1)
        err_lat = _rel_error(lattice._em[r0 : r0 + size, c0 : c0 + size], ref[0], full[0].max())
        print(
            f"los={los} pixel={pix_cells} cells, pixels {ref[0].min() / full[0].max():.1e}.."
            f"{ref[0].max() / full[0].max():.1e} of the peak: footprint EM {err_em:.1e} tau {err_tau:.1e}; "
            f"lattice EM {err_lat:.1e}"
        )
        assert err_em <= 1e-3 and err_tau <= 1e-3, (pix_cells, err_em, err_tau)
        assert err_lat > 0.02, (pix_cells, err_lat)
        # flux conservation: sum of pixel EM x pixel area = int n_e n_i dV (common practice), to rounding
        assert full[0].sum() * pix**2 == pytest.approx(np.sum(ne * ne) * CELL**3, rel=1e-12)


def test_cells_partly_outside_the_image_keep_their_inside_part():
    # a grid larger than the image: the image is exactly the part of the full (padded) image it covers
    ne, t = _grid(10, seed=4)
    qs = (ne * ne)[None]
    los, north = DIRECTIONS[0]
    small = _route(los, north, 1.6, n=10, npix=6, fields=(ne, t))[2]
    big = _route(los, north, 1.6, n=10, npix=30, fields=(ne, t))[2]
    a, b = _project(small, qs), _project(big, qs)
    # the 6 x 6 image is the central 6 x 6 of the 30 x 30 one (same pixel size, same centre)
    assert a == pytest.approx(b[:, 12:18, 12:18], rel=1e-12, abs=0)
    assert a.sum() < b.sum()


def test_bricks_add_up_and_zero_cells_are_skipped():
    # projecting the grid in pieces (sub-arrays with their offsets) gives the whole: the sum is linear
    ne, t = _grid(12, seed=6)
    ne[:6] = 0.0  # half the grid empty
    los, north = DIRECTIONS[1]
    route = _route(los, north, 1.6, fields=(ne, t))[2]
    qs = np.stack([ne * ne, ne]).astype(np.float32)
    whole = _project(route, qs)
    fp = Footprint.from_route(route)
    values = qs.transpose(0, *(route.order + 1))
    parts = np.zeros_like(whole)
    for lo in np.ndindex(2, 2, 2):
        lo = np.asarray(lo) * 6
        hi = lo + 6
        sub = np.ascontiguousarray(values[:, lo[0] : hi[0], lo[1] : hi[1], lo[2] : hi[2]])
        project_cells(fp, sub, lo, hi, lo, parts)
    assert parts == pytest.approx(whole, rel=1e-12, abs=1e-300)
    assert np.count_nonzero(whole[0]) > 0
    # the empty half alone projects to nothing
    empty = np.zeros_like(whole)
    hi = np.array([12, 12, 12])
    hi[list(route.order).index(0)] = 6  # grid axis x in (a, b, c) order
    project_cells(fp, values, [0, 0, 0], hi, [0, 0, 0], empty)
    assert not np.any(empty)


def test_blocks_project_like_the_whole_grid():
    # the split's compact storage (only the 8^3 blocks holding gas, cells beyond the grid zero) projects to
    # the same images as the whole array: the same linear sum (sub-ray reference above), in another order
    from rtrace.transfer.kernels import emitting_blocks
    from rtrace.transfer.linearized import block_slots

    ne, t = _grid(20, seed=7)
    ne[:9, :, 5:] = 0.0  # some blocks empty, one grid side not a multiple of 8
    los, north = DIRECTIONS[0]
    route = _route(los, north, 1.6, n=20, npix=24, fields=(ne, t))[2]
    qs = np.stack([ne * ne, ne])
    whole = _project(route, qs)
    values = qs.transpose(0, *(route.order + 1))
    slots, where = block_slots(emitting_blocks(np.ascontiguousarray(values[0])))
    assert 0 < len(where) < slots.size
    packed = np.zeros((len(where), 8, 8, 8, 2))
    for s, (i, j, k) in enumerate(where):
        part = values[:, 8 * i : 8 * i + 8, 8 * j : 8 * j + 8, 8 * k : 8 * k + 8]
        packed[s, : part.shape[1], : part.shape[2], : part.shape[3]] = np.moveaxis(part, 0, -1)
    out = project_blocks(Footprint.from_route(route), packed, where, np.zeros_like(whole))
    assert out == pytest.approx(whole, rel=1e-12, abs=1e-300)
    with pytest.raises(InputError, match="values"):
        project_blocks(Footprint.from_route(route), packed[..., :1], where, np.zeros_like(whole))


def test_bad_arguments_are_refused():
    route = _route(*DIRECTIONS[0], 1.6)[2]
    fp = Footprint.from_route(route)
    values = np.ones((1, 4, 4, 4))
    out = np.zeros((1,) + route.image_shape)
    with pytest.raises(InputError, match="values"):
        project_cells(fp, values.astype(int), [0, 0, 0], [4, 4, 4], [0, 0, 0], out)
    with pytest.raises(InputError, match="out"):
        project_cells(fp, values, [0, 0, 0], [4, 4, 4], [0, 0, 0], out[:, :3])
    with pytest.raises(InputError, match="lo, hi"):
        project_cells(fp, values, [0, 0, 0], [5, 4, 4], [0, 0, 0], out)
    with pytest.raises(InputError, match="g_a, g_b"):
        Footprint((1.0, 0.0), (2.0, 0.0), (0.1, 0.1), (0.0, 0.0), 1.0, (4, 4))
