"""What a map shows: one 2-D image of a Result or SkyMap in its plotted unit, with its label and geometry.

Part of the plotting package's internal API (see :mod:`rtrace.plot.core`).
"""

import dataclasses
from dataclasses import dataclass

import astropy.units as u
import numpy as np

from ..analysis.spectra import frequency_index, is_result, is_skymap, pixel_flux, spectral_index_map
from ..errors import InputError
from ..quantities import finite_number
from .text import angle_text, frequency_labels, prefix_for

__all__ = [
    "QUANTITIES",
    "NAMES",
    "Plane",
    "plane_of",
    "subject_line",
    "check_image",
    "check_quantity",
    "geometry",
    "is_pair",
    "limit",
    "common_prefix",
]

QUANTITIES = ("intensity", "tau", "emission_measure", "brightness_temperature", "spectral_index")

# the quantities' names in titles
NAMES = {
    "intensity": "Intensity",
    "tau": "Optical depth",
    "emission_measure": "Emission measure",
    "brightness_temperature": "Brightness temperature",
    "spectral_index": "Spectral index",
}


@dataclass
class Plane:
    """One 2-D image ready to draw, in its plotted unit."""

    values: np.ndarray  # (ny, nx)
    quantity: str
    label: str  # colour-bar label with unit
    tag: str  # frequency description, e.g. "1 GHz"
    unit: object  # astropy unit of ``values`` (for contour levels given as Quantities)
    per: object  # u.pix or u.beam for fluxes, else None
    pixel_scale: u.Quantity  # angle
    distance: object  # Quantity or None
    pixel_size: object  # Quantity or None
    beam: object = None  # radio_beam.Beam or None
    noise: object = None  # rms in the plotted unit, or None
    note: str = ""  # what blank pixels mean, written on the map


def subject_line(obj):
    """One line naming the snapshot and the ionization model (from the provenance), or ''."""
    provenance = getattr(obj, "provenance", None)
    if provenance is None and getattr(obj, "result", None) is not None:
        provenance = getattr(obj.result, "provenance", None)
    provenance = provenance or {}
    parts = []
    if provenance.get("source"):
        parts.append(str(provenance["source"]))
    if provenance.get("ionization"):
        # the model's name; its whole description (arguments, arrays) is in the FITS header
        text = str(provenance["ionization"]).split("(")[0].strip()
        parts.append("ionization: " + (text if len(text) <= 40 else text[:39] + "\N{HORIZONTAL ELLIPSIS}"))
    return " \N{MIDDLE DOT} ".join(parts)


def check_quantity(quantity):
    """Refuse (InputError) a quantity not in QUANTITIES."""
    if quantity not in QUANTITIES:
        raise InputError(f"quantity: unknown {quantity!r}; expected one of {', '.join(QUANTITIES)}")


def check_image(obj):
    """Refuse (InputError) anything but a Result or a SkyMap."""
    if not (is_result(obj) or is_skymap(obj)):
        raise InputError(f"obj: expected an rtrace Result or SkyMap, got {type(obj).__name__}")


# --- what to draw --------------------------------------------------------------------------------


def geometry(obj):
    """``(pixel_scale, distance, pixel_size)`` of a Result or SkyMap (distance and size may be None)."""
    distance = getattr(obj, "distance", None)
    if distance is None and hasattr(obj, "view"):
        distance = obj.view.distance
    return u.Quantity(obj.pixel_scale), distance, getattr(obj, "pixel_size", None)


def _beam(obj, index):
    if not is_skymap(obj):
        return None
    beams = getattr(obj, "beams", None)
    return beams[index] if beams is not None else obj.beam


def _noise(obj, index):
    rms = getattr(obj, "noise_rms", None) if is_skymap(obj) else None
    if rms is None:
        return None
    value = float(np.broadcast_to(u.Quantity(rms).to_value(u.Jy / u.beam), (len(obj.frequencies),))[index])
    # a zero rms is a noiseless plane: no 3-sigma floor, no asinh width from it
    return value if value > 0 else None


def is_pair(value):
    """A (nu1, nu2) pair: a 2-element Quantity, tuple or list (np.ndim fails on tuples of Quantities)."""
    if isinstance(value, u.Quantity):
        return value.ndim == 1 and len(value) == 2
    return isinstance(value, (tuple, list)) and len(value) == 2


def _spectral_pair(frequency):
    if not is_pair(frequency):
        raise InputError(f"frequency: the spectral index needs two frequencies (nu1, nu2), got {frequency!r}")
    return frequency[0], frequency[1]


