"""A comparison's figure (:func:`plot_comparison`): observation, model and residual side by side.

The panels are drawn on the observed pixel grid with astropy's WCS axes (RA
and Dec ticks, rotated with the grid if the grid is rotated); the horizontal
axis is flipped if needed so that east is on the left. Observation and model
share one colour scale (the stretch rules of :func:`rtrace.plot.plot_map`); the residual
has a symmetric diverging scale about zero. Pixels outside the common
footprint are grey. The observed beam is drawn in the lower left (south-east)
corner of each panel.
"""

import math

import astropy.units as u
import matplotlib
import numpy as np
from astropy.wcs.utils import pixel_to_skycoord, skycoord_to_pixel
from matplotlib import colors
from matplotlib.patches import Ellipse

from ..errors import InputError
from .core import STYLE, Plane, check_stretch, colorbar, make_norm, new_figure, prefix_for, resolve_cmap, save

__all__ = ["plot_comparison"]

_BLANK = "0.75"  # colour of pixels outside the common footprint


def _sky_directions(wcs, shape):
    """Unit vectors of north and east in pixel coordinates (x = column, y = row) at the image centre."""
    ny, nx = shape
    x0, y0 = (nx - 1) / 2, (ny - 1) / 2
    c = pixel_to_skycoord(x0, y0, wcs)
    step = 1.0 * u.arcsec
    out = []
    for pa in (0.0, 90.0):
        p = c.directional_offset_by(pa * u.deg, step)
        x, y = skycoord_to_pixel(p, wcs)
        v = np.array([float(x) - x0, float(y) - y0])
        out.append(v / np.linalg.norm(v))
    return out[0], out[1]


def _beam_patch(ax, beam, wcs, shape, scale_arcsec, face):
    """The beam ellipse in pixel coordinates: major axis along PA from north through east."""
    north, east = _sky_directions(wcs, shape)
    pa = math.radians(beam.pa.to_value(u.deg))
    direction = math.cos(pa) * north + math.sin(pa) * east
    angle = math.degrees(math.atan2(direction[1], direction[0]))
    major = beam.major.to_value(u.arcsec) / scale_arcsec
    minor = beam.minor.to_value(u.arcsec) / scale_arcsec
    ny, nx = shape
    pad = 0.06 * max(nx, ny) + major / 2
    # lower left on screen: the east side (x axis is flipped when east points to +x)
    x = -0.5 + pad if east[0] < 0 else nx - 0.5 - pad
    ellipse = Ellipse(
        (x, -0.5 + pad),
        width=major,
        height=minor,
        angle=angle,
        facecolor=face,
        edgecolor="black",
        linewidth=0.8,
        alpha=0.85,
        zorder=5,
    )
    ellipse.set_gid("beam")
    ax.add_patch(ellipse)


def _plane(values, label, comparison, unit):
    return Plane(
        values=values,
        quantity="intensity",
        label=label,
        tag="",
        unit=unit,
        per=u.beam,
        pixel_scale=comparison.pixel_scale,
        distance=None,
        pixel_size=None,
        beam=comparison.beam,
    )


