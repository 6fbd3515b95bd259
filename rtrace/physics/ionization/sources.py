r"""Photoionization by point sources (stars) in a snapshot that did not follow their radiation.

Static photoionization equilibrium in the on-the-spot approximation
(Osterbrock & Ferland 2006, sec. 2.3): each star emits ``Q`` hydrogen-
ionizing photons per second, and in equilibrium every photon balances one
recombination to an excited level of hydrogen (case B; captures to the
ground level make photons that are re-absorbed nearby). Along every
direction the ionized gas therefore extends until the recombinations in the
cone behind it use up the photons sent that way, which for uniform gas is
the Strömgren (1939) sphere,

.. math:: Q = \frac{4\pi}{3} R_S^3 \, n_e n_{H^+} \alpha_B(T).

The rays, their adaptive splitting and the photon-conserving front are
those of :mod:`rtrace.physics.ionization.raycast`. Dense clumps use up the
photons of the rays that meet them and leave shadows behind. With several
sources, each cell's recombinations are paid once: sources are taken in
order of decreasing ``Q``, and each one's rays pay only the share of a
cell's recombinations that brighter sources left unpaid. The merged region
then holds exactly the photons of all sources; where regions overlap, its
exact shape is approximate (the brighter source's photons are placed first).

A cell at the front is partly photoionized: a fraction ``f`` of its volume
is ionized, the rest neutral. It is given the uniform ionized fraction ``p``
whose recombinations (and free-free emission, both ``~ p^2``) equal those
of the ionized part, ``p^2 = f``, and the electron temperature of that part:
with a temperature from pressure or internal energy, that of fully
photoionized gas at the cell's pressure (the freed electrons add particles,
so ionized gas is cooler than neutral gas at the same pressure).

Collisional ionization equilibrium (:class:`CollisionalEquilibrium`,
case A) applies everywhere as well: hot shocked gas stays ionized whether
or not photons reach it. Where photons do reach it, its recombinations are
charged to them (case B, at the gas's temperature) even where electron
impact alone would keep it ionized; hot gas recombines slowly (alpha_B at
1e6 K is below 1 % of its value at 1e4 K), so this costs few photons.

Helium is singly ionized where hydrogen is photoionized
(``helium="single"``; the He I edge at 24.6 eV is crossed by most of the
ionizing photons of O stars, common practice), or left in its collisional
state (``"none"``).
"""

import numbers

import astropy.units as u
import numba
import numpy as np

from ...errors import InputError, warn_user
from .base import IonizationModel
from .cells import piece_pressure, temperature_from_pressure
from .composition import M_H, M_HE, Composition, check_choice
from .grid import box_slices, slabs
from .raycast import MAX_LEVEL, MEASURE, PAY, add_paid_share, box_cost, cast_source, limit_pyramid, sum_threads
from .tables import case_b_table, collisional_fractions, fill_demand

__all__ = ["IonizingSources", "Photoionization"]

_HELIUM = ("single", "none")
#: Below this electron temperature photoionized gas is implausible (a run without photoheating): H II
#: regions settle near 1e4 K, rarely below ~6000 K even at high metallicity (common practice).
_COLD_PHOTOIONIZED = 5000.0
#: HEALPix level of the first rays (768 of them: enough to keep both cores busy).
_ROOT_LEVEL = 3


def _as_quantity(value, unit, name, what, shape_text):
    if not isinstance(value, u.Quantity):
        raise InputError(
            f"{name}: expected {what} as an astropy Quantity (e.g. {shape_text}), got {type(value).__name__}"
        )
    if not value.unit.is_equivalent(unit):
        raise InputError(f"{name}: expected {what}, got unit '{value.unit}'")
    if np.iscomplexobj(value):
        raise InputError(
            f"{name}: complex values given; expected real {what} (casting would silently drop the imaginary parts)"
        )
    return np.asarray(value.to_value(unit), np.float64)


