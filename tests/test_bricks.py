"""Bricked tracing against the whole-array engine (whose physics tests/test_transfer.py checks).

Reference: the formal solution composites exactly and associatively over
consecutive pieces of a ray (Rybicki & Lightman 1979, eq. 1.30 applied
piecewise), so any split of the grid into bricks, traced on the bricks' own
arrays and composited front to back, must give the whole-array result up
to rounding (1e-10 asked here). Grids are tiny, fields lognormal so views
are optically thick at low and thin at high frequency.
"""

import astropy.units as u
import numpy as np
import pytest

import rtrace
from rtrace.errors import InputError
from rtrace.transfer import bricks, cell_cache, kernels
from rtrace.transfer.compositing import Patch, Segment, composite_patches
from rtrace.transfer.tracer import FrequencyTables

NU = [0.3, 3.0, 300.0] * u.GHz


@pytest.fixture(scope="module")
def snap():
    rng = np.random.default_rng(2024)
    shape = (19, 16, 22)  # no brick size below divides every axis
    ne = 1e3 * rng.lognormal(0, 1, shape)
    t = rng.uniform(5e3, 2e4, shape)
    return rtrace.Snapshot.from_arrays(
        temperature=t * u.K,
        cell_size=[0.01, 0.012, 0.009] * u.pc,
        electron_density=ne * u.cm**-3,
        ion_density=1.1 * ne * u.cm**-3,
        dtype=np.float64,
    )


def assert_same(a, b, rtol=1e-10):
    assert a.intensity.shape == b.intensity.shape
    for x, y in (
        (a.intensity.value, b.intensity.value),
        (a.tau, b.tau),
        (a.emission_measure.value, b.emission_measure.value),
    ):
        assert np.allclose(x, y, rtol=rtol, atol=0), np.max(np.abs(x - y) / np.maximum(np.abs(y), 1e-300))
    assert a.rays_per_pixel == b.rays_per_pixel


@pytest.mark.parametrize(
    "los,north",
    [
        ((0, 0, 1), (0, 1, 0)),
        ((0, 0, -1), (1, 1, 0)),
        ((1, 0, 0), (0, 0, 1)),
        ((-1, 0, 0), (0, 1, 0)),
        ((0, 1, 0), (1, 0, 0)),
        ((0, -1, 0), (0, 0, 1)),
    ],
)
def test_axis_aligned_bricks_equal_the_whole_grid(snap, los, north):
    # Column segments of stacked bricks composite to the whole column (R&L 1979, eq. 1.30 piecewise).
    view = rtrace.View(los=los, north=north, npix=23, distance=1 * u.kpc)
    whole = rtrace.trace(snap, view, NU)
    assert whole.tau[0].max() > 10 and whole.tau[-1].max() < 1e-2  # thick and thin
    for size in (5, 7):
        assert_same(rtrace.trace(snap, view, NU, brick_size=size), whole)


@pytest.mark.parametrize(
    "los,north,npix,width,supersample",
    [
        ((0.4, -0.7, 0.6), (0, 0, 1), 30, None, 1),
        ((0.7, 0.1, 0.7), (0, 1, 0), 64, None, 2),  # several lattice phases per cell
        ((1, 2, 0.1), (0, 0, 1), 9, None, 1),  # coarse pixels, nearly in a coordinate plane
        ((0.3, -0.5, 0.8), (0, 1, 0), 50, 0.05, 1),  # zoomed: some bricks are reached by no ray
    ],
)
def test_oblique_bricks_equal_the_whole_grid(snap, los, north, npix, width, supersample):
    # Ray segments through bricks composite to the whole ray (R&L 1979, eq. 1.30 piecewise).
    view = rtrace.View(
        los=los, north=north, npix=npix, width=None if width is None else width * u.pc, distance=1 * u.kpc
    )
    whole = rtrace.trace(snap, view, NU, supersample=supersample)
    assert whole.tau[0].max() > 10 and whole.tau[-1].max() < 1e-2
    los = np.asarray(los, float) / np.linalg.norm(los)
    c = int(np.argmax(np.abs(los)))
    for size in (4, 7):
        # rays drift sideways by more than a brick across the grid, so they enter bricks
        # through side faces, not only through the faces facing the observer
        drift = max(abs(los[a] / los[c]) * snap.shape[c] for a in range(3) if a != c)
        assert drift > size
        assert_same(rtrace.trace(snap, view, NU, supersample=supersample, brick_size=size), whole)


