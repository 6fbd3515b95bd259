"""The public single-ray walk of rtrace.transfer.rays against plain geometry."""

import numpy as np
import pytest

from rtrace.transfer.rays import ray_segments


@pytest.mark.parametrize("direction", [(1.0, 0.0, 0.0), (1.0, 2.0, 3.0), (-0.3, 0.5, -1.0), (0.0, 1.0, 1.0)])
def test_segments_tile_the_chord_through_the_box(direction, rng):
    shape = np.array([7, 5, 9], np.int64)
    cell = np.array([1.0, 2.0, 0.5])
    d = np.asarray(direction, float)
    d /= np.linalg.norm(d)
    size = shape * cell
    for _ in range(20):
        start = rng.uniform(0.05, 0.95, 3) * size  # a point inside: the line crosses the box
        depth, ds, cells = ray_segments(start, d, shape, cell)
        # chord of a line through a box by the slab method (Kay & Kajiya 1986, SIGGRAPH 20, 269)
        with np.errstate(divide="ignore"):
            ta, tb = (0.0 - start) / d, (size - start) / d
        lo = np.where(d != 0, np.minimum(ta, tb), -np.inf).max()
        hi = np.where(d != 0, np.maximum(ta, tb), np.inf).min()
        assert ds.sum() == pytest.approx(hi - lo, rel=1e-12)
        assert np.all(ds > 0)
        np.testing.assert_allclose(depth, np.concatenate([[0.0], np.cumsum(ds)[:-1]]), rtol=0, atol=1e-12)
        # consecutive cells share a face (common practice: a 6-connected voxel walk, Amanatides & Woo 1987)
        steps = np.abs(np.diff(cells, axis=0)).sum(axis=1)
        assert np.all(steps == 1)
        # each segment's midpoint lies in the cell it names
        mid = start + (lo + depth + ds / 2)[:, None] * d
        np.testing.assert_array_equal(np.floor(mid / cell).astype(np.int64), cells)


def test_a_line_outside_the_box_crosses_nothing():
    depth, ds, cells = ray_segments(
        np.array([-1.0, 0.5, 0.5]), np.array([0.0, 0.0, 1.0]), np.array([4, 4, 4], np.int64), np.ones(3)
    )
    assert depth.size == ds.size == cells.shape[0] == 0
