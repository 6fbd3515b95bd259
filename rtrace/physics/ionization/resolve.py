"""Turn a user's ionization choice (a model, a name or a fraction array) into a model."""

import difflib
import numbers

import astropy.units as u
import numpy as np

from ...errors import InputError
from .base import IonizationModel
from .collisional import CollisionalEquilibrium
from .composition import Composition
from .saha import SahaEquilibrium
from .simple import FullyIonized, TemperatureThreshold
from .supplied import SuppliedFraction

__all__ = ["resolve_ionization", "MODEL_NAMES", "RESERVED_NAMES", "DEFAULT_MODEL"]

#: Model names a string may give (case-insensitive).
MODEL_NAMES = ("full", "threshold", "saha", "collisional")
#: Strings that name a model, never a snapshot field: :data:`MODEL_NAMES` and ``"sources"`` (which needs its
#: sources, so it is refused as a bare name).
RESERVED_NAMES = MODEL_NAMES + ("sources",)
#: The model of a snapshot given mass density and no ionization.
DEFAULT_MODEL = "full"


def resolve_ionization(spec, composition: Composition | None = None, helium: str | None = None) -> IonizationModel:
    """Turn a user-facing ionization specification into a model.

    Parameters
    ----------
    spec : IonizationModel, str, numpy.ndarray, astropy.units.Quantity or float
        * an :class:`IonizationModel` (e.g. :class:`IonizingSources`):
          returned as is (``composition`` and ``helium`` must then be None,
          the model carries its own);
        * ``"full"`` -> :class:`FullyIonized`, ``"threshold"`` ->
          :class:`TemperatureThreshold` (default threshold),
          ``"saha"`` -> :class:`SahaEquilibrium`, ``"collisional"`` ->
          :class:`CollisionalEquilibrium` (case-insensitive);
        * an array, dimensionless Quantity or number: the hydrogen ionized
          fraction -> :class:`SuppliedFraction`.
    composition : Composition, optional
        Mass fractions for a newly built model; default X=0.70, Y=0.28.
    helium : str, optional
        Helium mode for a newly built model: ``"single"`` (default) or
        ``"double"`` for ``"full"``/``"threshold"``; ``"single"``,
        ``"double"`` or ``"none"`` for a supplied fraction (helium follows
        the hydrogen fraction). Not accepted with ``"saha"`` or
        ``"collisional"``, which compute the helium state.

    Returns
    -------
    IonizationModel

    Raises
    ------
    InputError
        Unknown model name (the message lists the valid names), ``helium``
        given with a model that computes helium, or an unsupported type.
    """
    if isinstance(spec, IonizationModel):
        if composition is not None or helium is not None:
            raise InputError(
                f"composition, helium: not used with a model instance ({spec.describe()}), "
                "which carries its own; give them to the model's constructor"
            )
        return spec
    if isinstance(spec, str):
        name = spec.strip().lower()
        if name == "full":
            return FullyIonized(composition, helium or "single")
        if name == "threshold":
            return TemperatureThreshold(composition=composition, helium=helium or "single")
        if name in ("saha", "collisional"):
            if helium is not None:
                raise InputError(f"helium: not used by '{name}', which solves for the helium ionization state")
            return SahaEquilibrium(composition) if name == "saha" else CollisionalEquilibrium(composition)
        if name == "sources":
            raise InputError(
                "ionization: 'sources' needs the stars' positions and ionizing photon rates; pass "
                "rtrace.physics.ionization.IonizingSources(positions=..., rates=...) instead"
            )
        close = difflib.get_close_matches(name, RESERVED_NAMES, n=1)
        hint = f"did you mean {close[0]!r}? " if close else ""
        raise InputError(
            f"ionization: unknown model {spec!r}; {hint}valid names: {', '.join(MODEL_NAMES)} "
            "(or an ionized-fraction array, or a model instance such as IonizingSources)"
        )
    if isinstance(spec, (np.ndarray, u.Quantity)) or (isinstance(spec, numbers.Real) and not isinstance(spec, bool)):
        return SuppliedFraction(spec, composition, helium)
    raise InputError(
        f"ionization: expected an IonizationModel, one of {', '.join(MODEL_NAMES)}, "
        f"or an ionized-fraction array; got {type(spec).__name__}"
    )
