"""Drawing one plane on an axes: the image with sky offsets (east left), contours, beam ellipse, scale bar, note.

Part of the plotting package's internal API (see :mod:`rtrace.plot.core`).
"""

import astropy.units as u
import numpy as np
from matplotlib import patheffects
from matplotlib.patches import Ellipse

from ..errors import InputError, warn_user
from .text import angle_text, axis_unit, choose_scale_bar

__all__ = ["BEAM_DRAW_LIMIT", "draw_plane"]

# A beam whose major axis exceeds this fraction of the field's shorter side cannot be drawn
# in a corner without covering the data: it is left out, with a warning.
BEAM_DRAW_LIMIT = 0.5


def _contour_levels(contours, norm, plane):
    if contours is None:
        return None
    if isinstance(contours, (int, np.integer)) and not isinstance(contours, bool):
        if contours < 1:
            raise InputError(f"contours: the number of levels must be at least 1, got {contours}")
        # evenly spaced in the colour stretch, so contours follow what the colours show
        if plane.noise is not None and _sequential(plane) and norm.vmax > 3.0 * plane.noise:
            # a noisy map: the lowest contour at 3 rms (common practice in radio maps)
            start = float(norm(3.0 * plane.noise))
            return np.asarray(norm.inverse(np.linspace(start, 1.0, int(contours) + 1)[:-1]), float)
        return np.asarray(norm.inverse(np.linspace(0.0, 1.0, int(contours) + 2)[1:-1]), float)
    if isinstance(contours, u.Quantity):
        try:
            levels = contours.to_value(plane.unit)
        except u.UnitsError:
            try:
                # a bare flux unit is taken per pixel / per beam, like the map
                levels = (contours / plane.per).to_value(plane.unit) if plane.per is not None else None
            except u.UnitsError:
                levels = None
            if levels is None:
                raise InputError(
                    f"contours: unit '{contours.unit}' does not convert to the map unit '{plane.unit}'"
                ) from None
    else:
        try:
            levels = np.asarray(contours, float)
        except (TypeError, ValueError):
            raise InputError(
                f"contours: expected None, a number of levels or a list of values, got {contours!r}"
            ) from None
    levels = np.unique(np.atleast_1d(levels).ravel())
    if levels.size == 0 or not np.all(np.isfinite(levels)):
        raise InputError(f"contours: levels must be finite numbers, got {contours!r}")
    return levels


def _sequential(plane):
    return plane.quantity != "spectral_index"


