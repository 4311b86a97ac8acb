"""Block Gauss-Seidel over square patches of the solve grid: the finest smoother of the
aggregation multigrid.

The grid's nodes are cut into square patches of :data:`PATCH_NODES` x :data:`PATCH_NODES`
nodes, coloured like a chessboard (alternating along each axis; a patch at the far end
takes a third colour where it would meet the first patch across a periodic edge, as the
solve grid's edges are). Patches of one colour lie a patch apart, further than the
13-point stencil reaches, so they do not couple (checked at set-up): each colour's
patches are solved exactly at once (their K blocks inverted at set-up), and the colours
follow one another, the residual kept up to date between them. A second grid of patches,
shifted by half a patch along both axes, follows the first (its colours after the first
grid's), so that an error straddling a patch's edge lies inside a patch of the other
grid. That is
block Gauss-Seidel with overlapping blocks, a multiplicative Schwarz method (Varga 1962,
"Matrix Iterative Analysis", ch. 3; Smith, Bjørstad & Gropp 1996, "Domain Decomposition";
as a multigrid smoother, Trottenberg, Oosterlee & Schüller 2001, "Multigrid"; all recalled
from memory). A sweep through the colours in one order and the next in the reverse order
make a smoother whose V-cycle stays symmetric.

Why: on te maps that change from cell to cell (te 0-100 km, tests/benchmarks/
te_map_robustness.py "rough") the point Gauss-Seidel smoother leaves errors that sit on a
few cells (small stiff islands among te = 0 cells, narrow necks) and that the aggregates'
rigid-body modes do not represent: the slowest error of the V-cycle at 256² of 250 m was a
few such spots over a smooth background. A patch solve removes any error that lives inside
one patch. Measured (solve iterations at the default tolerance, multigrid without the
strengthening of :meth:`~gridflex.solvers.multigrid.AggregationPreconditioner.strengthen`),
rough at 250 m:

=============================  =====  =====
finest smoother                256²   512²
=============================  =====  =====
point Gauss-Seidel             356    554
one grid of 8-node patches     151    175
one grid of 6 / 4              --     256 / 223
two grids of 8-node patches    84     109
two grids of 6 / 4             94 / 104   105 / 138
=============================  =====  =====

At 256² of 1 km: point Gauss-Seidel 167, two grids of 8 / 6 / 4 50 / 65 / 65. The point
sweeps beside the patches bought little (one grid of 8: 145 with them, 151 without). On
te_map, clipped, jumps and holes at 256² of 1 and 4 km (17-31 iterations) one grid of
patches changed the count by -3 to +0.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from gridflex.memory import check_memory
from gridflex.solvers.row_blocks import for_row_blocks

__all__ = ["PATCH_NODES", "PatchSmoother", "patch_bytes"]

PATCH_NODES = 8
"""Nodes along a patch's side (see the module docstring for the measurements)."""

INVERSE_CHUNK = 1024
"""Patches whose blocks are inverted (or multiplied) at a time."""

FILL_CHUNK = 1 << 20
"""Non-zeros of the operator placed into the patches' blocks at a time."""

ENTRIES_PER_NODE = 13
"""Non-zeros per row of the plate's operator (the 13-point stencil)."""


def patch_bytes(nodes: int, size: int = PATCH_NODES, grids: int = 2) -> float:
    """Estimated peak memory (bytes) of building a :class:`PatchSmoother` on *nodes* nodes
    with *grids* grids of patches of *size* x *size*, for each grid: the inverses (size²
    values per node), the operator's columns sorted by colour (12 bytes per non-zero) and
    a copy of one colour's while it is converted, the slots' node indices; and the
    bounded work arrays of :data:`FILL_CHUNK` non-zeros. Measured with tracemalloc at
    1024² of 250 m (rough map of tests/benchmarks/te_map_robustness.py, 1.17 M nodes, two
    grids): peak 1364 / 590 bytes per node with 8 / 4-node patches (estimates 1537 /
    769), built in 7.1 / 1.8 s."""
    per_node = 8.0 * size * size + 1.25 * 12.0 * ENTRIES_PER_NODE + 40.0
    return grids * per_node * float(nodes) + 48.0 * FILL_CHUNK


