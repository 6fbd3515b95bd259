"""New figures, their style and saving them atomically.

Part of the plotting package's internal API (see :mod:`rtrace.plot.core`).
"""

import os
from pathlib import Path

from matplotlib.figure import Figure

from ..errors import InputError

__all__ = ["STYLE", "new_figure", "save", "map_figsize"]

# Readable at the sizes these figures are made (about 5 inches wide), whatever the user's rcParams.
STYLE = {
    "font.size": 10,
    "axes.titlesize": 11,
    "axes.labelsize": 10,
    "xtick.labelsize": 9,
    "ytick.labelsize": 9,
    "legend.fontsize": 9,
    "figure.titlesize": 12,
    "savefig.dpi": 150,
    "figure.dpi": 100,
    "image.interpolation": "nearest",
    "axes.linewidth": 0.8,
}


def map_figsize(shape):
    """Figure size for one map.

    The height follows the image's aspect, never so short that the
    vertical axis label (about 1.6 inches) would be cut off, nor taller than 9 inches.
    """
    ny, nx = shape
    aspect = min(max(ny / nx, 0.3), 2.0)
    return 5.6, max(2.6, 3.8 * aspect + 0.9)


def save(fig, path):
    """Save ``fig`` atomically to ``path`` (format from the suffix, PNG without one); nothing when ``path`` is None.

    Raises
    ------
    InputError
        When matplotlib cannot write the suffix's format (before anything is written).
    """
    if path is None:
        return
    # imported here: rtrace.io gathers the file formats, none of which is needed until a write
    from ..io.atomic import atomic_path

    suffix = Path(os.fspath(path)).suffix
    fmt = suffix[1:].lower() if suffix else "png"
    supported = fig.canvas.get_supported_filetypes()
    if fmt not in supported:
        raise InputError(
            f"path: matplotlib cannot write '.{fmt}' files; use one of {', '.join('.' + k for k in sorted(supported))}"
        )
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format=fmt)


def new_figure(figsize):
    """A pyplot-free Figure of ``figsize`` inches with constrained layout (works with Agg, in threads)."""
    return Figure(figsize=figsize, layout="constrained")