class Photoionization:
    """A solved photoionization state: the photoionized fraction per cell and the photon budget.

    Attributes
    ----------
    fraction : ndarray (nx, ny, nz) float32
        Photoionized fraction ``p`` of hydrogen (0..1) before collisional ionization is added.
    budget : list of dict
        Per source (in the order given): ``rate``, ``absorbed``, ``escaped``
        (left through the grid boundary), ``missed`` (never reached the grid;
        sources outside it) and ``assigned`` (recombinations of the cells the
        source ionized), all in s^-1.
    """

    def __init__(self, fraction, budget, sources):
        self.fraction = fraction
        self.budget = budget
        self._sources = sources

    def provenance(self):
        """Entries for the snapshot's provenance: the sources and where their photons went."""
        total = sum(b["rate"] for b in self.budget)
        absorbed = sum(b["absorbed"] for b in self.budget)
        escaped = sum(b["escaped"] for b in self.budget)
        missed = sum(b["missed"] for b in self.budget)
        assigned = sum(b["assigned"] for b in self.budget)
        share = (lambda x: f"{100 * x / total:.3g}%") if total > 0 else (lambda x: "0%")
        return {
            "ionizing_sources": self._sources.describe_sources(),
            "photon_budget": (
                f"Q = {total:.4g} s-1: {share(absorbed)} absorbed in the grid, {share(escaped)} left "
                f"it, {share(missed)} never reached it; recombinations in the ionized cells "
                f"{assigned:.4g} s-1"
            ),
        }