def draw_plane(ax, plane, norm, cmap, *, contours, scale_bar, title, show_beam=True, show_note=True):
    """Draw one plane on ``ax``; returns the AxesImage."""
    ny, nx = plane.values.shape
    width_arcsec = max(nx, ny) * plane.pixel_scale.to_value(u.arcsec)
    aunit, aname = axis_unit(width_arcsec)
    s = plane.pixel_scale.to_value(aunit)
    half_x, half_y = nx / 2 * s, ny / 2 * s
    # left edge is column 0, the most easterly: east offsets increase to the left
    extent = (half_x, -half_x, -half_y, half_y)
    image = ax.imshow(
        np.ma.masked_invalid(plane.values), origin="lower", extent=extent, norm=norm, cmap=cmap, interpolation="nearest"
    )
    ax.set_xlabel(f"east offset ({aname})")
    ax.set_ylabel(f"north offset ({aname})")
    ink = "white" if _sequential(plane) else "black"
    halo = [patheffects.withStroke(linewidth=2.0, foreground="black" if ink == "white" else "white")]

    levels = _contour_levels(contours, norm, plane)
    if levels is not None:
        xc = -(np.arange(nx) + 0.5 - nx / 2) * s
        yc = (np.arange(ny) + 0.5 - ny / 2) * s
        cs = ax.contour(
            xc, yc, np.ma.masked_invalid(plane.values), levels=levels, colors=ink, linewidths=0.7, alpha=0.8
        )
        cs.set_gid("contours")

    pad = 0.05 * 2 * half_x
    if show_beam and plane.beam is not None and not _beam_fits(plane, aunit, 2 * min(half_x, half_y)):
        show_beam = False
    if show_beam and plane.beam is not None:
        major = u.Quantity(plane.beam.major).to_value(aunit)
        minor = u.Quantity(plane.beam.minor).to_value(aunit)
        pa = u.Quantity(plane.beam.pa).to_value(u.deg)
        radius = major / 2
        # Ellipse 'angle' turns the width axis anticlockwise from +x in data coordinates; with
        # x = east, width = minor and height = major, angle = -PA puts the major axis along
        # (east, north) = (sin PA, cos PA), i.e. from north through east.
        beam = Ellipse(
            (half_x - pad - radius, -half_y + pad + radius),
            width=minor,
            height=major,
            angle=-pa,
            facecolor="white" if ink == "white" else "0.35",
            edgecolor="black",
            linewidth=0.8,
            alpha=0.85,
            zorder=5,
        )
        beam.set_gid("beam")
        ax.add_patch(beam)

    if scale_bar is not False and plane.distance is not None:
        if scale_bar is None or scale_bar is True:
            size = plane.pixel_size
            field = nx * (
                u.Quantity(size) if size is not None else plane.pixel_scale.to_value(u.rad) * u.Quantity(plane.distance)
            )
            length = choose_scale_bar(field)
        else:
            length = u.Quantity(scale_bar)
            if not length.unit.is_equivalent(u.pc) or length.ndim != 0 or not length.value > 0:
                raise InputError(f"scale_bar: expected None, False or a positive length, got {scale_bar!r}")
        angle = (length / u.Quantity(plane.distance)).to_value(u.dimensionless_unscaled) * u.rad
        bar = angle.to_value(aunit)
        x_end = -half_x + pad  # west end, near the right edge
        y_bar = -half_y + pad
        (line,) = ax.plot(
            [x_end + bar, x_end],
            [y_bar, y_bar],
            color=ink,
            linewidth=2.5,
            solid_capstyle="butt",
            zorder=6,
            path_effects=halo,
        )
        line.set_gid("scale_bar")
        text = ax.annotate(
            f"{length.value:g} {length.unit.to_string()}",
            (x_end + bar / 2, y_bar),
            xytext=(0, 3),
            textcoords="offset points",
            ha="center",
            va="bottom",
            color=ink,
            fontsize=9,
            zorder=6,
            path_effects=halo,
        )
        text.set_gid("scale_bar_label")
        # the plot call must not change the limits set by imshow
        ax.set_xlim(half_x, -half_x)
        ax.set_ylim(-half_y, half_y)
    if title is not None:
        ax.set_title(title)
    if plane.note and show_note:
        # inside the frame, top left (usually empty sky), on a light box so it reads over any colour
        note = ax.annotate(
            plane.note,
            (0.0, 1.0),
            xycoords="axes fraction",
            xytext=(3, -3),
            textcoords="offset points",
            ha="left",
            va="top",
            fontsize=7,
            color="0.15",
            bbox={"boxstyle": "round,pad=0.2", "facecolor": "white", "edgecolor": "none", "alpha": 0.75},
            zorder=7,
        )
        note.set_gid("note")
    return image


def _beam_fits(plane, aunit, field):
    """False (with a warning) when the beam is too large to draw in a corner of the field."""
    major = u.Quantity(plane.beam.major).to_value(aunit)
    if major <= BEAM_DRAW_LIMIT * field:
        return True
    warn_user(
        f"the beam ({angle_text(plane.beam.major)} FWHM) is larger than {BEAM_DRAW_LIMIT:g} of the "
        f"field ({angle_text(field * aunit)}): the map shows mostly the beam's shape, and its ellipse "
        f"is not drawn over the data",
        UserWarning,
    )
    return False
