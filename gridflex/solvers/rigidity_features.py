"""Where a rigidity grid is too rough for the blended spectral preconditioner.

Finds the sharp nodes (rigidity jumping more than :data:`SHARP_RATIO` between neighbours,
zero-rigidity breaks, steep smooth changes, non-periodic grid edges), the width of the
exact-solve band they need, and the band itself (:func:`sharp_band`). The tests run on a
float32 copy of the rigidity: they compare ratios of ten, for which its precision is ample,
and it halves the memory the filters stream.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass

import numpy as np
import scipy.ndimage

from gridflex.memory import available_memory, check_memory
from gridflex.solvers.plate_operator import PlateOperator

__all__ = [
    "BAND_FLEXURAL_PARAMETERS",
    "BAND_SHRINK",
    "BREAK_FLEXURAL_PARAMETERS",
    "FACTOR_BYTES_PER_NODE_CELL",
    "FACTOR_MEMORY_SHARE",
    "MAX_FACTOR_BYTES",
    "SHARP_RATIO",
    "STEEP_FLEXURAL_PARAMETERS",
    "LOCAL_STEEP_WINDOW",
    "STEEP_WINDOW",
    "REACH_FRAME_NODES",
    "STIFF_SIDE_FLEXURAL_PARAMETERS",
    "STIFF_SIDE_REACH_FLEXURAL_PARAMETERS",
    "SharpDistance",
    "SharpFeatures",
    "factor_budget",
    "find_sharp_features",
    "sharp_band",
]

log = logging.getLogger(__name__)

SHARP_RATIO = 10.0
"""A node is sharp when rigidity differs more than this factor within its 3 x 3 neighbourhood,
or within :data:`STEEP_WINDOW` flexural parameters along x or y."""

STEEP_WINDOW = 1.0
"""Half-width of the window for steep (not sharp) rigidity changes, in flexural parameters
of the smallest non-zero rigidity of the grid. A smooth but steep margin (Te 60 -> 10 km
over 120 km) is as hard for the blend as a step: measured 75 iterations without the band,
25 with it. See also :data:`LOCAL_STEEP_WINDOW`."""

LOCAL_STEEP_WINDOW = 0.5
"""Half-width of a second window for steep rigidity changes, in flexural parameters of the
weakest non-zero rigidity inside the window (tried at half-widths of 1, 2, 4, ... cells).

The window of :data:`STEEP_WINDOW` follows the smallest non-zero rigidity of the grid,
which vanishes on te maps that reach te = 0 smoothly (the smallest te is then a few metres
and the window less than a cell), so the steep rise of D ~ te³ out of the te = 0 patches
went unseen. Measured with tests/benchmarks/te_map_robustness.py at the default settings,
iterations (band nodes) without -> with this rule: te_map at 256² of 4 km 28 (71 k) -> 20
(71 k), at 512² of 2 km 257 (256 k) -> 30 (263 k), at 1024² of 1 km ConvergenceError
after 300 iterations (756 k) -> 38 (996 k); clipped at 256² of 4 km 49 (31 k) -> 19
(60 k), at 512² of 2 km 97 (50 k) -> 22 (211 k); at 256² of 250 m te_map
ConvergenceError -> 64 (tests/benchmarks/te_map_robustness.py has the whole table). A
factor of 1.0 instead of 0.5 gave 20 / 30 and 13 / 16 iterations but also
banded the smooth margin of tests/benchmarks/variable.py (te 6 -> 60 km, no band and 20
iterations; with the band 16 iterations and 153 k nodes at 512² of 2 km, set-up 0.4 ->
9.8 s); 0.25 gave 20 / 30 and 39 / 54. With 0.5 the cases of tests/benchmarks/variable.py
(--refine, 256² and 512²) keep their bands and iteration counts exactly.

