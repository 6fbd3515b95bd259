"""The plotting package's internal API: what every figure of rtrace is built from.

Import these from here (``from rtrace.plot.core import plane_of``), not from the modules that
define them, and not from the public drawing modules. Other layers of rtrace do not import plot at
module level (see ``DEVELOPERS.md``, "Layers"); a product object's method that draws (``Cut.plot``,
``Comparison.figure`` and ``Comparison.plot``) imports its drawing function lazily.

What a map shows (:mod:`rtrace.plot.planes`)
    ``QUANTITIES`` and their titles ``NAMES``; :class:`Plane`, one 2-D image in its plotted unit
    with its colour-bar label, frequency tag, unit, geometry, beam, noise and a note on blank
    pixels; :func:`plane_of` extracts it from a Result or SkyMap (``run.colour_scales`` measures
    series' colour ranges with it, so they are those of the drawn images); :func:`common_prefix`
    re-expresses intensity planes in one SI prefix; :func:`limit` converts a ``vmin``/``vmax`` to
    a plane's unit; :func:`check_image`, :func:`check_quantity`, :func:`geometry`,
    :func:`is_pair`, :func:`subject_line` (the snapshot and ionization model, for titles).
Colour (:mod:`rtrace.plot.norms`)
    ``STRETCHES`` and :func:`check_stretch`; :func:`make_norm` (asinh, log, linear; the spectral
    index's diverging scale); :func:`resolve_cmap`; :func:`colorbar` with readable ticks.
Drawing a plane (:mod:`rtrace.plot.draw`)
    :func:`draw_plane`: the image in sky offsets, east left, with contours, the beam ellipse
    (left out beyond ``BEAM_DRAW_LIMIT`` of the field, with a warning), a physical scale bar and
    the plane's note.
Words and numbers (:mod:`rtrace.plot.text`)
    :func:`format_frequency`, :func:`frequency_labels`, :func:`significant`, :func:`prefix_for`
    (SI prefix of a flux), :func:`angle_text`, :func:`axis_unit`, :func:`tick_text` and
    :func:`two_five` (tick labels), :func:`nice_length` and :func:`choose_scale_bar`.
Figures (:mod:`rtrace.plot.figures`)
    ``STYLE`` (rcParams every figure is drawn under), :func:`new_figure` (no pyplot state),
    :func:`map_figsize`, :func:`save` (atomic, format from the suffix).
"""

from .draw import BEAM_DRAW_LIMIT, draw_plane
from .figures import STYLE, map_figsize, new_figure, save
from .norms import STRETCHES, check_stretch, colorbar, make_norm, resolve_cmap
from .planes import (
    NAMES,
    QUANTITIES,
    Plane,
    check_image,
    check_quantity,
    common_prefix,
    geometry,
    is_pair,
    limit,
    plane_of,
    subject_line,
)
from .text import (
    angle_text,
    axis_unit,
    choose_scale_bar,
    format_frequency,
    frequency_labels,
    nice_length,
    prefix_for,
    significant,
    tick_text,
    two_five,
)

__all__ = [
    "BEAM_DRAW_LIMIT",
    "draw_plane",
    "STYLE",
    "map_figsize",
    "new_figure",
    "save",
    "STRETCHES",
    "check_stretch",
    "colorbar",
    "make_norm",
    "resolve_cmap",
    "NAMES",
    "QUANTITIES",
    "Plane",
    "check_image",
    "check_quantity",
    "common_prefix",
    "geometry",
    "is_pair",
    "limit",
    "plane_of",
    "subject_line",
    "angle_text",
    "axis_unit",
    "choose_scale_bar",
    "format_frequency",
    "frequency_labels",
    "nice_length",
    "prefix_for",
    "significant",
    "tick_text",
    "two_five",
]
