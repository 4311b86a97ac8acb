"""Staged (delta) loading of a basin with compaction.

Staged loading (PHYSICS.md 9.1-9.2). Each stage deposits an isopach (thickness
as deposited, at the top of the pile) of one lithology. Before the stage is
solved, the older stages are re-compacted under it (grain thickness of every
stage conserved, :mod:`gridflex.basin.compaction`), so their thickness and bulk
density follow their new burial. The load increment of the stage is the change
of the column weight relative to the state left by the previous stage,

    dq = g [ (M' - M) + rho_w (h_w' - h_w) ],

with M the sediment mass per area (pores water-saturated), h_w the water depth
above the solid surface and primes the state with the new stage in place but
the plate not yet moved. The increment is solved with the previous deflection
frozen and the te of the stage (its time of loading; Watts, Karner & Steckler
1982, eq. 9.1), with the self-consistent infill of :func:`gridflex.solve_with_infill`:
water up to sea level, or sediment up to the stage's base level. With a
constant te and water infill the response is path independent (the sum of the
increments is the solve of the total: the equilibrium of a column is unique);
with a te that changes from stage to stage it is not, as intended, and neither
is a moat filled with sediment (each stage fills only the space it makes).
A negative isopach erodes: its (compacted) thickness is removed from the top of the
pile, youngest stage first. Compaction is taken as irreversible (common practice): what
remains keeps the thickness and porosity of its deepest burial, and is compacted
further only once a later stage buries it deeper than that; the plate unloads by the
mass removed (and the water or sediment that fills the rebound). Erosion deeper than
the pile is refused.
Removing the top stage (:meth:`StagedBasin.remove_stage`) decompacts the rest
and unloads the plate with water infill and the te the stage was loaded with.

The moat-fill sediment of a stage becomes part of that stage (its grains are
added to it). The infill solver carries the fill with its mass as the top of the
stage, compacted within the stage (``sediment_mass`` of
:func:`gridflex.solve_with_infill`), inside its one fixed-point iteration; it does not
compact the older stages under the fill, so the stage is then settled: the remaining
difference between the column the solver carried and the compacted column is solved
again (new fill joining the stage) until it would move the plate by less than the
tolerance. Under water that difference vanishes (the pore water the older stages expel
is replaced by the deeper water above them: the same load), so a submerged stage
needs no settling pass; above sea level the expelled water is lost and passes follow.
(Carrying the fill with the stage's mean bulk density instead, as before,
left remainders that took 3-4 passes, each a full infill iteration.) Where the fill
actually deposited is lighter than carried, the plate rebounds and would lift filled
cells above the base level; before each pass the fill is trimmed back to the level
(the excess removed, at most the fill), so no filled cell ends more than about the
tolerance above its base level (the trimming converges geometrically: by a factor of
about 0.5 per pass with te = 0, faster with flexure). Every stage,
whatever its te (a number, or a grid with margins and breaks, solved by finite
differences), goes through the same infill solve: sediment up to the base level,
water below sea level, air above. Limitations: the fill takes only space made by
the deflection, not the space compaction of older stages opens; with
``edges="infinite"`` no fill is put on the outer ring of cells (the padding of
the solve copies it, and its state is not kept between stages).

Flexural backstripping lives in :mod:`gridflex.basin.backstrip`.

Depths, thicknesses and subsidence are positive DOWN here (m); elevations and
levels positive up; ages in years before present.
"""

from __future__ import annotations

import dataclasses
import logging
import math
import warnings
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import xarray as xr

from gridflex.basin.compaction import (
    Lithology,
    bulk_density,
    check_grains_sink,
    compacted_thickness,
    layer_grains,
    saturated_column,
)
from gridflex.basin.compaction import lithology as as_lithology
from gridflex.basin.horizons import accommodation_created, horizon_ages, horizon_depths
from gridflex.basin.stretching import Stretching
from gridflex.constants import SEA_WATER_DENSITY
from gridflex.engine import SPECTRAL_EDGES
from gridflex.errors import EdgeLoadWarning, InputError
from gridflex.grid import check_grid, grid_values
from gridflex.infill import Infill, InnerSolverCache, solve_with_infill
from gridflex.io.provenance import provenance_attrs
from gridflex.memory import check_memory
from gridflex.plate import Plate
from gridflex.progress import Progress
from gridflex.validation import check_choice, check_density, check_number

__all__ = [
    "ISOPACHS",
    "Stage",
    "StagedBasin",
    "stage_loading",
]

log = logging.getLogger(__name__)

Level = float | xr.DataArray
TeLike = float | xr.DataArray

ISOPACHS = ("deposited", "present")
"""Accepted values of ``stage_loading(isopachs=...)``."""

_SHIFT_SHARE = 0.15
"""Largest relative distance of a kept shift density from half the densest fill of a
stage (the shift is a numerical choice: the fixed point does not depend on it, and its
contraction bound max(c, rho_f - c) / (rho_m - c) changes little: with fills of 1670 and
1870 kg/m^3, the shale and sandstone stages of tests/benchmarks/basin_large.py, and
rho_m = 3300 kg/m^3, 0.42 with a shared c instead of 0.40)."""

_SETTLE_PASSES = 40  # trimming converges geometrically (ratio ~0.5 with te = 0, less with flexure)
_SNAPSHOT_GRIDS = 11  # grids kept per recorded stage (see _Snapshot)