Cost at 4096² of 250 m (te_map, solve grid 4320²): padding, operator and sharp nodes took
14 s against 10 s before (one pair of running minimum and maximum filters per half-width
and axis; a first run under heavier load took 56 s), and 10.7 M of the 18.7 M nodes are
steep, so the band (15.4 M nodes wanted, against 3.8 M
before) is far over its caps and only a partial band fits; whether that run converges was
not measured. Tried and not kept: the local window only where its weakest rigidity is
below 1/100 of the grid's largest (5.8 M steep nodes, 12 s at 4096²: the band still
wants 15.4 M nodes), which lost much of
the gain (clipped 32 / 33 iterations at 256² of 4 km / 512² of 2 km, and 42 on the rough
map of tests/solvers/test_finite_difference_accuracy.py, 37 before, 1 with the full rule);
1/1000 was worse still (te_map at 256² of 4 km 54, at 512² of 2 km 101)."""

BAND_FLEXURAL_PARAMETERS = 3.0
"""Width of the exact-solve band round a rigidity jump, in flexural parameters of its weak
side (the smallest non-zero rigidity next to the jump). Measured on the step of
tests/benchmarks/variable.py at 1024²: 2 -> 28 iterations, 3 -> 21, 4 -> 19; narrowing only
the stiff side to half the width, 33 iterations, only the weak side, 26 (both dearer
overall than 3 on both sides)."""

STEEP_FLEXURAL_PARAMETERS = 1.0
"""Width of the band round a steep but smooth rigidity change, and round non-periodic grid
edges, in flexural parameters of its weak side (measured on a Te 60 -> 10 km margin 120 km
wide: 25 iterations; 75 without a band)."""

BREAK_FLEXURAL_PARAMETERS = 0.35
"""Width of the band round breaks (zero rigidity), in flexural parameters of the adjacent
plate (measured on a hinge line crossing a 512² grid of 2 km cells: 1 -> 7 iterations,
0.5 -> 12, 0.25 -> 17; the narrower band is cheaper overall)."""

STIFF_SIDE_FLEXURAL_PARAMETERS = 1.0
"""Least width of the band round a rigidity jump or a break, in flexural parameters of the
stiffest plate next to it (each sharp node gets its own width, the largest its rules ask
for: this one, or the weak-side rules above). The band then reaches into the stiff plate,
in which the slow modes of the blend (the stiff plate bending round the weak feature) are
solved exactly; that the distance it reaches stays fixed under refinement, so that the
iterations stop growing, takes :data:`STIFF_SIDE_REACH_FLEXURAL_PARAMETERS` (of which this
is now the least width, the one left on coarse grids and under the band caps).

Measured with tests/benchmarks/variable.py on a 2048 km domain at 512² (4 km cells),
iterations to the default tolerance. One width for the whole grid: 20 km zone of te 0.5 km
in a 25 km plate (the former default 11 km, 0.16 of the stiff flexural parameter) 44, at
22 km 26, at 44 km 14; te 5 -> 50 km margin crossed by hinges (31 km) 56, at 42 km 40, at
84 km 20. Per node with this rule, at 0.5 / 0.75 / 1.0: margin with hinges 30 / 21 / 17
(band 45 k / 52 k / 59 k nodes, solve 15.6 / 10.1 / 7.4 s); at 1.0 the weak zone 8 (band
27 k), a network of crossing and ending hinges 9 (65 k), a sharp te 5 -> 50 km step 10 (48 k);
at 0.5 they took 18, 20 and (at 1024²) 14. The wider band costs set-up time (the LU of the
band) but saves more in iterations, up to the band caps (:func:`factor_budget`,
``max_band_nodes``)."""

STIFF_SIDE_REACH_FLEXURAL_PARAMETERS = 1.3
"""Reach of the exactly solved zone into the stiff plate next to a rigidity jump or a
break, in flexural parameters of that plate, counted from the feature to the band's edge
plus its stencil frame: the band's width from its sharp nodes is this reach less
:data:`REACH_FRAME_NODES` spacings, and at least :data:`STIFF_SIDE_FLEXURAL_PARAMETERS`
flexural parameters (:attr:`SharpFeatures.widths`).

