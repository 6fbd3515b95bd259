"""Maps: one image of a Result or SkyMap (:func:`plot_map`) and a grid of them (:func:`plot_panels`)."""

import math

import astropy.units as u
import matplotlib
import numpy as np

from ..errors import InputError
from .core import (
    NAMES,
    STYLE,
    check_image,
    check_quantity,
    check_stretch,
    colorbar,
    common_prefix,
    draw_plane,
    is_pair,
    limit,
    make_norm,
    map_figsize,
    new_figure,
    plane_of,
    resolve_cmap,
    save,
    subject_line,
)

__all__ = ["plot_map", "plot_panels", "PER_PANEL_RATIO"]

# Panels whose brightest values differ by more than this factor get a colour scale each
# (unless limits are given): on one shared scale the faint panels would look empty.
PER_PANEL_RATIO = 10.0


def plot_map(
    obj,
    quantity="intensity",
    frequency=None,
    *,
    stretch="asinh",
    contours=None,
    scale_bar=None,
    path=None,
    ax=None,
    cmap=None,
    title=None,
    vmin=None,
    vmax=None,
):
    """Draw one image of a Result or SkyMap.

    Parameters
    ----------
    obj : `~rtrace.Result` or SkyMap
    quantity : {"intensity", "tau", "emission_measure", "brightness_temperature", "spectral_index"}
        ``intensity``: a Result in Jy/pixel (background subtracted), a
        SkyMap in Jy/beam (observed data), each with the SI prefix (Jy, mJy,
        uJy, nJy) that puts the peak between 1 and 1000. ``tau``: optical
        depth. ``emission_measure``: pc cm-6. ``brightness_temperature``: K,
        Planck inversion for a Result (-> T_e where thick), Rayleigh-Jeans
        for a SkyMap. ``spectral_index``: ``d ln I / d ln nu`` between two
        planes (see `rtrace.analysis.spectral_index_map`): both planes at
        one resolution (smoothed to a common beam where the beams differ,
        said in the title), pixels blanked (grey, said on the map) below
        ``DEFAULT_SNR_THRESHOLD`` rms for a noisy SkyMap, below 1e-3 of
        the peak without noise.
        ``tau`` and ``emission_measure`` of a SkyMap are those of its Result.
    frequency : `~astropy.units.Quantity`, int or pair, optional
        Plane by frequency (within 1 % of a traced one) or index; default
        the first. ``spectral_index`` needs a pair ``(nu1, nu2)``.
    stretch : {"asinh", "log", "linear"}
        Colour stretch (``AsinhNorm``, linear within 2 % of the peak or 3 rms;
        ``LogNorm`` over at most 4 decades; ``Normalize``). The spectral
        index always uses a linear diverging scale.
    contours : None, int or sequence of float or Quantity
        An int: that many levels evenly spaced in the stretch; values: levels
        in the plotted unit (a Quantity is converted).
    scale_bar : None, False or `~astropy.units.Quantity`
        Physical scale bar in the lower right: automatic (about 1/5 of the
        field, 1-2-5 rounded, AU/pc/kpc) by default, ``False`` for none, or
        a given length.
    path : str or path-like, optional
        Save the figure there (format from the suffix, PNG without one).
    ax : `~matplotlib.axes.Axes`, optional
        Draw into this axes (a colour bar is added next to it).
    cmap : str or `~matplotlib.colors.Colormap`, optional
    title : str, optional
        Default: the quantity and frequency, with a line above naming the
        snapshot and the ionization model (from the provenance).
    vmin, vmax : float or `~astropy.units.Quantity`, optional
        Ends of the colour scale in place of those derived from this image
        (a float in the plotted unit, a Quantity is converted to it; e.g.
        Jy/beam for the intensity of a SkyMap), so that several figures can
        share one scale. The stretch keeps its rules otherwise (the asinh
        linear range follows the larger end; a ``log`` vmin <= 0 takes the
        automatic floor). The spectral index's automatic scale is symmetric
        about the thin value (-0.1) and reaches the 1st/99th percentiles;
        given ends are used as they are.

    Notes
    -----
    A beam whose major axis exceeds ``BEAM_DRAW_LIMIT`` (half) of the field
    is not drawn (a warning says so): such a map mostly shows the beam.

    Returns
    -------
    `~matplotlib.figure.Figure`
    """
    check_stretch(stretch)
    plane = plane_of(obj, quantity, frequency)
    vmin, vmax = limit(vmin, plane, "vmin"), limit(vmax, plane, "vmax")
    with matplotlib.rc_context(STYLE):
        own = ax is None
        if own:
            fig = new_figure(map_figsize(plane.values.shape))
            ax = fig.add_subplot()
        else:
            fig = ax.figure
        norm = make_norm([plane], stretch, vmin, vmax)
        cmap_obj = resolve_cmap(cmap, quantity)
        subject = subject_line(obj) if title is None else ""
        if title is None:
            title = NAMES[quantity] + (f", {plane.tag}" if plane.tag else "")
        image = draw_plane(ax, plane, norm, cmap_obj, contours=contours, scale_bar=scale_bar, title=title)
        colorbar(fig, image, ax, plane, norm, [plane])
        if own and subject:
            fig.suptitle(subject, fontsize=8, color="0.3")
        save(fig, path)
    return fig


