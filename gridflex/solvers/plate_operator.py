"""Variable-rigidity thin-plate operator by finite differences in energy (moment) form.

The plate equation with a spatially varying rigidity D(x, y),

    ∂xx[D (w_xx + ν w_yy)] + ∂yy[D (w_yy + ν w_xx)] + 2 ∂xy[D (1 − ν) w_xy] + Δρ g w = q,

(the moment form of ∇²(D∇²w) − (1 − ν)(D_xx w_yy − 2 D_xy w_xy + D_yy w_xx); Timoshenko &
Woinowsky-Krieger 1959, *Theory of Plates and Shells*, ch. 10) is discretised through its
potential energy: nodal curvatures δxx w, δyy w (3-point second differences) carry the nodal
rigidity, cell-corner twists δxy w (4-point) carry the harmonic mean of the four surrounding
nodal rigidities, and the operator is the gradient of the quadratic energy,

    K = δxxᵀ W δxx + δyyᵀ W δyy + ν (δxxᵀ W δyy + δyyᵀ W δxx) + 2 (1 − ν) δxyᵀ W_c δxy
        + diag(a Δρ g),           K w = a q,

with W = a D, a the nodal area weight. K is symmetric by construction and positive definite
when Δρ g > 0. For constant D on a periodic grid it reduces to the 13-point biharmonic stencil
whose Fourier symbol is (4 sin²(kx dx/2)/dx² + 4 sin²(ky dy/2)/dy²)².

Nodes with D = 0 carry no moment: a single line of them is a hinge (w continuous, no moment);
wider gaps separate plates, and the plate-end nodes next to a gap get half the area weight
(see :func:`area_weights`). The operator is applied matrix-free with array slices (no loop over
cells); :meth:`PlateOperator.matrix` assembles the same operator, or any principal sub-matrix
of it, as a scipy sparse matrix with vectorised COO construction.
"""

from __future__ import annotations

import functools
import os
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp

from ..errors import InputError

__all__ = ["AXIS_EDGES", "PlateOperator", "area_weights", "corner_rigidity"]

AXIS_EDGES = ("periodic", "free", "clamped")
"""What the operator does at the two ends of one grid axis.

``periodic``: the axis wraps round. ``free``: the plate ends at the outermost nodes
(Kirchhoff free edge, natural condition of the energy: no curvature term whose stencil leaves
the grid, half area weight on the edge nodes). ``clamped``: w = 0 and ∂w/∂n = 0 on a line of
nodes one spacing beyond the outermost nodes (mirror ghost, half weight on that line)."""


def _pad_axis(values: np.ndarray, axis: int, periodic: bool) -> np.ndarray:
    """One ghost layer on each side of *axis*: wrapped (periodic) or edge-replicated."""
    width = [(0, 0), (0, 0)]
    width[axis] = (1, 1)
    return np.pad(values, width, mode="wrap" if periodic else "edge")


def corner_rigidity(rigidity: np.ndarray, edges: tuple[str, str]) -> np.ndarray:
    """Harmonic mean of the four nodal rigidities round every cell corner.

    Parameters
    ----------
    rigidity : numpy.ndarray, shape (ny, nx)
        Nodal rigidity D (N m), >= 0.
    edges : tuple of str
        Edge kind of the y and x axes (see :data:`AXIS_EDGES`).

    Returns
    -------
    numpy.ndarray, shape (ny + 1, nx + 1)
        Corner rigidity (N m); corner (J, I) lies between nodes (J - 1, I - 1) and (J, I).
        Beyond a non-periodic edge the edge value is repeated. A corner touching a node
        with D = 0 gets 0, so a line of zero rigidity cuts the twisting coupling.
    """
    ext = _pad_axis(_pad_axis(rigidity, 0, edges[0] == "periodic"), 1, edges[1] == "periodic")
    quads = (ext[1:, 1:], ext[1:, :-1], ext[:-1, 1:], ext[:-1, :-1])
    positive = np.logical_and.reduce([q > 0 for q in quads])
    with np.errstate(divide="ignore"):
        inverse_sum = sum(np.where(positive, 1.0 / np.where(positive, q, 1.0), 0.0) for q in quads)
    return np.where(positive, 4.0 / np.where(positive, inverse_sum, 1.0), 0.0)


