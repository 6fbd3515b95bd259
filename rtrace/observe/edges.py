"""Emission at the image edge: part of the source lies outside the field.

Flux sums then miss what lies beyond the field, and a beam convolution
spreads part of the edge pixels' flux out of the image, so SEDs and fluxes
of the observed map fall short (1-2% in a field-filling image). A warning
says so, with the share of the flux in the outermost pixel ring.
"""

import numpy as np

from ..errors import warn_user

__all__ = ["EDGE_SHARE_LIMIT", "edge_share", "warn_if_emission_at_edge"]

#: Share of an image's flux in its outermost pixel ring above which a warning is issued.
EDGE_SHARE_LIMIT = 1e-3


def edge_share(images):
    """``(share, plane)``: the largest share of |flux| in the outermost pixel ring, and its plane.

    ``images`` is (nfreq, ny, nx), in any unit proportional to flux per pixel.
    """
    images = np.abs(np.asarray(images, float))
    total = images.sum(axis=(1, 2))
    ring = total - images[:, 1:-1, 1:-1].sum(axis=(1, 2))
    with np.errstate(invalid="ignore", divide="ignore"):
        share = np.where(total > 0, ring / np.where(total > 0, total, 1.0), 0.0)
    k = int(np.argmax(share))
    return float(share[k]), k


def warn_if_emission_at_edge(images, frequencies_hz, what):
    """Warn when more than `EDGE_SHARE_LIMIT` of the flux lies in the outermost pixel ring."""
    if min(np.shape(images)[1:]) < 3:
        return
    share, k = edge_share(images)
    if share > EDGE_SHARE_LIMIT:
        warn_user(
            f"{what}: emission reaches the image edge ({100 * share:.2g}% of the flux at "
            f"{frequencies_hz[k] / 1e9:.4g} GHz lies in the outermost pixel ring): flux beyond the field "
            "is missing from sums and SEDs, and beam convolution spreads part of the edge flux out "
            "of the image; widen the view",
            UserWarning,
        )
