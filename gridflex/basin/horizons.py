"""Horizons of a staged basin through time: the depth of every stage's top at every step.

A horizon is the top of one stage of the pile (horizon ``k`` the top of the ``k``-th
stage from the bottom). After each step of a staged loading the pile is known as the
present (compacted) thickness of each of its stages; the basement (the surface before
the first stage) lies at ``base - w``, the plate having moved down by ``w``. The top of
stage ``k`` is then at the elevation

    z_k = base - w + sum_{i <= k} h_i,

and its depth below sea level (the basin's sea level, the present datum) is
``sea_level - z_k``, positive down. A horizon not yet deposited at a step is NaN.
Because each stage's thickness is recomputed at each step from its grains (compaction
under the younger stages), the buried horizons of earlier times follow their burial.

The accommodation created during a step is the new space below its level (base level,
or sea level) for the step's sediment: the rise of the level plus the sinking of the
floor the step deposits on (the top of the pile before it, the basement for the first
step) by flexure and by the compaction of the pile under it,

    created_j = (level_j - level_{j-1}) + (d_f(t_j) - d_f(t_{j-1})),

with d_f the depth of that floor, level_{-1} the basin's sea level and d_f(t_{-1}) the
depth of the surface before the first stage. Then the accommodation left after the step
is what was left before, plus what was created, minus the stage's thickness (an
accommodation budget, e.g. Jervey 1988 - from memory).

Depths are positive DOWN (m); elevations positive up.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from gridflex.memory import check_memory

__all__ = ["accommodation_created", "horizon_ages", "horizon_depths"]


def horizon_depths(
    base: np.ndarray,
    deflections: Sequence[np.ndarray],
    columns: Sequence[Sequence[np.ndarray]],
    datum: float,
) -> tuple[np.ndarray, np.ndarray]:
    """Depths below *datum* of the basement and of every stage's top at every step.

    Parameters
    ----------
    base : numpy.ndarray
        Elevation of the surface before the first stage (m, positive up), ``(ny, nx)``.
    deflections : sequence of numpy.ndarray
        Cumulative deflection after each step (m, positive down), ``(ny, nx)`` each.
    columns : sequence of sequence of numpy.ndarray
        After each step, the present thickness of each stage of the pile (m, oldest
        first), ``(ny, nx)`` each.
    datum : float
        Sea level the depths are measured from (m, positive up).

    Returns
    -------
    basement : numpy.ndarray
        ``(step, ny, nx)``: depth of the basement below *datum* (m, positive down).
    horizons : numpy.ndarray
        ``(step, horizon, ny, nx)``: depth of the top of each stage below *datum* (m,
        positive down); NaN where the stage is not (or no longer) in the pile.

    Examples
    --------
    >>> base = np.full((1, 1), -100.0)
    >>> column = [np.full((1, 1), 30.0), np.full((1, 1), 20.0)]
    >>> basement, tops = horizon_depths(base, [np.full((1, 1), 10.0)], [column], 0.0)
    >>> float(basement[0, 0, 0]), tops[0, :, 0, 0].tolist()
    (110.0, [80.0, 60.0])
    """
    steps = len(deflections)
    count = max((len(c) for c in columns), default=0)
    check_memory(
        (steps * (count + 2)) * base.nbytes,
        f"the horizon depths of {steps} step(s) and {count} horizon(s)",
    )
    basement = np.stack([datum - (base - w) for w in deflections]) if steps else np.zeros(0)
    horizons = np.full((steps, count) + base.shape, np.nan)
    for step, column in enumerate(columns):  # a loop over steps, not cells
        if len(column):
            tops = np.cumsum(np.stack(column), axis=0)
            horizons[step, : len(column)] = basement[step] - tops
    return basement, horizons


def horizon_ages(ages: Sequence[float], columns: Sequence[Sequence[np.ndarray]]) -> np.ndarray:
    """The age of each horizon: that of the first step whose pile reached it (years).

    Examples
    --------
    >>> one = np.zeros((1, 1))
    >>> horizon_ages([3e6, 1e6], [[one], [one, one]]).tolist()
    [3000000.0, 1000000.0]
    """
    out: list[float] = []
    for age, column in zip(ages, columns, strict=True):
        while len(out) < len(column):
            out.append(float(age))
    return np.array(out, dtype=np.float64)


def accommodation_created(
    levels: Sequence[np.ndarray],
    basement: np.ndarray,
    horizons: np.ndarray,
    counts: Sequence[int],
    base: np.ndarray,
    datum: float,
) -> np.ndarray:
    """The accommodation created during each step (m, positive: new space).

    Parameters
    ----------
    levels : sequence of numpy.ndarray
        Elevation of each step's level (its base level, or its sea level; m, up).
    basement, horizons : numpy.ndarray
        Of :func:`horizon_depths`.
    counts : sequence of int
        Number of stages in the pile after each step.
    base : numpy.ndarray
        Elevation of the surface before the first stage (m, positive up).
    datum : float
        The basin's sea level (m, positive up): the level before the first step.

    Returns
    -------
    numpy.ndarray
        ``(step, ny, nx)``; NaN where the floor of a step was removed by it.

    Examples
    --------
    >>> base = np.full((1, 1), -100.0)
    >>> basement = np.array([[[110.0]], [[130.0]]])
    >>> tops = np.array([[[[80.0]], [[np.nan]]], [[[85.0]], [[60.0]]]])
    >>> created = accommodation_created(
    ...     [np.zeros((1, 1)), np.full((1, 1), 5.0)], basement, tops, [1, 2], base, 0.0
    ... )
    >>> created[:, 0, 0].tolist()
    [10.0, 10.0]
    """
    out = np.empty_like(basement)
    previous_level = np.full(base.shape, float(datum))
    previous_count = 0
    for step, (level, count) in enumerate(zip(levels, counts, strict=True)):
        floor = previous_count - 1  # the top of the pile before the step; -1: basement

        def depth(at: int, floor: int = floor) -> np.ndarray:
            if at < 0:
                return datum - base
            if floor < 0:
                return basement[at]
            return horizons[at, floor]

        now = depth(step) if floor < count else np.full(base.shape, np.nan)
        out[step] = (level - previous_level) + (now - depth(step - 1))
        previous_level, previous_count = level, count
    return out
