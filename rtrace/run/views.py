"""The job's ``[[view]]`` sections as `~rtrace.View` objects."""

from astropy.coordinates import SkyCoord

from ..errors import ConfigError, InputError
from ..transfer import View

_VIEW_KEYS = ("los", "north", "npix", "width", "distance", "center")


def build_views(job):
    """``[(name, View)]`` for the job's views (raises ConfigError naming the view)."""
    views = []
    for spec in job.views:
        kw = {k: getattr(spec, k) for k in _VIEW_KEYS if getattr(spec, k) is not None}
        if spec.ra is not None:
            kw["sky_position"] = SkyCoord(ra=spec.ra, dec=spec.dec, frame="icrs")
        try:
            views.append((spec.name, View(**kw)))
        except InputError as exc:
            raise ConfigError(f"[[view]] '{spec.name}': {exc}") from None
    return views