def plot_comparison(comparison, path=None, *, stretch="asinh", cmap=None, residual_cmap="RdBu_r", title=None):
    """Three panels: observation, model (matched colour scale) and residual (symmetric scale).

    Parameters
    ----------
    comparison : `~rtrace.comparison.Comparison`
    path : str or path-like, optional
        Save the figure there, atomically (format from the suffix, PNG without one).
    stretch : {"asinh", "log", "linear"}
        Stretch of the shared observation/model scale (as in :func:`rtrace.plot.plot_map`).
    cmap : str or Colormap, optional
        Colour map of observation and model (default that of rtrace intensity maps).
    residual_cmap : str or Colormap
        Diverging colour map of the residual, centred on zero.
    title : str, optional
        Figure title; default the frequency and the flux ratio.

    Returns
    -------
    `~matplotlib.figure.Figure`
    """
    check_stretch(stretch)
    obs = comparison.observation.to_value(u.Jy / u.beam)
    model = comparison.model.to_value(u.Jy / u.beam)
    resid = comparison.residual.to_value(u.Jy / u.beam)
    inside = comparison.footprint
    model = np.where(np.isfinite(model), model, np.nan)
    peak = float(np.nanmax(np.abs(np.concatenate([obs[np.isfinite(obs)], model[np.isfinite(model)]]))))
    factor, prefix = prefix_for(peak if peak > 0 else 1.0)
    unit = factor * u.Jy / u.beam
    p_obs = _plane(obs / factor, f"{prefix}Jy beam$^{{-1}}$", comparison, unit)
    p_mod = _plane(model / factor, f"{prefix}Jy beam$^{{-1}}$", comparison, unit)
    rmax = float(np.nanmax(np.abs(resid[inside]))) if inside.any() else 0.0
    rfactor, rprefix = prefix_for(rmax if rmax > 0 else 1.0)
    half = rmax / rfactor if rmax > 0 else 1.0
    p_res = _plane(resid / rfactor, f"{rprefix}Jy beam$^{{-1}}$", comparison, rfactor * u.Jy / u.beam)

    if residual_cmap is None:
        residual_cmap = "RdBu_r"
    try:
        rcmap = (
            residual_cmap if isinstance(residual_cmap, colors.Colormap) else matplotlib.colormaps[residual_cmap]
        ).with_extremes(bad=_BLANK)
    except KeyError:
        raise InputError(f"residual_cmap: unknown colour map {residual_cmap!r}") from None
    scmap = resolve_cmap(cmap, "intensity").with_extremes(bad=_BLANK)
    shape = comparison.shape
    ny, nx = shape
    _, east = _sky_directions(comparison.wcs, shape)
    scale = comparison.pixel_scale.to_value(u.arcsec)

    with matplotlib.rc_context(STYLE):
        fig = new_figure((14.0, 4.6))
        norm = make_norm([p_obs, p_mod], stretch)
        rnorm = colors.Normalize(vmin=-half, vmax=half)
        panels = (
            (p_obs, norm, scmap, "observation"),
            (p_mod, norm, scmap, "model"),
            (p_res, rnorm, rcmap, "residual (observation \N{MINUS SIGN} model)"),
        )
        axes, images = [], []
        for k, (plane, nrm, cm, name) in enumerate(panels):
            ax = fig.add_subplot(1, 3, k + 1, projection=comparison.wcs)
            image = ax.imshow(
                np.ma.masked_invalid(plane.values), origin="lower", norm=nrm, cmap=cm, interpolation="nearest"
            )
            if east[0] > 0:  # east toward +column: flip so that east is on the left
                ax.set_xlim(nx - 0.5, -0.5)
            else:
                ax.set_xlim(-0.5, nx - 0.5)
            ax.set_ylim(-0.5, ny - 0.5)
            ax.set_title(name)
            # a faint coordinate grid shows how the pixel grid lies on the sky (rotated or not)
            ax.coords.grid(color="white" if k < 2 else "0.4", alpha=0.35, linestyle=":", linewidth=0.6)
            ra, dec = ax.coords[0], ax.coords[1]
            ra.set_axislabel("right ascension" if k == 0 else " ")
            dec.set_axislabel("declination" if k == 0 else " ")
            if k > 0:
                dec.set_ticklabel_visible(False)
            _beam_patch(ax, comparison.beam, comparison.wcs, shape, scale, face="white" if k < 2 else "0.35")
            axes.append(ax)
            images.append(image)
        # one colour bar for observation and model (a matched scale), one for the residual
        colorbar(fig, images[1], axes[:2], p_mod, norm, [p_obs, p_mod], shrink=0.85)
        cbar = fig.colorbar(images[2], ax=axes[2], shrink=0.85)
        cbar.set_label(p_res.label)
        nu = comparison.frequency.to_value(u.GHz)
        if title is None:
            title = f"{nu:.4g} GHz: model / observed flux = {comparison.flux_ratio:.3f} over the common footprint"
        fig.suptitle(title)
    # outside the style context, as the figure was always saved: at the figure's own dpi
    save(fig, path)
    return fig