def test_sheared_kernel_on_a_brick_sub_array_equals_the_whole_array(snap):
    # The index offset maps global cell indices onto the brick's own array: the kernel must
    # give bit-identical segments from the sub-array and from the whole array (common practice).
    tables = FrequencyTables(NU.to_value(u.Hz))
    # (a, b, c) = (x, z, y); the kernel reads n_e x ion term and T
    arrays = tuple(a.transpose(0, 2, 1) for a in (snap._ne * snap._ni, snap._t))
    lo = np.array([4, 6, 3], np.int64)
    hi = np.array([13, 17, 12], np.int64)
    rho_a, rho_b, cell = 0.45, -0.8, snap.cell_size[[0, 2, 1]]
    segs = kernels.layer_segments(0.5, 0.5, rho_a, rho_b, cell[0], cell[1], cell[2], 0.7, lo[2], hi[2], True, 8)

    def run(arrs, off):
        out = Segment.empty(len(tables.nu), (1, 20 * 25))
        kernels.trace_sheared(
            *arrs,
            kernels.emitting_blocks(arrs[0]),
            lo,
            hi,
            off,
            lo[2],
            True,
            -3,
            20,
            -2,
            25,
            *segs,
            *tables.args(),
            out.intensity,
            out.tau,
            out.em,
        )
        return out

    whole = run(arrays, np.zeros(3, np.int64))
    sub = run(tuple(np.ascontiguousarray(a[lo[0] : hi[0], lo[1] : hi[1], lo[2] : hi[2]]) for a in arrays), lo)
    assert whole.em.max() > 0
    assert np.array_equal(sub.intensity, whole.intensity) and np.array_equal(sub.tau, whole.tau)
    assert np.array_equal(sub.em, whole.em)


@pytest.fixture(scope="module")
def sparse():
    """Mostly neutral gas: ionized clumps that straddle the 8-cell block edges, and lone ionized cells."""
    rng = np.random.default_rng(77)
    shape = (29, 21, 26)
    ne = np.zeros(shape)
    ne[6:10, 14:17, 7:9] = 1e4 * rng.lognormal(0, 1, (4, 3, 2))  # across x = 8, y = 16, z = 8
    ne[20:25, 2:5, 15:18] = 3e3
    for cell in [(0, 0, 0), (7, 7, 7), (8, 8, 8), (15, 20, 25), (28, 9, 16), (13, 0, 24)]:
        ne[cell] = 5e4
    t = rng.uniform(5e3, 2e4, shape)
    return rtrace.Snapshot.from_arrays(
        temperature=t * u.K, cell_size=[0.01, 0.012, 0.009] * u.pc, electron_density=ne * u.cm**-3, dtype=np.float64
    )