def _edge_weights(n: int, edge: str) -> np.ndarray:
    weights = np.ones(n)
    if edge == "free":
        weights[[0, -1]] = 0.5
    return weights


def _break_weights_axis(rigidity: np.ndarray, axis: int, periodic: bool) -> np.ndarray:
    """0.5 at zero-rigidity nodes that end a plate next to a gap along *axis*, else 1."""
    zero = rigidity == 0
    plate = rigidity > 0
    if periodic:
        before_plate, after_plate = np.roll(plate, 1, axis), np.roll(plate, -1, axis)
        before_zero, after_zero = np.roll(zero, 1, axis), np.roll(zero, -1, axis)
    else:
        n = rigidity.shape[axis]
        fill = np.zeros_like(plate)

        def shift(mask: np.ndarray, step: int) -> np.ndarray:
            out = fill.copy()
            src = [slice(None)] * 2
            dst = [slice(None)] * 2
            if step > 0:  # value of the neighbour before (index - 1)
                src[axis], dst[axis] = slice(0, n - 1), slice(1, n)
            else:
                src[axis], dst[axis] = slice(1, n), slice(0, n - 1)
            out[tuple(dst)] = mask[tuple(src)]
            return out

        before_plate, after_plate = shift(plate, 1), shift(plate, -1)
        before_zero, after_zero = shift(zero, 1), shift(zero, -1)
    end = zero & ((before_plate & after_zero) | (before_zero & after_plate))
    return np.where(end, 0.5, 1.0)


def area_weights(rigidity: np.ndarray, edges: tuple[str, str]) -> np.ndarray:
    """Nodal area weights a of the load and of the buoyancy term.

    The product, over the two axes, of the trapezoid weight of the node along that axis:
    0.5 on a free grid edge, 0.5 at a zero-rigidity node that is the end of a plate facing
    a gap (a plate node on one side, another zero node on the other), 1 otherwise. A single
    line of zero rigidity between two plates is a hinge (weight 1, shared by both plates); a
    gap two nodes wide holds the two plate ends (0.5 each: Hetényi's broken plates with the
    load at their ends); inside wider gaps the columns are compensated locally (weight 1).
    The load on the gap side of a plate end, (1 - a) q, is compensated locally too and is
    not carried by the plate.

    Parameters
    ----------
    rigidity : numpy.ndarray, shape (ny, nx)
        Nodal rigidity D (N m).
    edges : tuple of str
        Edge kind of the y and x axes (see :data:`AXIS_EDGES`).

    Returns
    -------
    numpy.ndarray, shape (ny, nx)
        Dimensionless weights in (0, 1].
    """
    ny, nx = rigidity.shape
    weights = _edge_weights(ny, edges[0])[:, None] * _edge_weights(nx, edges[1])[None, :]
    for axis in (0, 1):
        weights = weights * _break_weights_axis(rigidity, axis, edges[axis] == "periodic")
    return weights


def _valid_nodes(n: int, edge: str) -> np.ndarray:
    """Nodes along one axis where the 3-point second difference along it is used."""
    valid = np.ones(n)
    if edge == "free":
        valid[[0, -1]] = 0.0
    return valid


def _valid_corners(n: int, edge: str) -> np.ndarray:
    """Corner positions 0..n along one axis (between nodes I - 1 and I) that are used."""
    valid = np.zeros(n + 1)
    if edge == "periodic":
        valid[1:] = 1.0  # corner 0 is corner n
    elif edge == "free":
        valid[1:-1] = 1.0
    else:
        valid[:] = 1.0  # clamped: the ghost nodes hold w = 0
    return valid


BLOCK_ELEMENTS = 55_000
"""Nodes per block of :meth:`PlateOperator.apply`, so that a block's six work arrays stay
in cache (measured on 1728² nodes: blocks of 8, 16, 32, 64 rows took 0.036, 0.027, 0.023,
0.027 s per product, against 0.088 s unblocked)."""


def _thread_count() -> int:
    """Threads of :meth:`PlateOperator.apply`: all cores, at most :data:`MAX_THREADS`."""
    return max(1, min(os.cpu_count() or 1, MAX_THREADS))