@dataclass(eq=False)
class PatchColour:
    """The patches of one colour.

    Attributes
    ----------
    nodes : numpy.ndarray of int64, shape (patches, size²)
        Node of each patch slot (row-major within the patch); slots beyond the grid's
        edge hold the index of the spare last entry of the work vectors.
    inverses : numpy.ndarray, shape (patches, size², size²)
        Inverse of K on each patch's nodes (identity on the slots beyond the edge).
    columns : scipy.sparse.csr_array, shape (nodes, patches size²)
        K's columns of the slots, in slot order (column 0 for slots beyond the edge,
        whose corrections are 0): the change of K x when the slots' values change.
    """

    nodes: np.ndarray
    inverses: np.ndarray
    columns: sp.csr_array


@dataclass(eq=False)
class PatchSmoother:
    """Block Gauss-Seidel over the colours of one or two grids of square patches (module
    docstring).

    Work vectors have one spare entry at the end (index nodes), which the slots beyond
    the grid's edge read and write.

    Attributes
    ----------
    colours : list of PatchColour
        The colours in sweep order: the first grid's, then the shifted grid's with
        *overlap*.
    size : int
        Nodes along a patch's side.
    overlap : bool
        Whether a second grid of patches, shifted by half a patch along both axes,
        follows the first.
    """

    colours: list[PatchColour]
    size: int
    overlap: bool

    @classmethod
    def build(
        cls,
        matrix: sp.csr_array,
        shape: tuple[int, int],
        size: int = PATCH_NODES,
        overlap: bool = True,
    ) -> PatchSmoother:
        """Patches of *size* x *size* nodes for the operator *matrix* on a grid of *shape*.

        Parameters
        ----------
        matrix : scipy.sparse.csr_array
            K (symmetric positive definite), rows and columns the grid's nodes in
            row-major order.
        shape : tuple of int
            (ny, nx) nodes.
        size : int, default :data:`PATCH_NODES`
            Nodes along a patch's side (at least 3, so that patches of one colour do
            not couple through the stencil's reach of two).
        overlap : bool, default True
            Add a second grid of patches shifted by half a patch (each node then lies in
            two patches that overlap by half).

        Raises
        ------
        InputError
            Not enough memory (estimated first, :func:`patch_bytes`).
        ValueError
            *size* below 3, or *matrix* not of the grid's size.
        numpy.linalg.LinAlgError
            A patch's block of K is singular (K is not positive definite).
        """
        ny, nx = (int(n) for n in shape)
        count = ny * nx
        if size < 3:
            raise ValueError(f"patch size must be at least 3 nodes, got {size}")
        if matrix.shape != (count, count):
            raise ValueError(f"operator of shape {matrix.shape} for a grid of {shape}")
        check_memory(
            patch_bytes(count, size, len(_offsets(size, overlap))),
            f"patch smoother of the finite-difference solve on {ny} x {nx} nodes",
        )
        # K's columns (K symmetric: its CSR arrays read as CSC, no copy)
        by_column = sp.csc_array((matrix.data, matrix.indices, matrix.indptr), shape=(count, count))
        colours = []
        for offset in _offsets(size, overlap):
            colours += _colours(matrix, by_column, (ny, nx), size, offset)
        return cls(colours, size, overlap)

    def sweep(self, x: np.ndarray, residual: np.ndarray, reverse: bool = False) -> None:
        """One sweep through the colours (in reverse order with *reverse*), in place.

        Parameters
        ----------
        x : numpy.ndarray, shape (nodes + 1,)
            The iterate; the spare last entry is overwritten.
        residual : numpy.ndarray, shape (nodes + 1,)
            b − K x on entry, kept so; the spare last entry is overwritten.
        """
        colours = self.colours[::-1] if reverse else self.colours
        for colour in colours:
            # the slots beyond the edge read 0 and, their rows of the inverse being those
            # of the identity, get a correction of 0
            residual[-1] = 0.0
            correction = _multiply(colour.inverses, residual[colour.nodes])
            x[colour.nodes] += correction  # (those slots all hit the spare entry)
            residual[:-1] -= colour.columns @ correction.ravel()

    def smooth(self, rhs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """One sweep on K x = *rhs* from x = 0: (x, b − K x), each with the spare entry
        (shape (nodes + 1,))."""
        x = np.zeros(rhs.size + 1)
        residual = np.empty(rhs.size + 1)
        residual[:-1] = rhs
        self.sweep(x, residual)
        return x, residual


def _offsets(size: int, overlap: bool) -> tuple[int, ...]:
    """Shifts (nodes, along both axes) of the patch grids."""
    return (0, size // 2) if overlap else (0,)


def _colours(
    matrix: sp.csr_array,
    by_column: sp.csc_array,
    shape: tuple[int, int],
    size: int,
    offset: int,
) -> list[PatchColour]:
    """The colours (non-empty, in order) of the patches of *size* x *size* nodes whose grid
    starts *offset* nodes before the first row and column (its first patches are cut by
    the edge): the products of the colours along each axis (:func:`_axis_colours`)."""
    ny, nx = shape
    count = ny * nx
    rows_of_patches = -(-(ny + offset) // size)
    columns_of_patches = -(-(nx + offset) // size)
    slots = size * size
    # each patch's nodes, the spare index `count` beyond the edges
    padded = np.full((rows_of_patches * size, columns_of_patches * size), count)
    padded[offset : offset + ny, offset : offset + nx] = np.arange(count).reshape(ny, nx)
    tiles = padded.reshape(rows_of_patches, size, columns_of_patches, size).transpose(
        0, 2, 1, 3
    )  # (patch row, patch column, row in patch, column in patch)
    del padded
    row_colours = _axis_colours(ny, size, offset)
    column_colours = _axis_colours(nx, size, offset)
    colour_count = int(row_colours.max() + 1) * int(column_colours.max() + 1)
    colour_of = (row_colours[:, None] * int(column_colours.max() + 1) + column_colours).ravel()
    order = np.argsort(colour_of, kind="stable")  # patches colour by colour
    nodes = tiles.reshape(-1, slots)[order]  # (patches by colour, slot)
    del tiles
    # drop patches wholly beyond the edges (a shifted grid's last row or column)
    keep = (nodes < count).any(axis=1)
    nodes, colour_of = nodes[keep], colour_of[order][keep]
    # the patch (in this order) and slot of every node
    patch_of = np.empty(count + 1, dtype=np.int64)
    slot_of = np.empty(count + 1, dtype=np.int64)
    inside = nodes < count
    patch_of[nodes[inside]] = np.nonzero(inside)[0]
    slot_of[nodes[inside]] = np.nonzero(inside)[1]
    blocks = np.zeros((nodes.shape[0], slots, slots))
    _fill_blocks(matrix, patch_of, slot_of, colour_of, blocks)
    del patch_of, slot_of
    outside_patch, outside_slot = np.nonzero(~inside)
    blocks[outside_patch, outside_slot, outside_slot] = 1.0
    _invert(blocks)
    bounds = np.searchsorted(colour_of, np.arange(colour_count + 1))
    colours = []
    for first, last in zip(bounds[:-1], bounds[1:], strict=True):
        if first == last:
            continue
        colour_nodes = nodes[first:last]
        flat = colour_nodes.ravel()
        # a slot beyond the edge takes column 0, which its correction (always 0, see
        # PatchSmoother.sweep) cancels
        columns = sp.csr_array(by_column[:, np.where(flat < count, flat, 0)])
        colours.append(PatchColour(colour_nodes, blocks[first:last], columns))
    return colours


def _axis_colours(nodes: int, size: int, offset: int) -> np.ndarray:
    """Colours of the patches along one axis of *nodes* nodes (patch p covers nodes
    p size − offset to (p + 1) size − offset, cut by the ends), such that two patches
    closer than the stencil's reach (two nodes), the way round a periodic axis too, never
    share one: alternating 0 and 1, and the first colour not taken by its neighbours for
    a patch near the far end (an odd count, or a thin end patch, would meet the first
    patches across the wrap). Interior patches are *size* >= 3 wide, so only the ends can
    conflict."""
    count = -(-(nodes + offset) // size)
    starts = np.maximum(np.arange(count) * size - offset, 0)
    stops = np.minimum((np.arange(count) + 1) * size - offset, nodes)
    colours = np.arange(count) % 2

    def close(a: int, b: int) -> bool:  # a < b
        return bool(starts[b] - stops[a] < 2 or starts[a] + nodes - stops[b] < 2)

    for patch in range(count):
        taken = {int(colours[other]) for other in range(patch) if close(other, patch)}
        if int(colours[patch]) in taken:
            colours[patch] = min(set(range(len(taken) + 1)) - taken)
    return colours


def _fill_blocks(
    matrix: sp.csr_array,
    patch_of: np.ndarray,
    slot_of: np.ndarray,
    colour_of: np.ndarray,
    blocks: np.ndarray,
) -> None:
    """blocks[p, i, j] = K[a, b] for the nodes a, b in slots i, j of patch p, from K's
    non-zeros taken a run of rows at a time (bounded temporaries). Checks that no
    non-zero joins two patches of one colour (*colour_of*, by patch), which the colours'
    simultaneous solves rely on."""
    count = matrix.shape[0]
    step = max(1, FILL_CHUNK // ENTRIES_PER_NODE)
    for start in range(0, count, step):
        stop = min(start + step, count)
        first, last = int(matrix.indptr[start]), int(matrix.indptr[stop])
        rows = np.repeat(
            np.arange(start, stop, dtype=np.int64), np.diff(matrix.indptr[start : stop + 1])
        )
        columns = matrix.indices[first:last]
        same = patch_of[rows] == patch_of[columns]
        across = patch_of[rows[~same]], patch_of[columns[~same]]
        if np.any(colour_of[across[0]] == colour_of[across[1]]):
            raise RuntimeError("patch smoother: two patches of one colour are coupled")
        rows, columns = rows[same], columns[same]
        blocks[patch_of[rows], slot_of[rows], slot_of[columns]] = matrix.data[first:last][same]


def _invert(blocks: np.ndarray) -> None:
    """Replace each symmetric positive definite block by its inverse, symmetrised (so that
    the smoother's sweeps in both orders are each other's adjoints), in place.

    Each block is scaled to a unit diagonal before it is inverted: a te = 0 node beside
    stiff plate has a diagonal some 1e12 times smaller than its neighbours' at 250 m cells
    (block condition numbers up to 6e12 on the rough map of tests/benchmarks/
    te_map_robustness.py, 2e7 after scaling)."""
    for start in range(0, blocks.shape[0], INVERSE_CHUNK):
        chunk = blocks[start : start + INVERSE_CHUNK]
        scale = 1.0 / np.sqrt(np.einsum("pii->pi", chunk))
        outer = scale[:, :, None] * scale[:, None, :]
        inverse = np.linalg.inv(chunk * outer)
        np.add(inverse, inverse.transpose(0, 2, 1), out=chunk)
        chunk *= 0.5 * outer


def _multiply(inverses: np.ndarray, local: np.ndarray) -> np.ndarray:
    """inverses[p] @ local[p] for every patch p, shared among threads."""
    out = np.empty_like(local)

    def work(first: int, last: int, _thread: int) -> None:
        np.einsum("pij,pj->pi", inverses[first:last], local[first:last], out=out[first:last])

    for_row_blocks(local.shape[0], max(1, min(INVERSE_CHUNK, math.ceil(local.shape[0] / 8))), work)
    return out