def _panel_selection(obj, quantity, frequencies):
    n = len(u.Quantity(obj.frequencies))
    if quantity == "emission_measure":
        return [None]  # the same at every frequency: one panel
    if frequencies is None:
        chosen = list(range(n))
    elif isinstance(frequencies, u.Quantity):
        chosen = list(np.atleast_1d(frequencies))
    else:
        try:
            chosen = list(frequencies)
        except TypeError:
            raise InputError(
                f"frequencies: expected a sequence of frequencies or indices, got {frequencies!r}"
            ) from None
    if not chosen:
        raise InputError("frequencies: selects no plane")
    if quantity == "spectral_index":
        if all(is_pair(c) for c in chosen):
            return [tuple(c) for c in chosen]
        if len(chosen) < 2:
            raise InputError("frequencies: spectral-index panels need at least two frequencies")
        return list(zip(chosen[:-1], chosen[1:], strict=True))
    return chosen


def plot_panels(
    obj,
    quantity="intensity",
    frequencies=None,
    path=None,
    *,
    shared_scale=None,
    stretch="asinh",
    contours=None,
    scale_bar=None,
    cmap=None,
    title=None,
    ncols=None,
    vmin=None,
    vmax=None,
):
    """One map per frequency on a grid.

    Parameters
    ----------
    obj : `~rtrace.Result` or SkyMap
    quantity : str
        As in :func:`plot_map`.
    frequencies : sequence of `~astropy.units.Quantity` or int, optional
        Planes to show (default all). For ``spectral_index`` a sequence of
        pairs, or of frequencies taken as consecutive pairs (default: all
        consecutive pairs). ``emission_measure`` gives one panel.
    path : str or path-like, optional
        Save the figure there (format from the suffix, PNG without one).
    shared_scale : bool or None
        True: one colour scale and colour bar for all panels; False: one per
        panel. None (default): shared, unless the panels' brightest values
        differ by more than ``PER_PANEL_RATIO`` (10), where one scale would
        leave the faint panels blank; given ``vmin``/``vmax`` (e.g. a
        series' shared limits) always give one shared scale.
    stretch, contours, scale_bar, cmap
        As in :func:`plot_map`; the scale bar is drawn in the first panel only.
    title : str, optional
        Figure title; default the quantity, with a line naming the snapshot
        and the ionization model (from the provenance).
    ncols : int, optional
        Panels per row; default the layout with the fewest empty cells
        (at most 4 across up to 8 panels, about sqrt(n) beyond). Unused
        cells are left empty, without axes.
    vmin, vmax : float or `~astropy.units.Quantity`, optional
        As in :func:`plot_map`, for every panel (with ``shared_scale=False``
        too).

    Returns
    -------
    `~matplotlib.figure.Figure`
    """
    check_image(obj)
    check_quantity(quantity)
    check_stretch(stretch)
    planes = [plane_of(obj, quantity, f) for f in _panel_selection(obj, quantity, frequencies)]
    limits = [(limit(vmin, p, "vmin"), limit(vmax, p, "vmax")) for p in planes]
    if shared_scale is None:
        shared_scale = vmin is not None or vmax is not None or not _panels_differ(planes)
    if quantity == "intensity":
        # one unit for every panel, also with a scale each: a row's colour bars share one label
        planes = common_prefix(planes)
        limits = [(limit(vmin, p, "vmin"), limit(vmax, p, "vmax")) for p in planes]
    n = len(planes)
    if ncols is None:
        ncols = _default_columns(n)
    elif not (isinstance(ncols, (int, np.integer)) and ncols >= 1):
        raise InputError(f"ncols: expected a positive integer, got {ncols!r}")
    ncols = min(int(ncols), n)
    nrows = math.ceil(n / ncols)
    with matplotlib.rc_context(STYLE):
        extra = 0.9 if shared_scale else 1.3
        fig = new_figure((2.9 * ncols + extra, 2.75 * nrows + 0.7))
        axes = fig.subplots(nrows, ncols, sharex=True, sharey=True, squeeze=False).ravel()
        for spare in axes[n:]:
            fig.delaxes(spare)
        axes = axes[:n]
        cmap_obj = resolve_cmap(cmap, quantity)
        shared = make_norm(planes, stretch, *limits[0]) if shared_scale else None
        image = None
        for k, (ax, plane) in enumerate(zip(axes, planes, strict=True)):
            norm = shared if shared_scale else make_norm([plane], stretch, *limits[k])
            image = draw_plane(
                ax,
                plane,
                norm,
                cmap_obj,
                contours=contours,
                scale_bar=scale_bar if k == 0 else False,
                title=plane.tag or None,
                show_note=False,
            )
            # one x and one y label for the whole grid (below); tick labels on the bottom
            # panel of every column and the first panel of every row
            xlabel, ylabel = ax.get_xlabel(), ax.get_ylabel()
            ax.set_xlabel("")
            ax.set_ylabel("")
            ax.xaxis.set_tick_params(labelbottom=k + ncols >= n)
            ax.yaxis.set_tick_params(labelleft=k % ncols == 0)
            if not shared_scale:
                cbar = colorbar(fig, image, ax, plane, norm, [plane], shrink=0.9)
                if k % ncols != ncols - 1 and k != n - 1:
                    cbar.set_label("")  # one label per row, on its last colour bar
        if shared_scale:
            colorbar(fig, image, list(axes), planes[0], shared, planes, shrink=0.9 if nrows > 1 else 1.0)
        fig.supxlabel(xlabel, fontsize=STYLE["axes.labelsize"])
        fig.supylabel(ylabel, fontsize=STYLE["axes.labelsize"])
        heading = NAMES[quantity] if title is None else title
        subject = subject_line(obj) if title is None else ""
        # what blanked pixels mean, once for the figure (the panels are too small to carry it)
        notes = list(dict.fromkeys(p.note for p in planes if p.note))
        lines = [heading] + ([subject] if subject else []) + notes
        fig.suptitle("\n".join(lines))
        save(fig, path)
    return fig


def _default_columns(n):
    """Columns for ``n`` panels: the fewest empty cells, then the squarest grid (wider than tall)."""
    if n <= 3:
        return n
    widest = 4 if n <= 8 else math.ceil(math.sqrt(n)) + 1
    best = min(range(2, widest + 1), key=lambda c: (c * math.ceil(n / c) - n, abs(c - math.ceil(n / c) - 0.5), -c))
    return best


def _panels_differ(planes):
    """True when the panels' brightest values differ by more than PER_PANEL_RATIO."""
    if planes[0].quantity == "spectral_index":
        return False
    peaks = []
    for p in planes:
        finite = np.abs(np.asarray(p.values, float))
        finite = finite[np.isfinite(finite)]
        peaks.append(float(finite.max()) * (1 * p.unit).value if finite.size else 0.0)
    peaks = [v for v in peaks if v > 0]
    return len(peaks) > 1 and max(peaks) > PER_PANEL_RATIO * min(peaks)
