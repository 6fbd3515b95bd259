"""Figures of traced and observed images: maps, panels of maps, spectra, cuts, comparisons.

Every function builds a :class:`matplotlib.figure.Figure` directly (no pyplot
state, so it works with the Agg backend, in scripts and in threads), returns
it, and when ``path`` is given saves it atomically: the format follows the
suffix (``.png``, ``.pdf``, ``.svg``, ... anything matplotlib writes), PNG
when there is none.

Sky orientation: the row index grows toward north and the column index
toward west, so maps are drawn with ``origin="lower"`` and the horizontal axis
is the offset toward east, increasing to the left (east left, as on the sky).
Pixel ``(row, col)`` is centred at ``east = -(col + 0.5 - nx/2) s`` and
``north = (row + 0.5 - ny/2) s`` for a pixel scale ``s``. Beam position angles
run from north through east, so a 45 deg beam points up and to the left.

The modules: :mod:`~rtrace.plot.maps` (:func:`plot_map`, :func:`plot_panels`),
:mod:`~rtrace.plot.spectra` (:func:`plot_sed`), :mod:`~rtrace.plot.depth`
(:func:`plot_tau_unity`), :mod:`~rtrace.plot.cuts` (:func:`plot_cut`, drawn by
``Cut.plot``), :mod:`~rtrace.plot.comparison` (:func:`plot_comparison`, drawn by
``Comparison.figure`` and ``Comparison.plot``), all built on the internal API
of :mod:`rtrace.plot.core`.
"""

from ..analysis.spectra import DEFAULT_SNR_THRESHOLD
from .comparison import plot_comparison
from .core import BEAM_DRAW_LIMIT, QUANTITIES, STRETCHES, choose_scale_bar, frequency_labels, nice_length
from .cuts import plot_cut
from .depth import plot_tau_unity
from .maps import PER_PANEL_RATIO, plot_map, plot_panels
from .spectra import plot_sed

__all__ = [
    "plot_map",
    "plot_panels",
    "plot_sed",
    "plot_tau_unity",
    "plot_cut",
    "plot_comparison",
    "QUANTITIES",
    "STRETCHES",
    "nice_length",
    "choose_scale_bar",
    "frequency_labels",
    "DEFAULT_SNR_THRESHOLD",
    "PER_PANEL_RATIO",
    "BEAM_DRAW_LIMIT",
]
