"""The job's ``[[view]]`` tables as `~rtrace.View` objects."""

from astropy.coordinates import SkyCoord

from ..errors import ConfigError, InputError
from ..transfer import View


def build_views(job):
    """``[(name, View)]`` for the job's views (raises ConfigError naming the view)."""
    views = []
    for spec in job.views:
        kw = {k: spec[k] for k in ("los", "north", "npix", "width", "distance", "center") if k in spec}
        if "ra" in spec:
            kw["sky_position"] = SkyCoord(ra=spec["ra"], dec=spec["dec"], frame="icrs")
        try:
            views.append((spec["name"], View(**kw)))
        except InputError as exc:
            raise ConfigError(f"[[view]] '{spec['name']}': {exc}") from None
    return views