def test_emitting_blocks_mark_the_blocks_with_emitting_cells(sparse):
    # Reference: numpy's any() over each 8^3 block of the zero-padded cube (common practice).
    nn = cell_cache.emission_product(sparse)
    padded = np.zeros([-(-n // 8) * 8 for n in nn.shape])
    padded[: nn.shape[0], : nn.shape[1], : nn.shape[2]] = nn
    s = padded.shape
    expected = (padded.reshape(s[0] // 8, 8, s[1] // 8, 8, s[2] // 8, 8) > 0).any(axis=(1, 3, 5))
    blocks = cell_cache.emitting_blocks(sparse)
    assert np.array_equal(blocks.astype(bool), expected)
    assert 0 < blocks.mean() < 0.5  # the sweep has blocks to skip
    sparse.release()
    assert not sparse.kept and np.array_equal(cell_cache.emitting_blocks(sparse), blocks)


@pytest.mark.parametrize("off", [(0, 0, 0), (3, 5, 2)])
def test_skipping_neutral_blocks_changes_no_bit(sparse, off):
    # Cells with n_e n_i = 0 add nothing to I, tau or EM (R&L 1979, eq. 1.30 with j = alpha = 0), so the
    # sweep that skips empty blocks must give exactly the sweep that reads every cell (an all-ones map),
    # on the whole array and on a sub-array whose blocks are offset from the global ones.
    tables = FrequencyTables(NU.to_value(u.Hz))
    # (a, b, c) = (z, x, y)
    arrays = tuple(a.transpose(2, 0, 1) for a in (cell_cache.emission_product(sparse), sparse._t))
    off = np.array(off, np.int64)
    lo, hi = off, np.array(arrays[0].shape, np.int64)
    arrays = tuple(np.ascontiguousarray(a[off[0] :, off[1] :, off[2] :]) for a in arrays)
    cell = sparse.cell_size[[2, 0, 1]]
    segs = kernels.layer_segments(0.25, 0.75, 0.6, -0.35, cell[0], cell[1], cell[2], 0.8, lo[2], hi[2], True, 8)

    def run(blocks):
        out = Segment.empty(len(tables.nu), (1, 40 * 30))
        kernels.trace_sheared(
            *arrays,
            blocks,
            lo,
            hi,
            off,
            lo[2],
            True,
            -8,
            40,
            -4,
            30,
            *segs,
            *tables.args(),
            out.intensity,
            out.tau,
            out.em,
        )
        return out

    blocks = kernels.emitting_blocks(arrays[0])
    assert blocks.min() == 0
    skipped, read_all = run(blocks), run(np.ones_like(blocks))
    assert skipped.em.max() > 0 and skipped.tau[0].max() > 1
    assert np.array_equal(skipped.intensity, read_all.intensity) and np.array_equal(skipped.tau, read_all.tau)
    assert np.array_equal(skipped.em, read_all.em)


@pytest.mark.parametrize("los", [(0.4, -0.7, 0.6), (-0.2, 0.9, 0.3)])
def test_sparse_snapshot_bricks_equal_the_whole_grid(sparse, los):
    # Each brick maps its own blocks (offset from the whole grid's); composited they give the whole-grid
    # image (R&L 1979, eq. 1.30 piecewise).
    view = rtrace.View(los=los, north=(0, 0, 1), npix=40, distance=1 * u.kpc)
    whole = rtrace.trace(sparse, view, NU, supersample=1)
    for size in (5, 9):
        assert_same(rtrace.trace(sparse, view, NU, supersample=1, brick_size=size), whole)


@pytest.mark.parametrize("los", [(0.3, -0.5, 0.8), (-0.9, 0.2, 0.1), (0.0, 0.6, -0.8), (0, 0, 1), (0.5, 0.5, -0.7)])
def test_brick_order_is_front_to_back_for_every_ray(los):
    # Common practice (painter's order for a regular partition): a ray marched in small steps along los
    # (the direction of travel; the observer is at +infinity) must meet the bricks in decreasing position
    # of the order (nearest the observer first).
    shape, edge = (23, 17, 30), 6
    order = bricks.front_to_back(shape, edge, los)
    position = {tuple(lo // edge): n for n, (lo, hi) in enumerate(order)}
    assert len(position) == len(order) == np.prod([-(-n // edge) for n in shape])
    los = np.asarray(los, float) / np.linalg.norm(los)
    rng = np.random.default_rng(5)
    for _ in range(200):
        start = rng.uniform(0, 1, 3) * shape - 40 * los
        points = start + np.arange(0, 80, 0.05)[:, None] * los
        inside = np.all((points >= 0) & (points < shape), axis=1)
        visited = [position[tuple(idx)] for idx in (points[inside] // edge).astype(int)]
        # consecutive pairs: the shifted copy is one shorter, truncation intended
        assert all(later <= earlier for earlier, later in zip(visited, visited[1:], strict=False))


def test_patches_composite_associatively_over_different_rectangles():
    # near o (mid o far) == (near o mid) o far, with patches on overlapping, offset rectangles
    # (associativity of the formal solution, Rybicki & Lightman 1979, eq. 1.30).
    rng = np.random.default_rng(9)

    def patch(start, shape):
        return Patch(
            start, Segment(rng.uniform(0, 1, (2,) + shape), rng.uniform(0, 3, (2,) + shape), rng.uniform(0, 1, shape))
        )

    near, mid, far = patch((0, 3), (5, 4)), patch((2, 0), (6, 5)), patch((4, 5), (3, 3))
    left = composite_patches(composite_patches(near, mid), far)
    right = composite_patches(near, composite_patches(mid, far))
    assert left.start == right.start == (0, 0) and left.stop == right.stop == (8, 8)
    for x, y in ((left.seg.intensity, right.seg.intensity), (left.seg.tau, right.seg.tau), (left.seg.em, right.seg.em)):
        assert np.allclose(x, y, rtol=1e-14, atol=0)
    # a ray only `far` covers is far's own value, bit for bit (the identity is exact)
    assert np.array_equal(left.seg.intensity[:, 6, 7], far.seg.intensity[:, 2, 2])
    assert composite_patches(None, far) is far and composite_patches(near, None) is near


def test_max_memory_with_in_memory_snapshot_equals_the_whole_grid(snap):
    # Whatever brick the budget picks, the composite is the whole-grid result (R&L 1979, eq. 1.30).
    view = rtrace.View(los=(0.4, -0.7, 0.6), north=(0, 0, 1), npix=30, distance=1 * u.kpc)
    whole = rtrace.trace(snap, view, NU, supersample=1)
    assert_same(rtrace.trace(snap, view, NU, supersample=1, max_memory="2 MB"), whole)
    assert_same(rtrace.trace(snap, view, NU, supersample=1, max_memory=1 * u.GB), whole)


@pytest.mark.parametrize(
    "value,expected",
    [
        ("150 MB", 150_000_000),
        ("2GB", 2_000_000_000),
        ("1.5 GiB", 1_610_612_736),
        (3 * u.kbyte, 3000),
        (u.Quantity(2, u.MiB), 2 * 2**20),
    ],
)
def test_max_memory_parsing(value, expected):
    # astropy's byte prefixes: MB, GB decimal; MiB, GiB binary (common practice, IEC 80000-13)
    assert bricks.parse_memory(value) == expected


@pytest.mark.parametrize(
    "value,message",
    [
        ("2", "max_memory"),
        ("lots", "max_memory: cannot read"),
        (2e9, "max_memory: expected a Quantity"),
        (5 * u.m, "bytes"),
        ("-1 GB", "positive"),
        ([1, 2] * u.GB, "one amount"),
    ],
)
def test_bad_max_memory_is_an_input_error(snap, value, message):
    # Common practice: bad input is an InputError naming the parameter, before any tracing.
    view = rtrace.View(npix=8, distance=1 * u.kpc)
    with pytest.raises(InputError, match=message):
        rtrace.trace(snap, view, NU, max_memory=value)


@pytest.mark.parametrize("los", [(0, 0, 1), (0.4, -0.7, 0.6)])
def test_impossible_budget_says_the_minimum(snap, los):
    # Common practice: an impossible budget is refused with the minimum that would work.
    view = rtrace.View(los=los, npix=200, distance=1 * u.kpc)
    with pytest.raises(
        InputError,
        match=r"max_memory: 0\.1 MB is too small; this trace needs at least "
        r"([0-9.]+) MB",
    ) as info:
        rtrace.trace(snap, view, NU, supersample=1, max_memory="0.1 MB")
    minimum = float(info.value.args[0].split("at least ")[1].split(" MB")[0])
    # the minimum stated is enough (it is rounded to 3 digits: allow the rounding)
    res = rtrace.trace(snap, view, NU, supersample=1, max_memory=f"{minimum * 1.005} MB")
    assert_same(res, rtrace.trace(snap, view, NU, supersample=1))


def test_brick_size_that_breaks_the_budget_is_an_input_error(snap):
    # Common practice: an explicit brick size is checked against the budget, not silently changed.
    view = rtrace.View(npix=8, distance=1 * u.kpc)
    with pytest.raises(InputError, match="max_memory: brick_size=16 needs about"):
        rtrace.trace(snap, view, NU, brick_size=16, max_memory="50 kB")


@pytest.mark.parametrize("size", [0, -3, 2.5, "big"])
def test_bad_brick_size(snap, size):
    # Common practice: the parameter is named in the error.
    with pytest.raises(InputError, match="brick_size"):
        rtrace.trace(snap, rtrace.View(npix=8, distance=1 * u.kpc), NU, brick_size=size)