Why: a band of a fixed width in metres from the sharp nodes does not reach a fixed
distance: the sharp nodes include the feature's neighbours (one spacing out: a zero in the
3 x 3 neighbourhood), and the band solve takes the blend's values on the two node rows
outside the band as its boundary values (the 13-point stencil's frame), so the zone they
fix reaches about three spacings beyond the width, 24 km on 8 km cells and 3 km on 1 km
cells. The rate of convergence follows that reach closely (the hinge's effect on the plate
decays over a flexural parameter): on the hinge network of
tests/benchmarks/variable.py (te 30 km, flexural parameter 81 km; 2048 km domain,
``--refine``), the energy-norm error fell per iteration by a factor of about 15 at 256²,
8.7 at 512² and 6.7 at 1024² with a width of 1 flexural parameter, and by 15 at 512² with
the width raised to 1.15, the reach of 256² (1.0 at 256² less 0.8: 7); iterations 7 / 9 /
10 / 10 at 256² / 512² / 1024² / 2048². With this reach the width grows with refinement
instead (at 1 km cells by 1.27 flexural parameters, 2 km 1.22, 4 km 1.15, 8 km 1.0) and
the iterations stay at those of 256² (tables in tests/benchmarks/variable.py). On coarse
grids (spacing above a tenth of the flexural parameter) :data:`STIFF_SIDE_FLEXURAL_PARAMETERS`
binds, as before. The wider band costs LU set-up and memory on fine grids; under the band
caps the solve falls back to the widths of :data:`STIFF_SIDE_FLEXURAL_PARAMETERS`
(:attr:`SharpFeatures.least_widths`) before the widths shrink."""

REACH_FRAME_NODES = 3
"""Spacings between a feature and its band's sharp nodes (one) and of the band solve's
frame (two: the 13-point stencil's reach) that count towards
:data:`STIFF_SIDE_REACH_FLEXURAL_PARAMETERS`."""

MAX_FACTOR_BYTES = 6.0 * 2**30
"""Largest estimated memory of the band's LU factors (bytes); below it the cap is
:data:`FACTOR_MEMORY_SHARE` of the memory left once the grid arrays are counted
(:func:`factor_budget`). Raised from a fixed 1.5 GiB: at 2048² of 1 km cells
(tests/benchmarks/variable.py --refine) that cap shrank the bands of the margin crossed by
hinges (943 k -> 611 k nodes), the hinge network (989 k -> 568 k) and the sharp step
(744 k -> 419 k); all three fit under 6 GiB with their full width."""

FACTOR_MEMORY_SHARE = 0.5
"""Share of the memory still available (after the grid arrays) that the band's LU factors
may take (the factorisation itself needs working memory on top of its factors)."""


def factor_budget(other_bytes: float) -> float:
    """Cap (bytes) on the estimated memory of the band's LU factors.

    :data:`FACTOR_MEMORY_SHARE` of the memory this process may still use
    (:func:`gridflex.memory.available_memory`) once *other_bytes* (the solve's grid arrays)
    are set aside, at most :data:`MAX_FACTOR_BYTES`. The band, and so the iteration count,
    can therefore depend on the memory free when the solve is set up; the band actually
    used is recorded (``band_nodes``, ``band_width``).

    Parameters
    ----------
    other_bytes : float
        Memory (bytes) the rest of the solve will hold.

    Returns
    -------
    float
        The cap (bytes), >= 0.
    """
    room = float(available_memory()) - float(other_bytes)
    return max(0.0, min(MAX_FACTOR_BYTES, FACTOR_MEMORY_SHARE * room))


FACTOR_BYTES_PER_NODE_CELL = 25.0
"""Estimated LU factor memory per band node and per node across the band (bytes), with the
symmetric ordering used (MMD on K + Kᵀ): measured 1634 bytes per node on the hinge network
of tests/benchmarks/variable.py at 1024² (band of 250 k nodes, 82 nodes across, 34 M
entries of 12 bytes), 20 per node per cell; 25 errs on the safe side. (COLAMD filled 3-5
non-zeros per node per cell, 60 bytes.)"""

BAND_SHRINK = 0.75
"""Factor by which the band widths shrink until the band fits its caps (was 0.5: the weak
zone of tests/benchmarks/variable.py at 2048² fell from a 443 k band to 248 k nodes under a
400 k cap, and from 8 to 20 iterations)."""


@dataclass(frozen=True)
class SharpFeatures:
    """The sharp nodes of a rigidity grid and the band width they call for.

    Attributes
    ----------
    nodes : numpy.ndarray of bool, shape (ny, nx)
        Sharp nodes, before widening.
    band_width : float
        Default width (m) of the exact-solve band round them: the widest of
        :data:`BAND_FLEXURAL_PARAMETERS` flexural parameters of the weakest non-zero
        rigidity next to a jump, :data:`STEEP_FLEXURAL_PARAMETERS` of the weakest at a steep
        change or a grid edge, :data:`BREAK_FLEXURAL_PARAMETERS` of the weakest plate next
        to a break, or :data:`STIFF_SIDE_FLEXURAL_PARAMETERS` of the stiffest next to a
        jump or a break; 0 without sharp nodes.
    widths : numpy.ndarray of float32, shape (ny, nx), optional
        The width (m) each sharp node asks for by the same rules, taken at the node (its
        weakest and stiffest neighbours), with the stiff side's reach of
        :data:`STIFF_SIDE_REACH_FLEXURAL_PARAMETERS`; 0 elsewhere.
    least_widths : numpy.ndarray of float32, shape (ny, nx), optional
        The same with :data:`STIFF_SIDE_FLEXURAL_PARAMETERS` alone on the stiff side (no
        wider than *widths*): the band to fall back on when that of *widths* exceeds
        the band caps.
    """

    nodes: np.ndarray
    band_width: float
    widths: np.ndarray | None = None
    least_widths: np.ndarray | None = None


def _modes(operator: PlateOperator) -> list[str]:
    return ["wrap" if e == "periodic" else "nearest" for e in operator.edges]


def _extreme3(values: np.ndarray, modes: list[str], high: bool) -> np.ndarray:
    """Maximum (*high*) or minimum over the 3 x 3 neighbourhood."""
    flt = scipy.ndimage.maximum_filter1d if high else scipy.ndimage.minimum_filter1d
    out = flt(values, 3, axis=0, mode=modes[0])
    return flt(out, 3, axis=1, mode=modes[1], output=out)


def _flexural_parameter(rigidity: float, stiffness: float) -> float:
    return (4.0 * rigidity / stiffness) ** 0.25


def find_sharp_features(operator: PlateOperator) -> SharpFeatures:
    """Sharp nodes of *operator*'s rigidity and the default band width round them.

    Sharp: the rigidity in the 3 x 3 neighbourhood varies by more than :data:`SHARP_RATIO`
    (a zero next to a non-zero value counts); or it does so along x or y within
    :data:`STEEP_WINDOW` flexural parameters of the smallest non-zero rigidity, or within
    :data:`LOCAL_STEEP_WINDOW` of the weakest non-zero rigidity in the window, away from
    such jumps (a jump is steep all round; its own band covers that); or the
    node lies on a non-periodic grid edge.

    Parameters
    ----------
    operator : PlateOperator
        The operator whose rigidity (N m), spacing and edges are examined.

    Returns
    -------
    SharpFeatures
    """
    rigidity = operator.rigidity.astype(np.float32)
    modes = _modes(operator)
    plate = rigidity > 0
    broken = not plate.all()
    high = _extreme3(rigidity, modes, True)
    low = _extreme3(rigidity, modes, False)
    jumpy = high > SHARP_RATIO * low
    del high
    if not plate.any():
        return SharpFeatures(np.zeros(rigidity.shape, dtype=bool), 0.0)
    smallest = float(np.min(rigidity, where=plate, initial=np.inf))
    largest = float(rigidity.max())
    # steep: a ten-fold change within STEEP_WINDOW flexural parameters of the weakest plate
    # of the grid, or within LOCAL_STEEP_WINDOW of the weakest plate in the window (tried at
    # half-widths of 1, 2, 4, ... cells)
    filled = np.where(plate, rigidity, np.float32(largest)) if broken else rigidity
    steep = np.zeros(rigidity.shape, dtype=bool)
    window = STEEP_WINDOW * _flexural_parameter(smallest, operator.stiffness)
    widest = LOCAL_STEEP_WINDOW * _flexural_parameter(largest, operator.stiffness)
    for axis, h in enumerate((operator.dy, operator.dx)):
        if largest <= SHARP_RATIO * smallest:  # (no ten-fold change at all)
            break
        halves = [int(window / h)] + [2**k for k in range(64) if 2**k * h <= widest]
        for half in sorted(set(halves) - {0}):
            size = 2 * half + 1
            top = scipy.ndimage.maximum_filter1d(filled, size, axis=axis, mode=modes[axis])
            bottom = scipy.ndimage.minimum_filter1d(filled, size, axis=axis, mode=modes[axis])
            found = top > SHARP_RATIO * bottom
            del top
            if half * h > window:  # only within the local rule's reach
                reach = _flexural_parameter_grid(bottom, operator.stiffness)
                found &= reach >= np.float32(half * h / LOCAL_STEEP_WINDOW)
                del reach
            del bottom
            near_jump = scipy.ndimage.maximum_filter1d(
                jumpy.view(np.uint8), size, axis=axis, mode=modes[axis]
            ).view(bool)
            steep |= found & ~near_jump
    sharp = jumpy | steep
    edge_nodes = np.zeros(rigidity.shape, dtype=bool)
    if operator.edges[0] != "periodic":
        edge_nodes[[0, -1], :] = True
    if operator.edges[1] != "periodic":
        edge_nodes[:, [0, -1]] = True
    sharp |= edge_nodes
    if not sharp.any():
        return SharpFeatures(sharp, 0.0)
    # the band width: by the kind of feature, of the weakest plate next to it
    touches_zero = low == 0 if broken else np.zeros(rigidity.shape, dtype=bool)
    weakest_next = (
        _extreme3(np.where(plate, rigidity, np.float32(np.inf)), modes, False) if broken else low
    )
    jump = jumpy & ~touches_zero
    gentle = (steep | edge_nodes) & ~touches_zero & ~jump
    at_break = sharp & touches_zero & np.isfinite(weakest_next)
    strongest_next = _extreme3(rigidity, modes, True)
    spacing = max(operator.dx, operator.dy)
    widths = np.zeros(rigidity.shape, dtype=np.float32)
    least = np.zeros(rigidity.shape, dtype=np.float32)
    for mask, factor in (
        (jump, BAND_FLEXURAL_PARAMETERS),
        (gentle, STEEP_FLEXURAL_PARAMETERS),
        (at_break, BREAK_FLEXURAL_PARAMETERS),
    ):
        if mask.any():
            local = factor * _flexural_parameter_grid(weakest_next[mask], operator.stiffness)
            narrow = local.copy()
            if factor != STEEP_FLEXURAL_PARAMETERS:
                stiff = _flexural_parameter_grid(strongest_next[mask], operator.stiffness)
                np.maximum(narrow, STIFF_SIDE_FLEXURAL_PARAMETERS * stiff, out=narrow)
                np.maximum(local, _stiff_side_reach(stiff, spacing), out=local)
            widths[mask] = np.maximum(widths[mask], local)
            least[mask] = np.maximum(least[mask], narrow)
    return SharpFeatures(sharp, float(widths.max()), widths, least)


def _stiff_side_reach(alpha: np.ndarray, spacing: float) -> np.ndarray:
    """Band width (m) from a sharp node into a stiff plate of flexural parameters *alpha*
    (m) on a grid of largest *spacing* (m): :data:`STIFF_SIDE_REACH_FLEXURAL_PARAMETERS`
    flexural parameters less :data:`REACH_FRAME_NODES` spacings, and at least
    :data:`STIFF_SIDE_FLEXURAL_PARAMETERS` flexural parameters."""
    reach = np.float32(STIFF_SIDE_REACH_FLEXURAL_PARAMETERS) * alpha
    reach -= np.float32(REACH_FRAME_NODES * spacing)
    return np.maximum(reach, np.float32(STIFF_SIDE_FLEXURAL_PARAMETERS) * alpha)


def _flexural_parameter_grid(rigidity: np.ndarray, stiffness: float) -> np.ndarray:
    return np.power(np.float32(4.0 / stiffness) * rigidity, np.float32(0.25))


def _factor_bytes(count: int, across: float, spacing: float) -> float:
    """Estimated LU factor memory (bytes) of a band of *count* nodes *across* metres wide on
    a grid of smallest *spacing* (m): :data:`FACTOR_BYTES_PER_NODE_CELL` per node and per
    node across the band."""
    return FACTOR_BYTES_PER_NODE_CELL * count * (2.0 * across / spacing + 1.0)


@dataclass(frozen=True)
class SharpDistance:
    """Distance of every node from its nearest sharp node, wrapping round periodic axes.

    Made once per rigidity grid (:meth:`build`) and shared by every band taken from it
    (the band over the caps and its fallback, :func:`sharp_band`).

    A periodic axis is extended by the widest band (wrapped copies of the grid) before
    the Euclidean distance transform, which knows no periodic edges: without that, a
    feature near the first or last rows of the solve grid (the grid's own west or south
    edge: the margins of ``edges="infinite"`` follow its east and north edges) got a band
    cut off there, on one side only. Measured with the te_map case of
    tests/benchmarks/variable.py at 256² of 4 km (te 0-100 km up to its tapered edges):
    20 iterations with the cut band (71.2 k nodes), 10 with the wrapped one (74.7 k).

    Attributes
    ----------
    metres : numpy.ndarray of float64, shape (ny, nx)
        The distance (m); exact within the widest band it was built for.
    nearest : tuple of numpy.ndarray of int32, optional
        Row and column of each node's nearest sharp node (for per-node widths).
    """

    metres: np.ndarray
    nearest: tuple[np.ndarray, np.ndarray] | None

    @classmethod
    def build(
        cls, operator: PlateOperator, sharp: np.ndarray, widest: float, nearest: bool = True
    ) -> SharpDistance:
        """The distances from the *sharp* nodes, exact within *widest* (m) of them; with
        *nearest*, also the nearest sharp node of every node. The memory of the wrapped
        grid is checked first (InputError naming the step)."""
        sampling = (operator.dy, operator.dx)
        pads = [
            (min(n, math.ceil(widest / h) + 1),) * 2 if edge == "periodic" else (0, 0)
            for n, h, edge in zip(sharp.shape, sampling, operator.edges, strict=True)
        ]
        crop = tuple(
            slice(before, before + n) for (before, _), n in zip(pads, sharp.shape, strict=True)
        )
        rows, columns = (n + 2 * before for n, (before, _) in zip(sharp.shape, pads, strict=True))
        # the wrapped mask, its float64 distances and (with nearest) two int32 indices
        check_memory(
            float(rows * columns * (17 if nearest else 9)),
            f"the distance transform of the finite-difference band on {rows} x {columns} "
            f"nodes (the {sharp.shape[0]} x {sharp.shape[1]} solve grid wrapped by the "
            f"widest band, {widest:.0f} m)",
            advice="use fewer or coarser cells, or a te grid with a smaller range",
        )
        padded = np.pad(sharp, pads, mode="wrap")
        if not nearest:
            distance = scipy.ndimage.distance_transform_edt(~padded, sampling=sampling)
            return cls(np.ascontiguousarray(distance[crop]), None)
        indices = np.empty((2, *padded.shape), dtype=np.int32)
        distance = scipy.ndimage.distance_transform_edt(
            ~padded, sampling=sampling, return_indices=True, indices=indices
        )
        del padded
        j = (indices[0][crop] - pads[0][0]) % sharp.shape[0]
        i = (indices[1][crop] - pads[1][0]) % sharp.shape[1]
        return cls(np.ascontiguousarray(distance[crop]), (j, i))


def sharp_band(
    operator: PlateOperator,
    width: float,
    max_nodes: int,
    sharp: np.ndarray | None = None,
    widths: np.ndarray | None = None,
    max_factor_bytes: float = MAX_FACTOR_BYTES,
    distance: SharpDistance | None = None,
) -> tuple[np.ndarray, float, np.ndarray]:
    """Nodes within *width* (m) of a sharp feature; the width shrinks to respect *max_nodes*.

    Parameters
    ----------
    operator : PlateOperator
        The operator whose rigidity and edges define the features.
    width : float
        Distance (m) by which the sharp nodes are widened (the largest, with *widths*).
    max_nodes : int
        Cap on the band size. The width shrinks (:data:`BAND_SHRINK`) until the band fits,
        in nodes and in the estimated memory of its LU factors (*max_factor_bytes*), down
        to one spacing; if even that does not fit, the band keeps as many of those nodes
        as fit, nearest to a sharp node first and among equals those with the largest
        rigidity contrast in their 3 x 3 neighbourhood (zero rigidity next to a plate
        first), and is empty (the blend works alone) only when no node fits. Measured
        with tests/benchmarks/te_map_robustness.py (band capped at a quarter of what it
        asks for), against dropping the band: holes at 256² of 4 km ConvergenceError ->
        52 iterations, clipped at 256² of 4 km and 512² of 2 km ConvergenceError -> 155
        and 142; te_map, jumps and rough still raise ConvergenceError.
    sharp : numpy.ndarray of bool, optional
        The sharp nodes if already found (:func:`find_sharp_features`).
    widths : numpy.ndarray, optional
        A width (m) per sharp node (:attr:`SharpFeatures.widths`): a node joins the band
        when it lies within the width of its nearest sharp node (all scaled down
        together by the cap); *width* alone by default.
    max_factor_bytes : float, default :data:`MAX_FACTOR_BYTES`
        Cap on the estimated memory (bytes) of the band's LU factors
        (:data:`FACTOR_BYTES_PER_NODE_CELL`); see :func:`factor_budget`.
    distance : SharpDistance, optional
        The distances from *sharp*, if already made (exact within the largest width
        asked for here, and with the nearest sharp nodes when *widths* are given).

    Returns
    -------
    nodes : numpy.ndarray of int
        Sorted flat indices of the band.
    width : float
        The largest width used (m); one spacing for a partial band, 0 when the band was
        dropped or there is no sharp feature.
    sharp : numpy.ndarray of bool, shape (ny, nx)
        The sharp nodes before widening.
    """
    if sharp is None:
        sharp = find_sharp_features(operator).nodes
    if not sharp.any():
        return np.zeros(0, dtype=np.int64), 0.0, sharp
    minimum = max(operator.dx, operator.dy)
    width = max(float(width), minimum)
    widest = width if widths is None else max(float(widths.max()), width)
    if distance is None:
        distance = SharpDistance.build(operator, sharp, widest, widths is not None)
    reach = None
    if widths is None:
        relative = distance.metres
    else:
        if distance.nearest is None:
            raise ValueError("per-node widths need the nearest sharp nodes")
        # the nearest sharp node's width: the distance relative to it (<= 1 inside its
        # band), in metres at the largest width
        reach = widths[distance.nearest]
        np.maximum(reach, np.float32(minimum), out=reach)
        relative = distance.metres / reach
        relative *= width
    spacing = min(operator.dx, operator.dy)
    largest = width
    while True:
        band = relative <= width
        count = int(np.count_nonzero(band))
        across = width  # the band's width; with *widths*, its mean over the band
        if reach is not None and count:
            across = float(reach[band].mean()) * width / largest
        factor_bytes = _factor_bytes(count, across, spacing)
        if count <= max_nodes and factor_bytes <= max_factor_bytes:
            return np.flatnonzero(band), width, sharp
        if width <= minimum:
            break
        width = max(BAND_SHRINK * width, minimum)
    # not even the narrowest band fits: keep the part of it that does, nearest to the
    # sharp nodes first and, among those, the largest rigidity contrasts (zeros first)
    fit = int(min(max_nodes, max_factor_bytes / _factor_bytes(1, minimum, spacing)))
    if fit > 0:
        modes = _modes(operator)
        rigidity = operator.rigidity.astype(np.float32)
        low = _extreme3(rigidity, modes, False)
        contrast = np.full(rigidity.shape, np.inf, dtype=np.float32)
        np.divide(_extreme3(rigidity, modes, True), low, out=contrast, where=low > 0)
        candidates = np.flatnonzero(band)
        order = np.lexsort((-contrast.ravel()[candidates], relative.ravel()[candidates]))
        chosen = np.sort(candidates[order[:fit]])
        log.warning(
            "the band round the sharp features (%d nodes at its narrowest) exceeds the band "
            "cap (%d nodes, %.1f GiB of LU factors); keeping %d of its nodes (more iterations)",
            count,
            max_nodes,
            max_factor_bytes / 2**30,
            chosen.size,
        )
        return chosen, minimum, sharp
    log.warning(
        "the sharp features alone (%d nodes, about %.1f GiB of LU factors) exceed the band "
        "cap (%d nodes, %.1f GiB); solving without the band (more iterations)",
        count,
        factor_bytes / 2**30,
        max_nodes,
        max_factor_bytes / 2**30,
    )
    return np.zeros(0, dtype=np.int64), 0.0, sharp