def plane_of(obj, quantity, frequency):
    """Extract the image to draw as a Plane."""
    check_image(obj)
    check_quantity(quantity)
    if is_skymap(obj) and quantity in ("tau", "emission_measure"):
        # optical depth and emission measure are not observed: show those of the model behind the map
        if getattr(obj, "result", None) is None:
            raise InputError(f"quantity: {quantity!r} needs the Result behind the SkyMap (obj.result is None)")
        obj = obj.result
    scale, distance, size = geometry(obj)
    nu = u.Quantity(obj.frequencies).to_value(u.Hz, equivalencies=u.spectral())
    common = dict(quantity=quantity, pixel_scale=scale, distance=distance, pixel_size=size)

    if quantity == "spectral_index":
        f1, f2 = _spectral_pair(frequency)
        i1, i2 = frequency_index(obj, f1, "frequency"), frequency_index(obj, f2, "frequency")
        # both planes at one resolution (smoothed to a common beam where they differ), faint or
        # noisy pixels blanked (see spectral_index_map)
        alpha = spectral_index_map(obj, i1, i2)
        t1, t2 = frequency_labels(nu[[i1, i2]] * u.Hz)
        tag = f"{t1} \N{EN DASH} {t2}"
        if alpha.smoothed:
            b = alpha.beam
            tag += f"\nbeams matched: {angle_text(b.major)}\N{MULTIPLICATION SIGN}{angle_text(b.minor)}"
        plane = Plane(
            np.asarray(alpha),
            label=r"spectral index $\alpha$",
            tag=tag,
            unit=u.dimensionless_unscaled,
            per=None,
            beam=alpha.beam,
            **common,
        )
        reason = alpha.masking.replace("blank where ", "")
        plane.note = ("grey: " if np.isfinite(alpha).any() else "every pixel blank: ") + reason
        return plane

    index = 0 if frequency is None else frequency_index(obj, frequency, "frequency")
    tag = frequency_labels(nu[index] * u.Hz)[0]
    if quantity == "intensity":
        if is_skymap(obj):
            values = u.Quantity(obj.data[index]).to_value(u.Jy / u.beam)
            per, per_txt = u.beam, "beam"
        else:
            values = pixel_flux(obj)[index].to_value(u.Jy)
            per, per_txt = u.pix, "pixel"
        peak = np.nanmax(np.abs(values)) if np.isfinite(values).any() else 1.0
        factor, prefix = prefix_for(peak)
        noise = _noise(obj, index)
        return Plane(
            values / factor,
            label=f"intensity ({prefix}Jy {per_txt}$^{{-1}}$){_background_note(obj)}",
            tag=tag,
            unit=factor * u.Jy / per,
            per=per,
            beam=_beam(obj, index),
            noise=None if noise is None else noise / factor,
            **common,
        )
    if quantity == "tau":
        return Plane(
            np.asarray(obj.tau[index], float),
            label=r"optical depth $\tau$",
            tag=tag,
            unit=u.dimensionless_unscaled,
            per=None,
            **common,
        )
    if quantity == "emission_measure":
        em = obj.emission_measure.to_value(u.pc * u.cm**-6)
        what = (
            r"$\int n_e \sum Z^2 n_i\,dl$"
            if getattr(obj, "em_definition", "electrons") == "ion_term"
            else r"$\int n_e^2\,dl$"
        )
        return Plane(
            em, label=f"emission measure {what} (pc cm$^{{-6}}$)", tag="", unit=u.pc * u.cm**-6, per=None, **common
        )
    # brightness temperature
    if is_skymap(obj):
        # Rayleigh-Jeans: linear in Jy/beam, so noise stays symmetric (radio convention)
        tb = obj.brightness_temperature("rayleigh-jeans")[index].to_value(u.K)
        label = "brightness temperature, R\N{EN DASH}J (K)"
        noise = _noise(obj, index)
        if noise is not None:
            # the rms in K, by the same Rayleigh-Jeans equivalency (astropy) the map uses
            noise = (noise * u.Jy / u.beam).to_value(
                u.K, equivalencies=u.brightness_temperature(nu[index] * u.Hz, beam_area=_beam(obj, index).sr)
            )
    else:
        # Planck inversion (-> T_e where thick); its limit for zero intensity is 0 K, not NaN
        tb = obj.brightness_temperature("planck")[index].to_value(u.K)
        tb = np.where(np.asarray(obj.intensity[index].value) == 0, 0.0, tb)
        label = "brightness temperature (K)"
        noise = None
    return Plane(
        tb,
        label=label + _background_note(obj),
        tag=tag,
        unit=u.K,
        per=None,
        beam=_beam(obj, index),
        noise=noise,
        **common,
    )


def _background_note(obj):
    """A second label line ``background subtracted`` (or included) when a background was traced; '' otherwise."""
    from ..transfer.background import background_of

    if background_of(obj).kind == "none":
        return ""
    # on a line of its own: colour-bar labels of stacked panels must stay shorter than a panel
    return f"\nbackground {getattr(obj, 'background', 'subtracted') if is_skymap(obj) else 'subtracted'}"


def limit(value, plane, name):
    """A colour-scale end in the plotted unit of ``plane`` (a Quantity is converted), or None."""
    if value is None:
        return None
    if isinstance(value, u.Quantity):
        try:
            value = (value / (1 * plane.unit)).to_value(u.dimensionless_unscaled)
        except u.UnitsError:
            raise InputError(
                f"{name}: '{value}' cannot be converted to the unit of the {plane.quantity} map "
                f"({(1 * plane.unit).unit})"
            ) from None
    return finite_number(value, name, what="a number or a Quantity")


def common_prefix(planes):
    """Re-express intensity planes in one SI prefix (that of the brightest): one unit for every panel."""
    per_txt = "beam" if planes[0].per == u.beam else "pixel"
    base = u.Jy / planes[0].per
    to_base = [u.Quantity(p.unit).to_value(base) for p in planes]  # unit holds e.g. 1e-3 Jy/beam
    peak = max(
        float(np.nanmax(np.abs(p.values))) * f if np.isfinite(p.values).any() else 0.0
        for p, f in zip(planes, to_base, strict=True)
    )
    factor, prefix = prefix_for(peak if peak > 0 else 1.0)
    out = []
    for p, f in zip(planes, to_base, strict=True):
        scale = f / factor
        out.append(
            dataclasses.replace(
                p,
                values=p.values * scale,
                unit=factor * base,
                label=f"intensity ({prefix}Jy {per_txt}$^{{-1}}$)" + p.label.partition(")")[2],  # keeps the note
                noise=None if p.noise is None else p.noise * scale,
            )
        )
    return out