@dataclass(frozen=True)
class Stage:
    """One depositional stage of a basin fill.

    Parameters
    ----------
    thickness : xarray.DataArray
        Isopach of the stage as deposited (m), dims ``("y", "x")``. Negative cells are
        erosion: that (compacted) thickness is removed from the top of the pile before
        the stage is solved; what remains keeps the porosity of its deepest burial
        (compaction is irreversible) and the plate unloads.
    age : float
        Age of the stage (years before present).
    lithology : str or Lithology, default "shale"
        A name of :data:`gridflex.basin.compaction.LITHOLOGIES` or a Lithology.
    base_level : float or xarray.DataArray, optional
        Elevation (m, positive up) up to which sediment fills the new flexural
        depression of this stage; ``None``: the depression fills with water up to
        sea level (air above).
    sea_level : float, optional
        Sea level at the time of the stage (m, positive up, present datum);
        ``None``: the basin's sea level. A change loads (or unloads) every
        submerged cell with the water column, up to the grid edge.
    te : float or xarray.DataArray, optional
        Elastic thickness at the time of loading (m); ``None``: the plate's te.
    """

    thickness: xr.DataArray
    age: float
    lithology: str | Lithology = "shale"
    base_level: Level | None = None
    sea_level: float | None = None
    te: TeLike | None = None

    def __post_init__(self) -> None:
        if not isinstance(self.thickness, xr.DataArray):
            raise InputError(
                f"stage thickness must be an xarray.DataArray, got {type(self.thickness).__name__}"
            )
        object.__setattr__(self, "age", check_number("stage age", self.age, unit="years"))
        object.__setattr__(self, "lithology", as_lithology(self.lithology))
        if self.sea_level is not None:
            sea_level = check_number("stage sea_level", self.sea_level, unit="m")
            object.__setattr__(self, "sea_level", sea_level)

    @property
    def rock(self) -> Lithology:
        """The stage's porosity law (:attr:`lithology` as a Lithology)."""
        return as_lithology(self.lithology)


@dataclass(frozen=True)
class _SolveOptions:
    """Options of the stage solves (see :class:`StagedBasin`)."""

    tolerance: float
    max_iterations: int
    edges: str
    pad_factor: float


@dataclass
class _Snapshot:
    """Arrays recorded after a stage (numpy, SI)."""

    age: float
    deflection: np.ndarray
    increment: np.ndarray
    surface: np.ndarray
    accommodation: np.ndarray
    water_depth: np.ndarray
    stage_thickness: np.ndarray
    stage_fill: np.ndarray
    stage_density: np.ndarray
    sediment_thickness: np.ndarray
    sediment_density: np.ndarray
    iterations: int
    te: np.ndarray
    sea_level: float = math.nan
    column: list[np.ndarray] = field(default_factory=list)  # stage thicknesses, oldest first