@functools.cache
def _thread_pool() -> ThreadPoolExecutor | None:
    """One pool shared by all operators (None on one core)."""
    threads = _thread_count()
    return ThreadPoolExecutor(threads, "gridflex-operator") if threads > 1 else None


@dataclass(eq=False)
class _BlockedWeights:
    """Energy weights padded for the row-blocked product, and per-thread work arrays.

    ``xx``, ``yy``, ``cross``: nodal weights with one row beyond each y edge (wrapped for a
    periodic axis, zero otherwise); ``corner``: the corner weights, in which a periodic
    axis's corner line 0 (the same line as corner n) carries that line's weight, because
    the gathered product visits it from both sides.
    """

    xx: np.ndarray
    yy: np.ndarray
    cross: np.ndarray
    corner: np.ndarray
    ext: np.ndarray
    buffers: list[dict[str, np.ndarray]]
    rows: int
    pool: ThreadPoolExecutor | None

    @classmethod
    def build(cls, op: PlateOperator) -> _BlockedWeights:
        ny, nx = op.shape
        periodic = op.edges[0] == "periodic"

        def rows(values: np.ndarray) -> np.ndarray:
            out = np.empty((ny + 2, nx))
            out[1:-1] = values
            out[0] = values[-1] if periodic else 0.0
            out[-1] = values[0] if periodic else 0.0
            return out

        corner = op._w_corner.copy()
        if op.edges[0] == "periodic":
            corner[0] = corner[-1]
        if op.edges[1] == "periodic":
            corner[:, 0] = corner[:, -1]
        pool = _thread_pool()
        threads = 1 if pool is None else _thread_count()
        block = int(min(max(BLOCK_ELEMENTS // nx, 4), ny))
        buffers = [
            {name: np.empty((block + 2, nx)) for name in ("a", "b", "mx", "my", "tmp")}
            | {"twist": np.empty((block + 1, nx + 1))}
            for _ in range(threads)
        ]
        return cls(
            rows(op._w_xx), rows(op._w_yy), rows(op._w_cross), corner,
            np.zeros((ny + 4, nx + 2)), buffers, block, pool,
        )


MAX_THREADS = 8
"""Most threads :meth:`PlateOperator.apply` uses."""


@dataclass(frozen=True, eq=False)
class PlateOperator:
    """The discrete variable-rigidity plate operator K (Pa per m of deflection).

    Build it with :meth:`build`. ``apply(w)`` returns K w; the right-hand side of a solve is
    ``area * q``.

    Attributes
    ----------
    rigidity : numpy.ndarray, shape (ny, nx)
        Nodal rigidity D (N m).
    stiffness : float
        Restoring stiffness Δρ g (Pa m⁻¹).
    poisson_ratio : float
        ν.
    dy, dx : float
        Node spacing (m).
    edges : tuple of str
        Edge kind of the y and x axes (:data:`AXIS_EDGES`).
    area : numpy.ndarray, shape (ny, nx)
        Nodal area weights (:func:`area_weights`).
    """

    rigidity: np.ndarray
    stiffness: float
    poisson_ratio: float
    dy: float
    dx: float
    edges: tuple[str, str]
    area: np.ndarray
    _w_xx: np.ndarray
    _w_yy: np.ndarray
    _w_cross: np.ndarray
    _w_corner: np.ndarray
    _diagonal: np.ndarray
    _work: dict[str, np.ndarray] = field(default_factory=dict, repr=False)

    @classmethod
    def build(
        cls,
        rigidity: np.ndarray,
        stiffness: float,
        poisson_ratio: float,
        dy: float,
        dx: float,
        edges: tuple[str, str] = ("periodic", "periodic"),
    ) -> PlateOperator:
        """Weights of the energy terms for a rigidity grid.

        Parameters
        ----------
        rigidity : numpy.ndarray, shape (ny, nx)
            Nodal rigidity D (N m), finite and >= 0.
        stiffness : float
            Δρ g (Pa m⁻¹), > 0.
        poisson_ratio : float
            ν, in (0, 0.5).
        dy, dx : float
            Spacing (m), > 0.
        edges : tuple of str, default ("periodic", "periodic")
            Edge kind of the y and x axes (:data:`AXIS_EDGES`).

        Raises
        ------
        InputError
            Bad edge kind, non-positive stiffness, negative or non-finite rigidity, or an
            axis shorter than 3 nodes.
        """
        rigidity = np.ascontiguousarray(rigidity, dtype=np.float64)
        if rigidity.ndim != 2 or min(rigidity.shape) < 3:
            raise InputError(
                f"rigidity grid must be 2-D with >= 3 nodes per axis, got {rigidity.shape}"
            )
        if not np.all(np.isfinite(rigidity)) or rigidity.min() < 0:
            raise InputError("rigidity grid must be finite and >= 0 everywhere")
        if not stiffness > 0:
            raise InputError(
                f"restoring stiffness (rho_m - rho_infill) g must be > 0, got {stiffness!r}"
            )
        edges = (str(edges[0]), str(edges[1]))
        for edge in edges:
            if edge not in AXIS_EDGES:
                raise InputError(f"axis edge must be one of {AXIS_EDGES!r}, got {edge!r}")
        ny, nx = rigidity.shape
        nu = float(poisson_ratio)
        bend_area = _edge_weights(ny, edges[0])[:, None] * _edge_weights(nx, edges[1])[None, :]
        weight = bend_area * rigidity
        valid_y = _valid_nodes(ny, edges[0])[:, None]
        valid_x = _valid_nodes(nx, edges[1])[None, :]
        w_corner = (2.0 * (1.0 - nu)) * corner_rigidity(rigidity, edges)
        w_corner *= _valid_corners(ny, edges[0])[:, None] * _valid_corners(nx, edges[1])[None, :]
        area = area_weights(rigidity, edges)
        diagonal = area * float(stiffness)
        # clamped: the normal curvature 2 w/h² on the clamp line (mirror ghost), weight 1/2,
        # adds 2 D a_t / h⁴ to the diagonal of the adjacent nodes (a_t: weight along the edge)
        if edges[1] == "clamped":
            along = _edge_weights(ny, edges[0])
            diagonal[:, 0] += 2.0 * along * rigidity[:, 0] / dx**4
            diagonal[:, -1] += 2.0 * along * rigidity[:, -1] / dx**4
        if edges[0] == "clamped":
            along = _edge_weights(nx, edges[1])
            diagonal[0, :] += 2.0 * along * rigidity[0, :] / dy**4
            diagonal[-1, :] += 2.0 * along * rigidity[-1, :] / dy**4
        # the energy weights carry the 1/h^4 of the differences (taken undivided)
        return cls(
            rigidity, float(stiffness), nu, float(dy), float(dx), edges, area,
            weight * valid_x / dx**4, weight * valid_y / dy**4,
            (nu * weight) * (valid_x * valid_y) / (dx * dy) ** 2, w_corner / (dx * dy) ** 2,
            diagonal,
        )

    @property
    def shape(self) -> tuple[int, int]:
        """(ny, nx) of the node grid."""
        return self.rigidity.shape  # type: ignore[return-value]

    # -- matrix-free application ------------------------------------------------------

    def _blocked(self) -> _BlockedWeights:
        """The weights laid out for the row-blocked product (built on first use)."""
        work = self._work
        if "blocked" not in work:
            work["blocked"] = _BlockedWeights.build(self)
        return work["blocked"]  # type: ignore[return-value]

    def apply(self, w: np.ndarray) -> np.ndarray:
        """K w (Pa) for a deflection *w* (m) of shape (ny, nx).

        Evaluated in blocks of rows (:data:`BLOCK_ELEMENTS` nodes) so that the intermediate
        curvatures and moments stay in cache, the blocks shared among threads (numpy
        releases the GIL in its loops); the same arithmetic as the assembled :meth:`matrix`.
        """
        w = np.asarray(w, dtype=np.float64).reshape(self.shape)
        weights = self._blocked()
        ny, nx = self.shape
        py, px = (e == "periodic" for e in self.edges)
        # w with two ghost rows and one ghost column on each side: wrapped or zero
        ext = weights.ext
        ext[2:-2, 1:-1] = w
        if py:
            ext[:2, 1:-1] = w[-2:]
            ext[-2:, 1:-1] = w[:2]
        if px:
            ext[:, 0] = ext[:, -2]
            ext[:, -1] = ext[:, 1]
        result = np.empty((ny, nx))
        starts = list(range(0, ny, weights.rows))
        if weights.pool is None or len(starts) < 2 * len(weights.buffers):
            self._apply_chunk(weights, w, result, starts, 0)
        else:
            chunks = np.array_split(np.asarray(starts), len(weights.buffers))
            futures = [
                weights.pool.submit(self._apply_chunk, weights, w, result, chunk.tolist(), t)
                for t, chunk in enumerate(chunks)
            ]
            for future in futures:
                future.result()
        return result

    def _apply_chunk(
        self, weights: _BlockedWeights, w: np.ndarray, result: np.ndarray,
        starts: list[int], thread: int,
    ) -> None:
        ny, rows = self.shape[0], weights.rows
        for j0 in starts:
            self._apply_rows(weights, w, result, j0, min(j0 + rows, ny), thread)

    def _apply_rows(
        self, weights: _BlockedWeights, w: np.ndarray, result: np.ndarray,
        j0: int, j1: int, thread: int,
    ) -> None:
        """Rows j0..j1-1 of K w, gathered from curvatures on rows j0-1..j1 and twists on
        corner rows j0..j1."""
        h = j1 - j0
        buf = weights.buffers[thread]
        a, b, mx, my, tmp = (buf[name][: h + 2] for name in ("a", "b", "mx", "my", "tmp"))
        twist = buf["twist"][: h + 1]
        ext = weights.ext[j0 : j1 + 4]  # node rows j0-2 .. j1+1
        mid = ext[1:-1, 1:-1]  # node rows j0-1 .. j1
        np.add(ext[1:-1, 2:], ext[1:-1, :-2], out=a)
        a -= mid
        a -= mid
        np.add(ext[2:, 1:-1], ext[:-2, 1:-1], out=b)
        b -= mid
        b -= mid
        rows = slice(j0, j1 + 2)  # in the weight arrays padded by one row
        np.multiply(weights.xx[rows], a, out=mx)
        np.multiply(weights.cross[rows], b, out=tmp)
        mx += tmp
        np.multiply(weights.yy[rows], b, out=my)
        np.multiply(weights.cross[rows], a, out=tmp)
        my += tmp
        np.subtract(ext[2 : h + 3, 1:], ext[2 : h + 3, :-1], out=twist)
        twist -= ext[1 : h + 2, 1:]
        twist += ext[1 : h + 2, :-1]
        twist *= weights.corner[j0 : j1 + 1]
        out = result[j0:j1]
        np.add(mx[1:-1], my[1:-1], out=out)
        out *= -2.0
        out[:, 1:] += mx[1:-1, :-1]
        out[:, :-1] += mx[1:-1, 1:]
        if self.edges[1] == "periodic":
            out[:, 0] += mx[1:-1, -1]
            out[:, -1] += mx[1:-1, 0]
        out += my[:-2]
        out += my[2:]
        out += twist[:-1, :-1]
        out -= twist[:-1, 1:]
        out -= twist[1:, :-1]
        out += twist[1:, 1:]
        np.multiply(self._diagonal[j0:j1], w[j0:j1], out=tmp[:h])
        out += tmp[:h]

    # -- sparse assembly ---------------------------------------------------------------

    def _node_index(self, j: np.ndarray, i: np.ndarray) -> np.ndarray:
        """Flat node index of (j, i) (may lie one beyond the grid); -1 outside the grid."""
        ny, nx = self.shape
        py, px = (e == "periodic" for e in self.edges)
        if py:
            j = np.mod(j, ny)
        if px:
            i = np.mod(i, nx)
        inside = (j >= 0) & (j < ny) & (i >= 0) & (i < nx)
        return np.where(inside, j * nx + i, -1)

    def _difference(
        self, kind: str, selected: np.ndarray, local: np.ndarray
    ) -> tuple[sp.csr_matrix, np.ndarray]:
        """Rows of one difference operator at the eval points that touch the selection.

        Returns the operator (eval points x selected nodes) and the flat indices of its
        eval points in their own grid (nodes for "xx", "yy"; corners for "xy").
        """
        ny, nx = self.shape
        if kind == "xy":
            taps = (((0, 0), 1.0), ((0, -1), -1.0), ((-1, 0), -1.0), ((-1, -1), 1.0))
            eval_shape, origin = (ny + 1, nx + 1), (0, 0)
            weight = self._w_corner
        elif kind == "xx":
            taps = (((0, -1), 1.0), ((0, 0), -2.0), ((0, 1), 1.0))
            eval_shape, origin = (ny, nx), (0, 0)
            weight = self._w_xx + self._w_cross
        else:
            taps = (((-1, 0), 1.0), ((0, 0), -2.0), ((1, 0), 1.0))
            eval_shape, origin = (ny, nx), (0, 0)
            weight = self._w_yy + self._w_cross
        # eval points whose stencil touches a selected node
        sel = np.zeros(self.shape, dtype=bool)
        sel.flat[selected] = True
        touch = np.zeros(eval_shape, dtype=bool)
        jj, ii = np.nonzero(sel)
        for (oy, ox), _ in taps:
            ej, ei = jj - oy - origin[0], ii - ox - origin[1]
            if kind == "xy":
                # a node touches corners (J, I) with J - 1 <= j <= J; wrap for periodic axes
                if self.edges[0] == "periodic":
                    ej = np.where(ej == 0, ny, ej)
                if self.edges[1] == "periodic":
                    ei = np.where(ei == 0, nx, ei)
            else:
                if self.edges[0] == "periodic":
                    ej = np.mod(ej, ny)
                if self.edges[1] == "periodic":
                    ei = np.mod(ei, nx)
            ok = (ej >= 0) & (ej < eval_shape[0]) & (ei >= 0) & (ei < eval_shape[1])
            touch[ej[ok], ei[ok]] = True
        touch &= weight != 0
        ej, ei = np.nonzero(touch)
        rows, cols, vals = [], [], []
        for (oy, ox), coef in taps:
            nj, ni = ej + oy + origin[0], ei + ox + origin[1]
            node = self._node_index(nj, ni)
            col = np.where(node >= 0, local[np.maximum(node, 0)], -1)
            keep = col >= 0
            rows.append(np.nonzero(keep)[0])
            cols.append(col[keep])
            vals.append(np.full(int(keep.sum()), coef))  # undivided: weights carry 1/h^4
        op = sp.csr_matrix(
            (np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))),
            shape=(ej.size, selected.size),
        )
        return op, ej * eval_shape[1] + ei

    def matrix(self, nodes: np.ndarray | None = None) -> sp.csr_matrix:
        """K, or its principal sub-matrix on *nodes*, as a sparse matrix.

        Parameters
        ----------
        nodes : numpy.ndarray of int, optional
            Sorted flat node indices (row-major over (ny, nx)); all nodes by default.

        Returns
        -------
        scipy.sparse.csr_matrix
            Symmetric, shape (len(nodes), len(nodes)); ``matrix() @ w.ravel()`` equals
            ``apply(w).ravel()``.
        """
        n_all = self.rigidity.size
        selected = np.arange(n_all) if nodes is None else np.asarray(nodes, dtype=np.int64)
        local = np.full(n_all, -1, dtype=np.int64)
        local[selected] = np.arange(selected.size)
        nu = self.poisson_ratio
        bxx, exx = self._difference("xx", selected, local)
        byy, eyy = self._difference("yy", selected, local)
        bxy, exy = self._difference("xy", selected, local)
        k = bxx.T @ sp.diags(self._w_xx.ravel()[exx]) @ bxx
        k = k + byy.T @ sp.diags(self._w_yy.ravel()[eyy]) @ byy
        k = k + bxy.T @ sp.diags(self._w_corner.ravel()[exy]) @ bxy
        if nu:
            # cross term on the eval nodes common to both operators
            common, ix, iy = np.intersect1d(exx, eyy, assume_unique=True, return_indices=True)
            cross = sp.diags(self._w_cross.ravel()[common])
            half = bxx[ix].T @ cross @ byy[iy]
            k = k + half + half.T
        k = k + sp.diags(self._diagonal.ravel()[selected])
        return sp.csr_matrix(k)
