"""The tube remap (rtrace.transfer.remap) against an independent polygon intersection.

The reference area of a tube's parallelogram inside a pixel is the area of
the convex hull (scipy.spatial.ConvexHull, Qhull) of the points that bound
the intersection of the two convex polygons: the corners of each polygon
lying inside the other and the crossings of their edges (common practice
for convex polygons; Qhull: Barber, Dobkin & Huhdanpaa 1996, ACM TOMS 22,
469). It shares nothing with the Sutherland-Hodgman clipping the remap uses.
"""

import numpy as np
import pytest
from scipy.spatial import ConvexHull, QhullError

from rtrace.transfer.remap import remap_parallelograms


def _inside(points, corners):
    """Which ``points`` lie in the convex polygon ``corners`` (counter-clockwise), edges included."""
    inside = np.ones(len(points), bool)
    for k in range(len(corners)):
        a, b = corners[k], corners[(k + 1) % len(corners)]
        cross = (b[0] - a[0]) * (points[:, 1] - a[1]) - (b[1] - a[1]) * (points[:, 0] - a[0])
        inside &= cross >= -1e-12
    return inside


def _ccw(corners):
    area2 = sum(corners[k][0] * corners[(k + 1) % 4][1] - corners[(k + 1) % 4][0] * corners[k][1] for k in range(4))
    return corners if area2 > 0 else corners[::-1]


def _reference_area(tube, pixel):
    """Area of convex quadrilateral ``tube`` inside convex quadrilateral ``pixel`` (corners as (4, 2) arrays)."""
    tube, pixel = _ccw(tube), _ccw(pixel)
    points = [tube[_inside(tube, pixel)], pixel[_inside(pixel, tube)]]
    for k in range(4):
        p, r = tube[k], tube[(k + 1) % 4] - tube[k]
        for m in range(4):
            q, s = pixel[m], pixel[(m + 1) % 4] - pixel[m]
            den = r[0] * s[1] - r[1] * s[0]
            if den == 0.0:
                continue
            t = ((q[0] - p[0]) * s[1] - (q[1] - p[1]) * s[0]) / den
            u = ((q[0] - p[0]) * r[1] - (q[1] - p[1]) * r[0]) / den
            if 0.0 <= t <= 1.0 and 0.0 <= u <= 1.0:
                points.append((p + t * r)[None])
    points = np.concatenate(points)
    if len(points) < 3:
        return 0.0
    try:
        return ConvexHull(points).volume  # in 2D, Qhull's "volume" is the area
    except QhullError:  # all points on a line: no area
        return 0.0


@pytest.mark.parametrize("aligned", [False, True])
def test_pixel_areas_match_an_independent_polygon_intersection(aligned):
    rng = np.random.default_rng(11)
    ny, nx = 9, 11
    n = 12
    if aligned:
        e1, e2 = np.array([1.3, 0.0]), np.array([0.0, 0.7])
    else:
        e1, e2 = np.array([0.9, 0.35]), np.array([-0.5, 1.2])
    cols = rng.uniform(-1.0, nx + 1.0, n)
    rows = rng.uniform(-1.0, ny + 1.0, n)
    # one quantity per tube, value 1: plane r of the image is then tube r's overlap area with each pixel
    values = np.eye(n)
    out = np.zeros((n, ny, nx))
    remap_parallelograms(cols, rows, e1, e2, values, out)
    unit = np.array([[0.0, 0.0], [1.0, 0.0], [1.0, 1.0], [0.0, 1.0]])
    checked = 0
    for r in range(n):
        corner = np.array([cols[r], rows[r]]) - 0.5 * (e1 + e2)
        tube = np.array([corner, corner + e1, corner + e1 + e2, corner + e2])
        for iy in range(ny):
            for ix in range(nx):
                ref = _reference_area(tube, unit + [ix, iy])
                assert out[r, iy, ix] == pytest.approx(ref, rel=1e-12, abs=1e-13), (r, iy, ix)
                checked += ref > 0.0
    assert checked > 3 * n // 2  # most tubes lie (partly) inside the image


def test_flux_of_tubes_inside_the_image_is_conserved():
    # tubes tile the plane; each adds value x its area (|e1 x e2|) over the pixels it covers, whatever their
    # orientation (the remap's stated property)
    rng = np.random.default_rng(3)
    e1, e2 = np.array([1.7, -0.6]), np.array([0.4, 2.1])
    n = 40
    cols = rng.uniform(4.0, 26.0, n)
    rows = rng.uniform(4.0, 16.0, n)
    values = rng.uniform(0.5, 2.0, (2, n))
    out = np.zeros((2, 20, 30))
    remap_parallelograms(cols, rows, e1, e2, values, out)
    area = abs(e1[0] * e2[1] - e1[1] * e2[0])
    np.testing.assert_allclose(out.sum(axis=(1, 2)), area * values.sum(axis=1), rtol=1e-13)