class StagedBasin:
    """A basin filled stage by stage on a flexing plate.

    Parameters
    ----------
    initial_surface : xarray.DataArray
        Elevation of the surface before the first stage (m, positive up; the
        basement or pre-delta sea floor). Defines the grid.
    plate : Plate
        Plate parameters; its te is used for stages without their own te.
        ``plate.infill_density`` is not used (the fill is decided per cell).
    sea_level : float, default 0.0
        Sea level (m, positive up).
    water_density : float, default 1030.0
        Sea water (kg m^-3), also the pore fluid.
    compaction : bool, default True
        False: every stage keeps its deposited thickness and its surface bulk
        density rho_w phi_0 + rho_grain (1 - phi_0).
    tolerance, max_iterations, edges, pad_factor
        Passed to :func:`gridflex.solve_with_infill` (a te grid, or *edges* "clamped"
        or "free", is solved by finite differences).
    stretching : Stretching, optional
        A rift under the basin: each stage adds the change of its water-loaded
        tectonic subsidence since the stage below as a load (rho_m - rho_w) g dS,
        flexed with the stage's te and infill (:class:`gridflex.basin.Stretching`;
        computed with the plate's mantle density and *water_density*). The subsidence
        before the first stage counts from the rift, so *initial_surface* is then the
        surface before rifting.
    """

    def __init__(
        self,
        initial_surface: xr.DataArray,
        plate: Plate,
        *,
        sea_level: float = 0.0,
        water_density: float = SEA_WATER_DENSITY,
        compaction: bool = True,
        tolerance: float = 1e-4,
        max_iterations: int = 300,
        edges: str = "infinite",
        pad_factor: float = 4.5,
        stretching: Stretching | None = None,
    ) -> None:
        if not isinstance(plate, Plate):
            raise InputError(f"plate must be a gridflex.Plate, got {type(plate).__name__}")
        check_grid(initial_surface, "initial_surface")
        self.grid = initial_surface
        self.base = grid_values(initial_surface, initial_surface, "initial_surface")
        self.plate = plate
        self.sea_level = check_number("sea_level", sea_level, unit="m")
        self.water_density = check_density("water_density", water_density)
        self.compaction = bool(compaction)
        self.solve_options = _SolveOptions(tolerance, max_iterations, edges, pad_factor)
        self.stages: list[Stage] = []
        self.grains: list[np.ndarray] = []
        self.deflection = np.zeros(self.base.shape)
        self.mass = np.zeros(self.base.shape)  # sediment mass per area the plate carries
        self.thickness = np.zeros(self.base.shape)  # sediment thickness as carried
        self.current_sea_level = self.sea_level
        self.history: list[_Snapshot] = []
        # deepest burial of each stage's top (m), oldest first; kept once erosion has
        # brought layers up (compaction is irreversible), empty before
        self.burial: list[np.ndarray] = []
        self.stretching = _rift_on_grid(stretching, plate, self.water_density, initial_surface)
        self._rift_cache: dict[float, np.ndarray] = {}
        # the finite-difference set-up of a te grid, reused by the settling passes of a
        # stage and by stages with the same te and fill
        self._inner_cache = InnerSolverCache()
        self._shift: float | None = None  # the shift density of the kept set-up (kg/m^3)

    # column -----------------------------------------------------------------
    def _layer_density(self, lith: Lithology) -> float:
        phi0 = lith.surface_porosity
        return self.water_density * phi0 + lith.grain_density * (1.0 - phi0)

    def _column(
        self, grains: Sequence[np.ndarray], stages: Sequence[Stage]
    ) -> tuple[list[np.ndarray], list[np.ndarray]]:
        """Thickness and mass per area of each stage, youngest on top (lists, oldest first)."""
        liths = [stage.rock for stage in stages]
        if self.compaction:
            burial = self._burial_of(len(grains))
            thick, mass, _ = saturated_column(
                grains[::-1], liths[::-1], self.water_density, burial[::-1]
            )
            return thick[::-1], mass[::-1]
        thick = [s / (1.0 - lith.surface_porosity) for s, lith in zip(grains, liths, strict=True)]
        mass = [self._layer_density(lith) * h for h, lith in zip(thick, liths, strict=True)]
        return thick, mass

    def _burial_of(self, count: int) -> list[np.ndarray | float]:
        """Deepest past burial of the tops of the *count* oldest stages (m; 0: none)."""
        kept: list[np.ndarray | float] = list(self.burial[:count])
        return kept + [0.0] * (count - len(kept))

    def _erode(self, eroded: np.ndarray, where: str) -> list[np.ndarray]:
        """The grains of the stages after *eroded* (m, compacted thickness) is removed
        from the top of the pile; sets :attr:`burial`.

        Compaction is irreversible (common practice since Sclater & Christie 1980, who
        decompact only by removing the overburden in backstripping; a column brought up
        by erosion keeps the porosity of its deepest burial): what remains of each stage
        keeps the thickness it had, and the porosity of the depth its new top had reached.
        """
        thick, _ = self._column(self.grains, self.stages)
        burial = self._burial_of(len(self.grains))
        grains = list(self.grains)
        deepest: list[np.ndarray] = []
        top = np.zeros(self.base.shape)
        rest = eroded.copy()
        for i in reversed(range(len(grains))):  # youngest first
            t, lith = thick[i], self.stages[i].rock
            at = np.maximum(top, burial[i])  # the depth the layer is compacted to
            cut = np.minimum(rest, t)
            if self.compaction:
                grains[i] = layer_grains(at + cut, t - cut, lith)
            else:
                grains[i] = (t - cut) * (1.0 - lith.surface_porosity)
            deepest.append(at + cut)
            rest = rest - cut
            top = top + t
        if rest.max(initial=0.0) > 0.0:
            raise InputError(
                f"{where} erodes up to {float(rest.max()):.6g} m more than the sediment pile "
                f"holds ({int((rest > 0).sum())} cells); erosion of the surface below the "
                "first stage is not modelled"
            )
        self.burial = deepest[::-1]
        return grains

    def _grains_of(self, thickness: np.ndarray, lith: Lithology) -> np.ndarray:
        """Grain thickness of a layer of *thickness* deposited at the top of the pile."""
        if self.compaction:
            return layer_grains(0.0, thickness, lith)
        return thickness * (1.0 - lith.surface_porosity)

    def _water(self, thickness: np.ndarray, sea_level: float) -> np.ndarray:
        surface = self.base - self.deflection + thickness
        return np.clip(sea_level - surface, 0.0, None)

    # solving ----------------------------------------------------------------
    def _solve_increment(
        self,
        grains: list[np.ndarray],
        stages: list[Stage],
        te: TeLike,
        sea_level: float,
        infill: Infill,
        fill_density: float,
        min_deflection: float = 0.0,
        tectonic_load: np.ndarray | None = None,
        deposit: np.ndarray | None = None,
    ) -> tuple[np.ndarray, np.ndarray, int, np.ndarray, np.ndarray]:
        """Solve the change from the carried state to the column of *grains*, plus
        *tectonic_load* (Pa, positive down) when given.

        With *deposit* (m, the top stage's thickness as deposited so far) and compaction,
        the moat fill is carried as the top of that stage (its mass as compacted within
        the stage, :meth:`_fill_mass`), not with *fill_density*.

        Returns (deflection increment, sediment fill, iterations, new carried mass,
        new carried thickness). When the load change could not move the plate by
        more than *min_deflection* (m) anywhere, nothing is solved (0 iterations).
        """
        thick, mass = self._column(grains, stages)
        total_h = np.sum(thick, axis=0) if thick else np.zeros(self.base.shape)
        total_m = np.sum(mass, axis=0) if mass else np.zeros(self.base.shape)
        g = self.plate.gravity
        water_before = self._water(self.thickness, self.current_sea_level)
        water_after = self._water(total_h, sea_level)
        increment = g * ((total_m - self.mass) + self.water_density * (water_after - water_before))
        if tectonic_load is not None:
            increment = increment + tectonic_load
        weakest = (self.plate.mantle_density - infill.max_density()) * g
        if float(np.abs(increment).max()) <= min_deflection * weakest:
            zero = np.zeros(self.base.shape)
            return zero, zero.copy(), 0, total_m, total_h
        load = self.grid.copy(data=increment)
        load.name = "load"
        surface = self.base - self.deflection + total_h
        options = self.solve_options
        fill_mass = None
        if deposit is not None and self.compaction and infill.sediment != "none":
            fill_mass = self._fill_mass(deposit, stages[-1].rock)
        # one engine for every plate: the FFT for a constant te, finite differences for a
        # te grid (margins, breaks), both with the same column model
        result = solve_with_infill(
            load,
            self.plate.with_te(te),
            self.grid.copy(data=surface),
            infill,
            shift=self._shift_for(infill, te),
            edges=options.edges,
            pad_factor=options.pad_factor,
            tolerance=options.tolerance,
            max_iterations=options.max_iterations,
            cache=self._inner_cache,
            sediment_mass=fill_mass,
        )
        w = np.asarray(result["deflection"].values)
        fill = np.asarray(result["fill_sediment"].values)
        iterations = int(result.attrs["iterations"])
        carried = fill_density * fill if fill_mass is None else fill_mass(fill)[0]
        return w, fill, iterations, total_m + carried, total_h + fill

    def _fill_mass(
        self, deposit: np.ndarray, lith: Lithology
    ) -> Callable[[np.ndarray], tuple[np.ndarray, np.ndarray]]:
        """Mass per area (kg m^-2) of a moat fill on top of the top stage's *deposit* (m)
        and the density of its top (kg m^-3): the stage compacts within itself (its top
        at the surface), so a fill f adds M(d + f) - M(d), M(x) = x rho_bulk(0, x), and
        the density at depth d + f (the infill solver's ``sediment_mass``)."""
        rho_w = self.water_density
        before = deposit * bulk_density(0.0, deposit, lith, rho_w)

        def mass(fill: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
            total = deposit + fill
            added = total * bulk_density(0.0, total, lith, rho_w) - before
            return added, bulk_density(total, total, lith, rho_w)

        return mass

    def _shift_for(self, infill: Infill, te: TeLike) -> float | None:
        """Shift density (kg/m^3) of the infill iteration: for a te grid (finite
        differences) the last one while it lies within :data:`_SHIFT_SHARE` of half the
        densest fill (the default, PHYSICS.md eq. 5.3), so that stages with fills of
        similar density share one operator and its set-up; None (the default) otherwise."""
        if not isinstance(te, xr.DataArray) and self.solve_options.edges in SPECTRAL_EDGES:
            return None
        wanted = 0.5 * infill.max_density()
        if self._shift is None or abs(self._shift - wanted) > _SHIFT_SHARE * wanted:
            self._shift = wanted
        return self._shift

    def _record(
        self,
        age: float,
        increment: np.ndarray,
        level: np.ndarray,
        iterations: int,
        te: TeLike,
    ) -> _Snapshot:
        check_memory(
            (_SNAPSHOT_GRIDS + len(self.stages)) * self.base.nbytes,
            f"keeping the state after stage {len(self.history) + 1}",
        )
        thick, mass = self._column(self.grains, self.stages)
        surface = self.base - self.deflection + self.thickness
        top_h = thick[-1] if thick else np.zeros(self.base.shape)
        top_m = mass[-1] if mass else np.zeros(self.base.shape)
        total_h = np.sum(thick, axis=0) if thick else np.zeros(self.base.shape)
        total_m = np.sum(mass, axis=0) if mass else np.zeros(self.base.shape)
        fallback = self._layer_density(self.stages[-1].rock) if self.stages else np.nan
        with np.errstate(invalid="ignore", divide="ignore"):
            top_rho = np.where(top_h > 0, top_m / np.where(top_h > 0, top_h, 1.0), fallback)
            all_rho = np.where(total_h > 0, total_m / np.where(total_h > 0, total_h, 1.0), fallback)
        snap = _Snapshot(
            age=age,
            deflection=self.deflection.copy(),
            increment=increment,
            surface=surface,
            accommodation=level - surface,
            water_depth=np.clip(self.current_sea_level - surface, 0.0, None),
            stage_thickness=top_h,
            stage_fill=np.zeros_like(top_h),
            stage_density=top_rho,
            sediment_thickness=total_h,
            sediment_density=all_rho,
            iterations=iterations,
            te=grid_values(te, self.grid, "stage te"),
            sea_level=self.current_sea_level,
            column=list(thick),
        )
        self.history.append(snap)
        return snap

    def add_stage(self, stage: Stage) -> None:
        """Deposit *stage* on top, compact the older stages, solve the flexure."""
        if not isinstance(stage, Stage):
            raise InputError(
                f"stage must be a gridflex.basin.staging.Stage, got {type(stage).__name__}"
            )
        check_grains_sink(
            stage.rock.grain_density, self.water_density, f"stage (age {stage.age}) lithology"
        )
        where = f"stage (age {stage.age})"
        h = grid_values(stage.thickness, self.grid, f"{where} thickness")
        if not np.all(np.isfinite(h)):
            raise InputError(f"{where} thickness must be finite (m; negative: erosion)")
        eroded = np.clip(-h, 0.0, None)
        h = np.clip(h, 0.0, None)  # the deposit
        if self.stages and not stage.age < self.stages[-1].age:
            raise InputError(
                f"stage ages must decrease (oldest first, years before present): "
                f"{stage.age!r} follows {self.stages[-1].age!r}"
            )
        lith = stage.rock
        sea = self.sea_level if stage.sea_level is None else float(stage.sea_level)
        fill_density = self._mean_density(h, lith)
        if stage.base_level is None:
            infill = Infill(sea_level=sea, water_density=self.water_density)
            level = np.full(self.base.shape, sea)
        else:
            level = grid_values(stage.base_level, self.grid, "stage base_level")
            infill = Infill(
                sea_level=sea,
                water_density=self.water_density,
                sediment="to_level",
                sediment_density=fill_density,
                sediment_level=stage.base_level,
                sediment_mask=self._fill_mask(),
            )
        stages = self.stages + [stage]
        te = self.plate.te if stage.te is None else stage.te
        saved = (self.deflection, self.mass, self.thickness, self.current_sea_level, self.burial)
        try:
            tectonic = self._tectonic_load(self.stages[-1].age if self.stages else None, stage.age)
            older = self._erode(eroded, where) if eroded.any() else self.grains
            grains = older + [self._grains_of(h, lith)]
            w, fill, iterations = self._add(
                h, lith, grains, stages, te, sea, infill, fill_density, level, tectonic
            )
        except BaseException:
            # a failed solve (bad input, no convergence) leaves the basin as it was
            (self.deflection, self.mass, self.thickness, self.current_sea_level, self.burial) = (
                saved
            )
            raise
        self.grains, self.stages = grains, stages
        snap = self._record(float(stage.age), w, level, iterations, te)
        snap.stage_fill = fill
        snap.stage_thickness = h + fill - eroded
        log.info(
            "stage of age %g yr: %d infill iterations, max deflection %.4g m",
            stage.age,
            iterations,
            float(self.deflection.max()),
        )

    def _add(
        self,
        h: np.ndarray,
        lith: Lithology,
        grains: list[np.ndarray],
        stages: list[Stage],
        te: TeLike,
        sea: float,
        infill: Infill,
        fill_density: float,
        level: np.ndarray,
        tectonic: np.ndarray | None = None,
    ) -> tuple[np.ndarray, np.ndarray, int]:
        """Solve a new top stage and settle it; updates the carried state and grains[-1]."""
        w, fill, iterations, mass, thickness = self._solve_increment(
            grains, stages, te, sea, infill, fill_density, tectonic_load=tectonic, deposit=h
        )
        self.deflection = self.deflection + w
        self.mass, self.thickness, self.current_sea_level = mass, thickness, sea
        grains[-1] = self._grains_of(h + fill, lith)
        # settle: the solver carried the moat fill with one density and did not compact
        # the column under it; re-solve the remaining difference (new fill joins the stage).
        # Where the real fill is lighter than carried, the plate rebounds and lifts filled
        # cells above the base level; the fill there is trimmed back to the level first,
        # so every pass solves the column as it will be kept
        tolerance = float(self.solve_options.tolerance)
        for _ in range(_SETTLE_PASSES):
            if infill.sediment != "none":
                fill = self._trim_fill(h, fill, lith, grains, stages, level)
            with warnings.catch_warnings():
                # the small remainder reaches the edges wherever the fill did; the stage
                # solve above already warned about a load at the edge
                warnings.simplefilter("ignore", EdgeLoadWarning)
                dw, more, passes, mass, thickness = self._solve_increment(
                    grains,
                    stages,
                    te,
                    sea,
                    infill,
                    fill_density,
                    min_deflection=tolerance,
                    deposit=h + fill,
                )
            if passes == 0:
                self.mass, self.thickness = mass, thickness
                break
            w, fill, iterations = w + dw, fill + more, iterations + passes
            self.deflection = self.deflection + dw
            self.mass, self.thickness = mass, thickness
            grains[-1] = self._grains_of(h + fill, lith)
        else:
            log.warning(
                "stage of age %g yr: column still settling after %d passes",
                stages[-1].age,
                _SETTLE_PASSES,
            )
        return w, fill, iterations

    def _trim_fill(
        self,
        h: np.ndarray,
        fill: np.ndarray,
        lith: Lithology,
        grains: list[np.ndarray],
        stages: list[Stage],
        level: np.ndarray,
    ) -> np.ndarray:
        """The moat fill less what stands above the base level (m); updates grains[-1].

        The surface of the compacted column with the present deflection is compared
        with *level* where there is fill; the excess (at most the fill) is removed.
        """
        thick, _ = self._column(grains, stages)
        surface = self.base - self.deflection + np.sum(thick, axis=0)
        excess = np.clip(np.minimum(surface - level, fill), 0.0, None)
        if not excess.any():
            return fill
        trimmed = fill - excess
        grains[-1] = self._grains_of(h + trimmed, lith)
        return trimmed

    def remove_stage(self) -> None:
        """Remove the top stage (with its moat fill), decompact the rest, unload the plate.

        The unloading is solved with the te the stage was loaded with, so removal
        undoes the stage (also when te changes from stage to stage); the rebound fills
        with water up to the sea level of the stage below (the basin's sea level when
        none is left).
        """
        if not self.stages:
            raise InputError("remove_stage: the basin has no stage left to remove")
        if self.burial:
            raise InputError(
                "remove_stage: the column has been eroded, and compaction is irreversible "
                "(the eroded layers kept the porosity of their deepest burial), so removing "
                "stages cannot restore an earlier state; rebuild the basin from its first stage"
            )
        grains, stages = self.grains[:-1], self.stages[:-1]
        below = stages[-1] if stages else None
        sea = self.sea_level if below is None or below.sea_level is None else float(below.sea_level)
        infill = Infill(sea_level=sea, water_density=self.water_density)
        removed = self.stages[-1]
        te = self.plate.te if removed.te is None else removed.te
        tectonic = self._tectonic_load(removed.age, below.age if below is not None else None)
        w, _, iterations, mass, thickness = self._solve_increment(
            grains, stages, te, sea, infill, 0.0, tectonic_load=tectonic
        )
        self.deflection = self.deflection + w
        self.mass, self.thickness, self.current_sea_level = mass, thickness, sea
        self.grains, self.stages = grains, stages
        age = float(below.age) if below is not None else math.nan
        level = np.full(self.base.shape, sea)
        if below is not None and below.base_level is not None:
            level = grid_values(below.base_level, self.grid, "stage base_level")
        self._record(age, w, level, iterations, te)

    def tectonic_subsidence(self, age: float | None) -> np.ndarray:
        """Water-loaded tectonic subsidence of the rift (m) at *age*; zeros without a rift
        or before the first stage (*age* ``None``)."""
        if self.stretching is None or age is None:
            return np.zeros(self.base.shape)
        if age not in self._rift_cache:  # each age is asked for by two stages in turn
            rift, beta = self.stretching
            if len(self._rift_cache) >= 2:
                del self._rift_cache[next(iter(self._rift_cache))]
            self._rift_cache[age] = np.broadcast_to(rift.subsidence(age, beta), self.base.shape)
        return self._rift_cache[age].copy()

    def _tectonic_load(self, before: float | None, after: float | None) -> np.ndarray | None:
        """(rho_m - rho_w) g dS (Pa), dS = S(after) - S(before) the change of the tectonic
        subsidence (negative when a removed stage is undone); None without a rift."""
        if self.stretching is None:
            return None
        change = self.tectonic_subsidence(after) - self.tectonic_subsidence(before)
        return (self.plate.mantle_density - self.water_density) * self.plate.gravity * change

    def _fill_mask(self) -> xr.DataArray | None:
        """Where moat-fill sediment may go: not in the FFT padding (its state is not kept
        from stage to stage), so not on the outer ring of cells, which the padding copies."""
        if self.solve_options.edges != "infinite":
            return None
        mask = np.zeros(self.base.shape, dtype=bool)
        mask[1:-1, 1:-1] = True
        return self.grid.copy(data=mask)

    def _mean_density(self, h: np.ndarray, lith: Lithology) -> float:
        """Mean bulk density of the deposit where it is present (kg m^-3)."""
        present = h > 0
        if not self.compaction or not present.any():
            return self._layer_density(lith)
        rho = bulk_density(0.0, h[present], lith, self.water_density)
        return float(np.sum(rho * h[present]) / np.sum(h[present]))

    def final_stage_thickness(self) -> np.ndarray:
        """Present (compacted) thickness of each stage in the current column, (stage, y, x)."""
        thick, _ = self._column(self.grains, self.stages)
        return np.stack(thick) if thick else np.zeros((0,) + self.base.shape)

    def to_dataset(self) -> xr.Dataset:
        """The recorded states, one per stage added or removed, on a ``stage`` axis."""
        if not self.history:
            raise InputError("the basin has no stage yet")
        # the kept finite-difference set-up (about 20 solve grids) is not needed to write
        # the result; a later stage builds it again
        self._inner_cache.clear()
        check_memory(
            _SNAPSHOT_GRIDS * self.base.nbytes * len(self.history),
            f"the {len(self.history)}-stage result",
        )
        dims = ("stage", "y", "x")

        def stack(name: str) -> np.ndarray:
            return np.stack([getattr(s, name) for s in self.history])

        fields = {
            "deflection": ("m", "cumulative plate deflection (positive downward)"),
            "deflection_increment": ("m", "deflection added by the stage (positive downward)"),
            "surface": ("m", "solid surface elevation after the stage (positive up)"),
            "accommodation": (
                "m",
                "space below the stage's base level (sea level without "
                "one): level - surface; negative above it",
            ),
            "water_depth": ("m", "water depth above the solid surface"),
            "stage_thickness": (
                "m",
                "thickness of the stage as deposited, moat fill included; negative: eroded",
            ),
            "stage_fill": ("m", "moat-fill sediment of the stage"),
            "stage_density": ("kg m-3", "mean bulk density of the stage when deposited"),
            "sediment_thickness": ("m", "thickness of the whole sediment column"),
            "sediment_density": ("kg m-3", "mean bulk density of the sediment column"),
            "elastic_thickness": ("m", "te the stage was loaded (or unloaded) with"),
        }
        source = {"deflection_increment": "increment", "elastic_thickness": "te"}
        data: dict[str, tuple[Any, ...]] = {
            name: (dims, stack(source.get(name, name)), {"units": units, "long_name": long})
            for name, (units, long) in fields.items()
        }
        data.update(self._horizon_variables(dims))
        data["iterations"] = (
            "stage",
            np.array([s.iterations for s in self.history]),
            {"long_name": "infill iterations of the stage solve"},
        )
        data.update(self._stage_te())
        coords = {
            "stage": np.arange(len(self.history)),
            "age": (
                "stage",
                np.array([s.age for s in self.history], dtype=float),
                {"units": "years before present"},
            ),
            "y": self.grid["y"].variable,
            "x": self.grid["x"].variable,
        }
        attrs: dict[str, Any] = {
            "sign_convention": "deflection positive downward; elevations positive up",
            "sea_level": self.sea_level,
            "water_density": self.water_density,
            "compaction": int(self.compaction),
            "lithologies": ", ".join(s.rock.name for s in self.stages),
        }
        stamp = provenance_attrs(self._plate_attrs(), attrs, "staged basin loading")
        out = xr.Dataset(data, coords=coords, attrs=stamp).set_coords("horizon_age")
        return out.assign_coords(horizon=np.arange(out.sizes["horizon"]))

    def _horizon_variables(self, dims: tuple[str, str, str]) -> dict[str, tuple[Any, ...]]:
        """``basement_depth``, ``horizon_depth`` (with its ``horizon_age``) and
        ``sea_level`` of each recorded step (:mod:`gridflex.basin.horizons`)."""
        columns = [s.column for s in self.history]
        basement, horizons = horizon_depths(
            self.base, [s.deflection for s in self.history], columns, self.sea_level
        )
        below = f"below the basin's sea level ({self.sea_level:g} m, positive down)"
        down = {"units": "m", "positive": "down"}
        ages = horizon_ages([s.age for s in self.history], columns)
        created = accommodation_created(
            [s.accommodation + s.surface for s in self.history],
            basement,
            horizons,
            [len(c) for c in columns],
            self.base,
            self.sea_level,
        )
        return {
            "accommodation_created": (
                dims,
                created,
                {
                    "units": "m",
                    "long_name": "accommodation created by the stage: rise of its level "
                    "plus the sinking (flexure, compaction) of the surface it deposits on",
                },
            ),
            "basement_depth": (
                dims,
                basement,
                {**down, "long_name": f"depth of the surface before the first stage {below}"},
            ),
            "horizon_depth": (
                (dims[0], "horizon", *dims[1:]),
                horizons,
                {
                    **down,
                    "long_name": f"depth of the top of each stage after each stage {below}; "
                    "NaN before the stage is deposited",
                },
            ),
            "horizon_age": (
                "horizon",
                ages,
                {"units": "years before present", "long_name": "age of the stage below"},
            ),
            "sea_level": (
                dims[0],
                np.array([s.sea_level for s in self.history]),
                {"units": "m", "long_name": "sea level of the stage (positive up)"},
            ),
        }

    def _stage_te(self) -> dict[str, tuple[Any, ...]]:
        """The te each recorded stage was solved with, on the ``stage`` axis (m)."""
        low = np.array([float(s.te.min()) for s in self.history])
        high = np.array([float(s.te.max()) for s in self.history])
        one = np.where(low == high, low, np.nan)
        return {
            "stage_te": (
                "stage",
                one,
                {
                    "units": "m",
                    "long_name": "te the stage was loaded (or unloaded) with; NaN for a "
                    "te grid (see elastic_thickness, stage_te_min, stage_te_max)",
                },
            ),
            "stage_te_min": ("stage", low, {"units": "m", "long_name": "smallest te of the stage"}),
            "stage_te_max": ("stage", high, {"units": "m", "long_name": "largest te of the stage"}),
        }

    def _plate_attrs(self) -> dict[str, Any]:
        """The plate's parameters for the output; its te only when every stage used it.

        When a stage had a te of its own, ``te`` (and its rigidity, flexural parameter,
        range) would describe a plate no stage may have had: they get the prefix
        ``default_`` (the te of stages without their own) and ``te`` says "per stage"."""

        out = self.plate.describe()
        plate_te = grid_values(self.plate.te, self.grid, "plate te")
        if all(np.array_equal(s.te, plate_te) for s in self.history):
            return out
        for key in ("te", "te_min", "te_max", "rigidity", "flexural_parameter"):
            if key in out:
                out[f"default_{key}"] = out.pop(key)
        out["te"] = "per stage: see stage_te, stage_te_min, stage_te_max, elastic_thickness"
        return out


def stage_loading(
    stages: Iterable[Stage],
    initial_surface: xr.DataArray,
    plate: Plate,
    *,
    sea_level: float = 0.0,
    water_density: float = SEA_WATER_DENSITY,
    compaction: bool = True,
    tolerance: float = 1e-4,
    max_iterations: int = 300,
    edges: str = "infinite",
    pad_factor: float = 4.5,
    isopachs: str = "deposited",
    progress: Progress | None = None,
    stretching: Stretching | None = None,
) -> xr.Dataset:
    """Flexure of a basin filled stage by stage (oldest first).

    Parameters
    ----------
    stages : iterable of Stage
        Oldest first (ages decreasing, years before present).
    initial_surface : xarray.DataArray
        Elevation before the first stage (m, positive up).
    plate : Plate
        Plate parameters and the default te.
    sea_level, water_density, compaction, tolerance, max_iterations, edges, pad_factor
        As in :class:`StagedBasin`.
    isopachs : {"deposited", "present"}, default "deposited"
        ``"deposited"``: stage thicknesses as deposited. ``"present"``: present-day
        (compacted) thicknesses of a column in which the stages lie one on another in
        order; each is first decompacted to the surface from its present burial under
        the younger stages (grains conserved). With water infill the final column then
        has the given thicknesses; moat fill (``base_level``) adds sediment to it.
    progress : callable, optional
        Called as ``progress(done, total)`` after each stage.
    stretching : Stretching, optional
        A rift under the basin (see :class:`StagedBasin`); its water-loaded tectonic
        subsidence at each stage is added as a flexed load and written as
        ``tectonic_subsidence`` and ``thermal_subsidence``.

    Returns
    -------
    xarray.Dataset
        On dims ``("stage", "y", "x")``: ``deflection`` (m, cumulative, down),
        ``deflection_increment``, ``surface``, ``accommodation`` (m, level -
        surface), ``water_depth``, ``stage_thickness`` (as deposited, fill
        included), ``stage_fill``, ``stage_density`` (kg m^-3),
        ``sediment_thickness``, ``sediment_density``, ``elastic_thickness`` (m, the te
        each stage was solved with); ``final_stage_thickness``
        (present compacted thickness of each stage); ``age`` coordinate. With
        *stretching*: ``tectonic_subsidence`` (m, initial plus thermal, water-loaded,
        local: the rift model's own column at the stage's age) and
        ``thermal_subsidence`` (m, its thermal part).

    Raises
    ------
    InputError
        No stages, ages not decreasing, bad grids or parameters.
    ConvergenceError
        If an infill solve does not converge.
    """
    items = list(stages)
    if not items:
        raise InputError("stage_loading needs at least one Stage")
    check_choice("isopachs", isopachs, ISOPACHS)
    if isopachs == "present" and compaction:
        items = _deposited_stages(items)
    basin = StagedBasin(
        initial_surface,
        plate,
        sea_level=sea_level,
        water_density=water_density,
        compaction=compaction,
        tolerance=tolerance,
        max_iterations=max_iterations,
        edges=edges,
        pad_factor=pad_factor,
        stretching=stretching,
    )
    for index, stage in enumerate(items, start=1):
        basin.add_stage(stage)
        if progress is not None:
            progress(index, len(items))
    out = basin.to_dataset()
    out["final_stage_thickness"] = (
        ("stage", "y", "x"),
        basin.final_stage_thickness(),
        {"units": "m", "long_name": "present compacted thickness of each stage"},
    )
    if basin.stretching is not None:
        _add_rift(out, basin)
    return out


def _add_rift(out: xr.Dataset, basin: StagedBasin) -> None:
    """The rift's water-loaded tectonic and thermal subsidence at each stage of *out*."""
    assert basin.stretching is not None
    rift, beta = basin.stretching
    check_memory(2 * basin.base.nbytes * out.sizes["stage"], "the tectonic subsidence")
    parts = [rift.subsidence_parts(float(age), beta) for age in out["age"].values]
    shape = basin.base.shape
    for name, index, long_name in (
        ("tectonic_subsidence", None, "initial plus thermal"),
        ("thermal_subsidence", 1, "thermal (post-rift)"),
    ):
        values = np.stack(
            [np.broadcast_to(p[0] + p[1] if index is None else p[index], shape) for p in parts]
        )
        out[name] = (
            ("stage", "y", "x"),
            values,
            {
                "units": "m",
                "long_name": f"{long_name} tectonic subsidence of the rift, water-loaded, "
                "local (positive down)",
            },
        )
    out.attrs.update(rift.describe())


def _deposited_stages(stages: list[Stage]) -> list[Stage]:
    """Stages whose present (compacted) thicknesses are decompacted to the surface."""
    burial = None
    out: list[Stage] = []
    for stage in reversed(stages):  # youngest first: its burial is 0
        h = np.asarray(stage.thickness.values, dtype=np.float64)
        if not np.all(np.isfinite(h)) or h.min() < 0:
            raise InputError(
                f"stage (age {stage.age}) thickness must be finite and >= 0 m with "
                "isopachs='present' (erosion, a negative thickness, needs 'deposited')"
            )
        top = np.zeros(h.shape) if burial is None else burial
        grains = layer_grains(top, h, stage.rock)
        deposited = compacted_thickness(np.zeros(h.shape), grains, stage.rock)
        out.append(dataclasses.replace(stage, thickness=stage.thickness.copy(data=deposited)))
        burial = top + h
    return out[::-1]


def _rift_on_grid(
    stretching: Stretching | None, plate: Plate, water_density: float, grid: xr.DataArray
) -> tuple[Stretching, np.ndarray] | None:
    """The rift with the plate's mantle and the basin's water densities, and its
    stretching factors on *grid* (a number stays a 0-d array)."""
    if stretching is None:
        return None
    if not isinstance(stretching, Stretching):
        raise InputError(
            f"stretching must be a gridflex.basin.Stretching, got {type(stretching).__name__}"
        )
    rift = stretching.for_densities(plate.mantle_density, water_density)
    beta = rift.stretching_factor
    if isinstance(beta, xr.DataArray):
        return rift, grid_values(beta, grid, "stretching_factor", unit="")
    return rift, np.asarray(float(beta))