class IonizingSources(IonizationModel):
    """Gas photoionized by point sources, in static equilibrium, with shadows; collisional ionization too.

    Parameters
    ----------
    positions : `~astropy.units.Quantity` (n, 3) or (3,)
        Source positions in the grid's frame (cell ``(i, j, k)`` spans
        ``[origin + i dx, origin + (i + 1) dx)``), lengths.
    rates : `~astropy.units.Quantity` (n,) or scalar
        Hydrogen-ionizing photon rates ``Q`` (s^-1), finite and >= 0.
    composition : Composition, optional
        H/He mass fractions; default X=0.70, Y=0.28.
    ionized_temperature : `~astropy.units.Quantity`, optional
        Electron temperature of the photoionized gas, for runs that did not
        model its heating (a pure-hydrodynamics run has cold gas where the
        H II region should be). Photoionized cells get ``max(T, this)``;
        ``alpha_B`` is evaluated at it. Default: the snapshot's temperature;
        for a snapshot that gives pressure or internal energy, the
        temperature of fully photoionized gas at the cell's pressure.
    helium : {"single", "none"}
        Helium in the photoionized gas: singly ionized with hydrogen
        (default), or left in its collisional state.
    allow_outside : bool
        Accept sources outside the grid (their rays travel through empty
        space to it). Default False: a source outside is an error.
    rays_per_cell : float
        Rays split so that at least this many cross each (smallest) cell
        face: ray spacing at most ``cell / sqrt(rays_per_cell)``. Default 4,
        the fewest that leave no cell uncrossed (4 to 64); the cost grows in
        proportion.

    Notes
    -----
    Recombination coefficient: case B, Hui & Gnedin (1997); collisional
    ionization equilibrium from :class:`CollisionalEquilibrium` (case A).
    Validity: static equilibrium (no expanding fronts, no time dependence),
    one photon group (no hardening of the spectrum, no helium-ionizing
    photons of their own), no dust absorption, no diffuse field beyond the
    on-the-spot approximation. Rays are spaced at most half a cell apart up
    to 500 cells from a source (finest HEALPix level 10), and farther apart
    beyond. Cost: one pass over the grid for the recombination rates, then
    per source three casts of its ray tree: a sparser one that finds how far
    the photons reach, and the MEASURE and PAY passes over the ball that
    bounds (each cell is crossed by about a dozen ray segments). Memory: four
    float32 cubes, and per thread one float32 array over that ball.
    """

    #: False: a cell's state depends on the whole grid (the photons reach it through other cells).
    local = False

    def __init__(
        self,
        positions,
        rates,
        composition: Composition | None = None,
        ionized_temperature=None,
        helium: str = "single",
        allow_outside: bool = False,
        rays_per_cell: float = 4.0,
    ):
        super().__init__(composition)
        pos = _as_quantity(positions, u.cm, "positions", "lengths", "[[2, 2, 2]] * u.pc")
        if pos.ndim == 1:
            pos = pos.reshape(1, -1)
        if pos.ndim != 2 or pos.shape[1] != 3 or pos.shape[0] == 0:
            raise InputError(f"positions: expected shape (n, 3) (one x, y, z per source), got {pos.shape}")
        n_bad = int(np.count_nonzero(~np.all(np.isfinite(pos), axis=1)))
        if n_bad:
            raise InputError(f"positions: {n_bad} of {pos.shape[0]} sources have non-finite coordinates")
        q = _as_quantity(rates, u.s**-1, "rates", "photon rates (per second)", "[1e48] / u.s")
        q = np.atleast_1d(q)
        if q.ndim != 1 or q.size != pos.shape[0]:
            raise InputError(f"rates: {q.size} rate(s) for {pos.shape[0]} source position(s)")
        n_bad = int(np.count_nonzero(~np.isfinite(q) | (q < 0)))
        if n_bad:
            raise InputError(f"rates: {n_bad} of {q.size} rates are negative or not finite (expected Q >= 0 s-1)")
        self.positions = pos
        self.rates = q
        if ionized_temperature is None:
            self.ionized_temperature = None
        else:
            t = _as_quantity(ionized_temperature, u.K, "ionized_temperature", "a temperature", "1e4 * u.K")
            if t.ndim != 0 or not np.isfinite(t) or t <= 0:
                raise InputError(
                    f"ionized_temperature: expected one finite temperature > 0 K, got {ionized_temperature!r}"
                )
            self.ionized_temperature = float(t)
        self.helium = check_choice(helium, _HELIUM, "helium", "IonizingSources")
        if not isinstance(allow_outside, (bool, np.bool_)):
            raise InputError(f"allow_outside: expected True or False, got {allow_outside!r}")
        self.allow_outside = bool(allow_outside)
        rays = float(rays_per_cell) if isinstance(rays_per_cell, numbers.Real) else np.nan
        if not (np.isfinite(rays) and 4 <= rays <= 64):
            raise InputError(
                f"rays_per_cell: expected a number from 4 to 64 (fewer rays can miss cells), got {rays_per_cell!r}"
            )
        self.rays_per_cell = rays

    # -- description ----------------------------------------------------------------------------
    def describe_sources(self):
        """Every source as ``(x, y, z) pc Q=<rate> s-1``, separated by semicolons."""
        pc = u.pc.to(u.cm)
        return "; ".join(
            f"({x / pc:.4g}, {y / pc:.4g}, {z / pc:.4g}) pc Q={q:.4g} s-1"
            for (x, y, z), q in zip(self.positions, self.rates, strict=True)
        )

    def describe(self) -> str:
        """One-line description for provenance headers: sources, photon budget, temperature and helium."""
        t_ion = "snapshot T" if self.ionized_temperature is None else f"{self.ionized_temperature:g} K"
        return (
            f"sources({len(self.rates)} source(s), Q total {self.rates.sum():.4g} s-1; on-the-spot case B "
            f"alpha_B Hui & Gnedin 1997; photoionized T_e {t_ion}; He={self.helium}; plus collisional "
            f"equilibrium, case A; {self.composition.describe()})"
        )

    # -- the grid-wide solve --------------------------------------------------------------------
    def check_geometry(self, shape, cell_size, origin):
        """Raise InputError for sources outside the grid (unless allowed); call before any work."""
        lo = np.asarray(origin, float)
        hi = lo + np.asarray(shape, float) * np.asarray(cell_size, float)
        outside = ~np.all((self.positions >= lo) & (self.positions < hi), axis=1)
        if np.any(outside) and not self.allow_outside:
            pc = u.pc.to(u.cm)
            first = int(np.flatnonzero(outside)[0])
            x, y, z = self.positions[first] / pc
            raise InputError(
                f"positions: {int(outside.sum())} of {len(self.rates)} sources lie outside the grid "
                f"[{', '.join(f'{a / pc:.4g}' for a in lo)}] .. [{', '.join(f'{b / pc:.4g}' for b in hi)}) pc "
                f"(source {first} at ({x:.4g}, {y:.4g}, {z:.4g}) pc); positions are in the grid's frame, "
                "cell (i, j, k) spanning [origin + i dx, origin + (i+1) dx); pass allow_outside=True to let "
                "outside sources shine into the grid"
            )
        return outside

    def _photoionized_temperature(self, rho, pressure, fields):
        """Temperature [K] of fully photoionized gas at ``pressure`` (with collisional helium III)."""
        full = dict(fields, **{"<photo>": np.ones(rho.shape)})
        return temperature_from_pressure(self, rho, pressure, full)

    def _demand(self, grid, demand):
        """Fill ``demand`` (recombinations per unit volume if fully photoionized) piece by piece.

        Returns the number of cells whose photoionized gas would be colder than
        ``_COLD_PHOTOIONIZED`` (when ``ionized_temperature`` is not set).
        """
        comp = self.composition
        cold = []
        for lo, hi in slabs(grid.shape):
            inputs, fields = grid.read(lo, hi)
            rho = inputs["density"]
            if "temperature" in inputs:
                T = inputs["temperature"]
            else:
                T = self._photoionized_temperature(rho, piece_pressure(inputs), fields)
            # alpha_B at the photoionized gas's electron temperature (see electron_temperature)
            t_floor = 0.0 if self.ionized_temperature is None else self.ionized_temperature
            per_mass_h = comp.hydrogen / M_H
            per_mass_e = per_mass_h + (comp.helium / M_HE if self.helium == "single" else 0.0)
            out = demand[box_slices(lo, hi)]  # whole planes of a C-ordered cube: a contiguous view
            fill_demand(
                np.ascontiguousarray(T, np.float64).reshape(-1),
                np.ascontiguousarray(rho).reshape(-1),
                t_floor,
                per_mass_h,
                per_mass_e,
                case_b_table(),
                out.reshape(-1),
            )
            cold.append(np.maximum(T, t_floor) < _COLD_PHOTOIONIZED)
        return np.concatenate(cold, axis=0)

    def _levels(self, S, shape, cell, origin):
        """Finest and first HEALPix levels, split area and the distance to the farthest grid corner."""
        corners = origin + np.array([[a, b, c] for a in (0, 1) for b in (0, 1) for c in (0, 1)]) * (
            np.asarray(shape) * cell
        )
        far = float(np.max(np.sqrt(np.sum((corners - S) ** 2, axis=1))))
        split_area = float(np.min(cell)) ** 2 / self.rays_per_cell
        level = 0
        while level < MAX_LEVEL and 4 * np.pi / (12 * 4.0**level) * far**2 > split_area:
            level += 1
        spacing = far * np.sqrt(4 * np.pi / (12 * 4.0**level)) / float(np.min(cell))
        return level, min(_ROOT_LEVEL, level), split_area, far, spacing

    def _cast_one(self, S, rate, inside, demand, paid, shape, cell, origin, order_rng):
        """The passes of one source; updates ``paid`` and returns its photon budget (s^-1)."""
        max_level, root_level, split_area, far, spacing = self._levels(S, shape, cell, origin)
        n_roots = 12 * 4**root_level
        order = order_rng.permutation(n_roots).astype(np.int64)
        scale = float(np.prod(cell)) / rate
        no_box = np.zeros((0, 0, 0), np.float32)
        no_acc = np.zeros((1, 0, 0, 0), np.float32)
        no_limits = np.zeros(0, np.float32)
        zero = np.zeros(3, np.int64)
        margin = 4.0 * float(np.max(cell))
        # pass 1: how far each ray reaches (an estimate: the cell volume stands in for the sampled volume W)
        ends = np.empty(12 * 4**max_level, np.float32)
        cast_source(
            demand,
            paid,
            no_box,
            False,
            scale,
            no_acc,
            zero,
            origin,
            cell,
            S,
            root_level,
            max_level,
            split_area,
            inside,
            order,
            no_limits,
            False,
            PAY,
            ends,
            np.zeros((n_roots, 4)),
        )
        limit = np.where(np.isfinite(ends), np.minimum(far, 1.5 * ends + margin), far).astype(np.float32)
        threads = numba.get_num_threads()
        while True:
            r_box = float(limit.max())
            lo = np.clip(np.floor((S - r_box - origin) / cell).astype(np.int64), 0, shape)
            hi = np.clip(np.ceil((S + r_box - origin) / cell).astype(np.int64) + 1, 0, shape)
            box = tuple(int(v) for v in hi - lo)
            acc = np.zeros((threads,) + box, np.float32)
            weight = np.empty(box, np.float32)
            cost = np.empty(box, np.float32)
            limits = limit_pyramid(limit, max_level)
            cast_source(
                demand,
                paid,
                no_box,
                False,
                scale,
                acc,
                lo,
                origin,
                cell,
                S,
                root_level,
                max_level,
                split_area,
                inside,
                order,
                limits,
                True,
                MEASURE,
                ends,
                np.zeros((n_roots, 4)),
            )
            sum_threads(acc, weight)
            box_cost(demand, paid, weight, lo, cost)
            stats = np.zeros((n_roots, 4))
            cast_source(
                demand,
                paid,
                cost,
                True,
                scale,
                acc,
                lo,
                origin,
                cell,
                S,
                root_level,
                max_level,
                split_area,
                inside,
                order,
                limits,
                True,
                PAY,
                ends,
                stats,
            )
            short = np.isnan(ends)
            if np.any(short):
                # Rays that still had photons where their measurement ended: measure them, and their
                # neighbours (the 64 finest rays of the same pixel three levels up, which the extended rays'
                # share of W would otherwise push out next), to the end of the grid.
                block = min(64, short.size)
                near = np.repeat(short.reshape(-1, block).any(axis=1), block)
                limit[near] = far
                acc = None
                continue
            paid_volume = cost  # reused: the cost is no longer needed
            sum_threads(acc, paid_volume)
            assigned = np.zeros(box[0])
            add_paid_share(paid_volume, weight, lo, demand, paid, assigned)
            break
        absorbed, escaped, missed = (float(v) * rate for v in stats[:, :3].sum(axis=0))
        return (
            {
                "rate": rate,
                "absorbed": absorbed,
                "escaped": escaped,
                "missed": missed,
                "assigned": float(assigned.sum()) * float(np.prod(cell)),
            },
            spacing,
        )

    def _cast(self, demand, paid, shape, cell, origin, outside):
        """All sources, brightest first; ``paid`` accumulates their shares. Returns the budgets."""
        budget = [None] * len(self.rates)
        order_rng = np.random.default_rng(0)
        sparse = []
        for s in np.argsort(-self.rates, kind="stable"):
            rate = float(self.rates[s])
            if rate == 0.0:
                budget[s] = {"rate": 0.0, "absorbed": 0.0, "escaped": 0.0, "missed": 0.0, "assigned": 0.0}
                continue
            budget[s], spacing = self._cast_one(
                self.positions[s],
                rate,
                not bool(outside[s]),
                demand,
                paid,
                np.asarray(shape, np.int64),
                cell,
                origin,
                order_rng,
            )
            if spacing > 1.0001 / np.sqrt(self.rays_per_cell):
                sparse.append((int(s), spacing))
        if sparse:
            s, spacing = max(sparse, key=lambda item: item[1])
            warn_user(
                f"sources: rays are up to {spacing:.3g} cells apart at the far side of the grid from "
                f"source {s} (finest ray level {MAX_LEVEL}); fronts there are resolved more coarsely"
            )
        return budget

    def photoionize(self, grid):
        """Solve the photoionized fraction of every cell of ``grid`` (a grid reader).

        Returns
        -------
        Photoionization
        """
        shape = grid.shape
        cell = np.asarray(grid.cell_size, float) * np.ones(3)
        origin = np.asarray(grid.origin, float)
        outside = self.check_geometry(shape, cell, origin)
        demand = np.empty(shape, np.float32)
        cold = self._demand(grid, demand)
        paid = np.zeros(shape, np.float32)
        budget = self._cast(demand, paid, shape, cell, origin, outside)
        photo = np.sqrt(paid, out=paid)
        n_cold = int(np.count_nonzero(cold & (photo > 0.5)))
        if n_cold and self.ionized_temperature is None:
            warn_user(
                f"sources: {n_cold} photoionized cells are colder than {_COLD_PHOTOIONIZED:g} K; "
                "photoionized gas is near 1e4 K, so the run probably did not model its heating. Set "
                "ionized_temperature (e.g. 1e4 K): alpha_B and the free-free emission depend on it"
            )
        return Photoionization(photo, budget, self)

    # -- cells, once the photoionized fraction is known -----------------------------------------
    def _species(self, rho, T, fields):
        photo = fields.get("<photo>")
        x_coll, y1, y2, y3 = collisional_fractions(T, "A")
        p = np.zeros_like(x_coll) if photo is None else np.asarray(photo, np.float64)
        x = np.maximum(x_coll, p)
        if self.helium == "single":
            y1 = np.minimum(y1, 1.0 - p)
            y2 = 1.0 - y1 - y3
        n_h = self.composition.hydrogen_number_density(rho)
        n_he = self.composition.helium_number_density(rho)
        n_hii = x * n_h
        # (with the cells where photons, not collisions, set the ionization: see electron_temperature)
        return {
            "n_e": n_hii + (y2 + 2.0 * y3) * n_he,
            "n_HI": (1.0 - x) * n_h,
            "n_HII": n_hii,
            "n_HeI": y1 * n_he,
            "n_HeII": y2 * n_he,
            "n_HeIII": y3 * n_he,
            "photo_dominated": p > x_coll,
        }

    def temperature_at_pressure(self, rho, pressure, fields):
        """Collisional-equilibrium gas at ``pressure``; photoionized cells at their ionized phase's temperature.

        A cell the front crosses is two-phase (see the module notes): its
        electrons are in the photoionized part, fully ionized at the cell's
        pressure.
        """
        photo = fields.get("<photo>")
        neutral = {k: v for k, v in fields.items() if k != "<photo>"}
        T = temperature_from_pressure(self, rho, pressure, neutral)
        if photo is None:
            return T
        lit = np.asarray(photo) > collisional_fractions(T, "A")[0]
        if np.any(lit):
            T = T.copy()
            T[lit] = self._photoionized_temperature(rho[lit], pressure[lit], {k: v[lit] for k, v in neutral.items()})
        return T

    def electron_temperature(self, T, species, fields):
        """Electron temperature [K]: at least ``ionized_temperature`` where photoionization dominates, else ``T``."""
        if self.ionized_temperature is None:
            return T
        return np.where(species["photo_dominated"], np.maximum(T, self.ionized_temperature), T)
