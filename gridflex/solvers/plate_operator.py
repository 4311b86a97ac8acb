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

from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp

from gridflex.errors import InputError
from gridflex.solvers.row_blocks import block_rows, for_row_blocks, thread_count

__all__ = ["AXIS_EDGES", "PlateOperator", "area_weights", "corner_rigidity"]

AXIS_EDGES = ("periodic", "free", "clamped")
"""What the operator does at the two ends of one grid axis.

``periodic``: the axis wraps round. ``free``: the plate ends at the outermost nodes
(Kirchhoff free edge, natural condition of the energy: no curvature term whose stencil leaves
the grid, half area weight on the edge nodes). ``clamped``: w = 0 and ∂w/∂n = 0 on a line of
nodes one spacing beyond the outermost nodes (mirror ghost, half weight on that line)."""

ASSEMBLY_BLOCK_ROWS = 1 << 18
"""Rows assembled at a time by :meth:`PlateOperator.matrix` (whole grid): about 250 MB of
temporaries per block. Measured at 576² (331 k rows, tracemalloc): peak 983 bytes per row
assembled in one piece, 777 in two blocks, against 148 bytes per row of the matrix."""


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
    with np.errstate(divide="ignore"):
        inverse = np.divide(1.0, rigidity)  # 1 / 0 = inf, and 4 / (... + inf) = 0
    ext = _pad_axis(_pad_axis(inverse, 0, edges[0] == "periodic"), 1, edges[1] == "periodic")
    total = np.add(ext[1:, 1:], ext[1:, :-1])
    total += ext[:-1, 1:]
    total += ext[:-1, :-1]
    return np.divide(4.0, total, out=total)


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


@dataclass(eq=False)
class _Workspace:
    """Per-thread block buffers of the row-blocked product: w with two ghost rows and one
    ghost column on each side (``ext``), curvatures, moments and twists."""

    buffers: list[dict[str, np.ndarray]]
    rows: int

    @classmethod
    def build(cls, shape: tuple[int, int]) -> _Workspace:
        ny, nx = shape
        block = block_rows(nx, ny)
        buffers = [
            {name: np.empty((block + 2, nx)) for name in ("a", "b", "mx", "my", "tmp")}
            | {"twist": np.empty((block + 1, nx + 1)), "ext": np.zeros((block + 4, nx + 2))}
            for _ in range(thread_count())
        ]
        return cls(buffers, block)


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
    _bend: np.ndarray
    """(ny + 2, nx): bending weight a D (N m), one ghost row beyond each y edge (wrapped
    for a periodic axis, zero otherwise)."""
    _corner: np.ndarray
    """(ny + 1, nx + 1): twist weight 2 (1 − ν) D_c / (dx dy)² on the corners in use; on a
    periodic axis corner line 0 repeats line n (the gathered product visits it from both
    sides)."""
    _diagonal_nodes: np.ndarray
    """Flat indices of the nodes whose diagonal term differs from Δρ g (area weight below
    one, clamped edges)."""
    _diagonal_extra: np.ndarray
    """The diagonal term minus Δρ g at those nodes (Pa m⁻¹)."""
    _cx: np.ndarray
    """(nx,): 1 / dx⁴ where the x curvature is used, else 0."""
    _cy: np.ndarray
    """(ny + 2, 1): 1 / dy⁴ where the y curvature is used (ghost rows as the bend weight)."""
    _cross_x: np.ndarray
    """(nx,): ν / (dx dy)² where both curvatures are used along x, else 0."""
    _cross_y: np.ndarray | None
    """(ny + 2, 1): 1 where both curvatures are used along y, else 0; None when all are."""
    _work: dict[str, _Workspace] = field(default_factory=dict, repr=False)

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
        if not np.isfinite(rigidity.sum()) or rigidity.min() < 0:
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
        periodic_y = edges[0] == "periodic"
        # bending weight a D with ghost rows; a = 1/2 on free edges
        bend = np.empty((ny + 2, nx))
        bend[1:-1] = rigidity
        if edges[0] == "free":
            bend[[1, -2]] *= 0.5
        if edges[1] == "free":
            bend[1:-1, [0, -1]] *= 0.5
        bend[0] = bend[-2] if periodic_y else 0.0
        bend[-1] = bend[1] if periodic_y else 0.0
        valid_x = _valid_nodes(nx, edges[1])
        valid_y = _valid_nodes(ny, edges[0])
        valid_y = np.concatenate([valid_y[-1:], valid_y, valid_y[:1]])[:, None]
        corner = corner_rigidity(rigidity, edges)
        corner *= 2.0 * (1.0 - nu) / (dx * dy) ** 2
        for axis, edge in enumerate(edges):
            ends = (slice(None), [0, -1]) if axis else ([0, -1], slice(None))
            if edge == "free":
                corner[ends] = 0.0
            elif edge == "periodic":  # corner line 0 is line n
                if axis:
                    corner[:, 0] = corner[:, -1]
                else:
                    corner[0] = corner[-1]
        area = area_weights(rigidity, edges)
        diagonal = area * float(stiffness)  # the Winkler term a Δρ g
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
        diagonal -= float(stiffness)  # kept only where it differs from Δρ g
        diagonal_nodes = np.flatnonzero(diagonal)
        # the weights carry the 1/h^4 of the differences (taken undivided)
        return cls(
            rigidity,
            float(stiffness),
            nu,
            float(dy),
            float(dx),
            edges,
            area,
            bend,
            corner,
            diagonal_nodes,
            diagonal.ravel()[diagonal_nodes],
            valid_x / dx**4,
            valid_y / dy**4,
            (nu / (dx * dy) ** 2) * valid_x,
            None if valid_y.all() else valid_y,
        )

    @property
    def shape(self) -> tuple[int, int]:
        """(ny, nx) of the node grid."""
        ny, nx = self.rigidity.shape
        return ny, nx

    # -- matrix-free application ------------------------------------------------------

    def _workspace(self) -> _Workspace:
        """The arrays of the row-blocked product (made on first use)."""
        if "blocked" not in self._work:
            self._work["blocked"] = _Workspace.build(self.shape)
        return self._work["blocked"]

    def apply(self, w: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
        """K w (Pa) for a deflection *w* (m) of shape (ny, nx).

        Evaluated in blocks of rows (:func:`~gridflex.solvers.row_blocks.block_rows`) so
        that the intermediate curvatures and moments stay in cache, the blocks shared among
        threads (numpy releases the GIL in its loops); the same arithmetic as the assembled
        :meth:`matrix`. Not re-entrant: one product at a time per operator.

        Parameters
        ----------
        w : numpy.ndarray, shape (ny, nx)
            Deflection (m).
        out : numpy.ndarray, shape (ny, nx), optional
            Where to write K w (float64, C-contiguous, not *w*); a new array by default.
        """
        w = np.asarray(w, dtype=np.float64).reshape(self.shape)
        work = self._workspace()
        ny, nx = self.shape
        result = np.empty((ny, nx)) if out is None else out.reshape(ny, nx)
        for_row_blocks(
            ny,
            work.rows,
            lambda j0, j1, thread: self._apply_rows(work, w, result, j0, j1, thread),
        )
        if self._diagonal_nodes.size:
            flat = result.reshape(-1)
            flat[self._diagonal_nodes] += self._diagonal_extra * w.reshape(-1)[self._diagonal_nodes]
        return result

    def _ghosted_rows(self, w: np.ndarray, ext: np.ndarray, j0: int, j1: int) -> None:
        """Node rows j0-2 .. j1+1 of w into *ext* (h + 4 rows), with one ghost column on
        each side: wrapped along periodic axes, zero beyond other edges."""
        ny = self.shape[0]
        periodic_y, periodic_x = (e == "periodic" for e in self.edges)
        lo, hi = j0 - 2, j1 + 2
        inner_lo, inner_hi = max(lo, 0), min(hi, ny)
        ext[inner_lo - lo : inner_hi - lo, 1:-1] = w[inner_lo:inner_hi]
        if lo < 0:
            ext[:-lo, 1:-1] = w[ny + lo :] if periodic_y else 0.0
        if hi > ny:
            ext[inner_hi - lo :, 1:-1] = w[: hi - ny] if periodic_y else 0.0
        if periodic_x:  # (otherwise the ghost columns stay zero: never written)
            ext[:, 0] = ext[:, -2]
            ext[:, -1] = ext[:, 1]

    def _apply_rows(
        self,
        work: _Workspace,
        w: np.ndarray,
        result: np.ndarray,
        j0: int,
        j1: int,
        thread: int,
    ) -> None:
        """Rows j0..j1-1 of K w, gathered from moments on rows j0-1..j1 and twists on
        corner rows j0..j1."""
        h = j1 - j0
        buf = work.buffers[thread]
        a, b, mx, my, tmp = (buf[name][: h + 2] for name in ("a", "b", "mx", "my", "tmp"))
        twist = buf["twist"][: h + 1]
        ext = buf["ext"][: h + 4]  # node rows j0-2 .. j1+1
        self._ghosted_rows(w, ext, j0, j1)
        mid = ext[1:-1, 1:-1]  # node rows j0-1 .. j1
        np.add(ext[1:-1, 2:], ext[1:-1, :-2], out=a)  # undivided curvatures
        a -= mid
        a -= mid
        np.add(ext[2:, 1:-1], ext[:-2, 1:-1], out=b)
        b -= mid
        b -= mid
        rows = slice(j0, j1 + 2)  # in the arrays with ghost rows
        # moments M_x = a D (w_xx + ν w_yy), M_y = a D (w_yy + ν w_xx)
        np.multiply(b, self._cross_x, out=tmp)
        if self._cross_y is not None:
            tmp *= self._cross_y[rows]
        np.multiply(a, self._cx, out=mx)
        mx += tmp
        mx *= self._bend[rows]
        np.multiply(a, self._cross_x, out=tmp)
        if self._cross_y is not None:
            tmp *= self._cross_y[rows]
        np.multiply(b, self._cy[rows], out=my)
        my += tmp
        my *= self._bend[rows]
        np.subtract(ext[2 : h + 3, 1:], ext[2 : h + 3, :-1], out=twist)
        twist -= ext[1 : h + 2, 1:]
        twist += ext[1 : h + 2, :-1]
        twist *= self._corner[j0 : j1 + 1]
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
        np.multiply(ext[2 : h + 2, 1:-1], self.stiffness, out=tmp[:h])  # Δρ g w
        out += tmp[:h]

    def _node_weights(self, kind: str, flat: np.ndarray) -> np.ndarray:
        """Energy weight of the "xx", "yy" or "cross" term at flat node indices."""
        j, i = np.divmod(flat, self.shape[1])
        bend = self._bend[j + 1, i]
        if kind == "xx":
            return bend * self._cx[i]
        if kind == "yy":
            return bend * self._cy[j + 1, 0]
        cross = bend * self._cross_x[i]
        return cross if self._cross_y is None else cross * self._cross_y[j + 1, 0]

    # -- sparse assembly ---------------------------------------------------------------

    def _shifted(self, j: np.ndarray, i: np.ndarray, dj: int, di: int) -> tuple[np.ndarray, ...]:
        """Node (j + dj, i + di): its row, column and whether it exists (periodic axes
        wrap)."""
        ny, nx = self.shape
        jj, ii = j + dj, i + di
        inside = np.ones(j.shape, dtype=bool)
        if self.edges[0] == "periodic":
            jj %= ny
        else:
            inside &= (jj >= 0) & (jj < ny)
        if self.edges[1] == "periodic":
            ii %= nx
        else:
            inside &= (ii >= 0) & (ii < nx)
        return np.where(inside, jj, 0), np.where(inside, ii, 0), inside

    def _weight_at(self, kind: str, j: np.ndarray, i: np.ndarray, dj: int, di: int) -> np.ndarray:
        """Energy weight of the "xx", "yy" or "cross" term at node (j + dj, i + di); 0
        where that node does not exist."""
        jj, ii, inside = self._shifted(j, i, dj, di)
        return self._node_weights(kind, jj * self.shape[1] + ii) * inside

    def _stencil(self, nodes: np.ndarray) -> tuple[list[tuple[int, int]], list[np.ndarray]]:
        """The 13 coefficients of K's rows at *nodes*, by offset (dj, di) of the column.

        Each term of the energy contributes w_e c_s c_t to K[s, t] for every evaluation
        point e whose difference stencil holds both s and t (c: the stencil's taps); the
        sums are written out per offset, so that a row costs a few gathers.
        """
        j, i = np.divmod(nodes, self.shape[1])
        xx = {d: self._weight_at("xx", j, i, 0, d) for d in (-1, 0, 1)}
        yy = {d: self._weight_at("yy", j, i, d, 0) for d in (-1, 0, 1)}
        cross = {
            (dj, di): self._weight_at("cross", j, i, dj, di)
            for dj, di in ((0, 0), (0, -1), (0, 1), (-1, 0), (1, 0))
        }
        # twist weights of the four corners round node (j, i): corner (J, I) lies between
        # nodes (J - 1, I - 1) and (J, I)
        corner = {(dj, di): self._corner[j + dj, i + di] for dj in (0, 1) for di in (0, 1)}
        offsets: list[tuple[int, int]] = []
        values: list[np.ndarray] = []

        def add(offset: tuple[int, int], value: np.ndarray) -> None:
            offsets.append(offset)
            values.append(value)

        add(
            (0, 0),
            xx[-1]
            + 4.0 * xx[0]
            + xx[1]
            + yy[-1]
            + 4.0 * yy[0]
            + yy[1]
            + 8.0 * cross[0, 0]
            + corner[0, 0]
            + corner[0, 1]
            + corner[1, 0]
            + corner[1, 1],
        )
        add(
            (0, 1), -2.0 * (xx[0] + xx[1] + cross[0, 0] + cross[0, 1]) - corner[0, 1] - corner[1, 1]
        )
        add(
            (0, -1),
            -2.0 * (xx[0] + xx[-1] + cross[0, 0] + cross[0, -1]) - corner[0, 0] - corner[1, 0],
        )
        add(
            (1, 0), -2.0 * (yy[0] + yy[1] + cross[0, 0] + cross[1, 0]) - corner[1, 0] - corner[1, 1]
        )
        add(
            (-1, 0),
            -2.0 * (yy[0] + yy[-1] + cross[0, 0] + cross[-1, 0]) - corner[0, 0] - corner[0, 1],
        )
        add((0, 2), xx[1])
        add((0, -2), xx[-1])
        add((2, 0), yy[1])
        add((-2, 0), yy[-1])
        for dj in (-1, 1):
            for di in (-1, 1):
                twist = corner[max(dj, 0), max(di, 0)]
                add((dj, di), cross[0, di] + cross[dj, 0] + twist)
        return offsets, values

    def rows(self, nodes: np.ndarray, columns: np.ndarray | None = None) -> sp.csr_matrix:
        """Rows *nodes* of K, restricted to the node set *columns*, as a sparse matrix.

        Parameters
        ----------
        nodes : numpy.ndarray of int
            Flat node indices (row-major over (ny, nx)) of the rows.
        columns : numpy.ndarray of int, optional
            Sorted flat indices of the columns kept; all nodes by default.

        Returns
        -------
        scipy.sparse.csr_matrix
            Shape (len(nodes), len(columns)); entries in columns outside *columns* are
            dropped, explicit zeros too.
        """
        nodes = np.asarray(nodes, dtype=np.int64)
        n_all = self.rigidity.size
        j, i = np.divmod(nodes, self.shape[1])
        offsets, values = self._stencil(nodes)
        extra = np.zeros(nodes.size)
        hit = np.isin(nodes, self._diagonal_nodes)
        if hit.any():
            position = np.searchsorted(self._diagonal_nodes, nodes[hit])
            extra[hit] = self._diagonal_extra[position]
        values[0] = values[0] + self.stiffness + extra
        local = None
        if columns is not None:  # global node index -> position in *columns*, or -1
            local = np.full(n_all, -1, dtype=np.int64 if n_all >= 2**31 else np.int32)
            local[columns] = np.arange(columns.size)
        row_parts, col_parts, val_parts = [], [], []
        for (dj, di), value in zip(offsets, values, strict=True):
            jj, ii, inside = self._shifted(j, i, dj, di)
            column = jj * self.shape[1] + ii
            if local is not None:
                column = local[column]
                inside &= column >= 0
            keep = inside & (value != 0)
            row_parts.append(np.flatnonzero(keep))
            col_parts.append(column[keep])
            val_parts.append(value[keep])
        width = n_all if columns is None else columns.size
        return sp.csr_matrix(
            (np.concatenate(val_parts), (np.concatenate(row_parts), np.concatenate(col_parts))),
            shape=(nodes.size, width),
        )

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
        if nodes is None:
            # in blocks of rows: the assembly's temporaries (about 1 kB per row) stay
            # those of one block, against 150 bytes per row of the matrix itself
            size = self.rigidity.size
            blocks = [
                self.rows(np.arange(start, min(start + ASSEMBLY_BLOCK_ROWS, size)))
                for start in range(0, size, ASSEMBLY_BLOCK_ROWS)
            ]
            return blocks[0] if len(blocks) == 1 else sp.vstack(blocks, format="csr")
        nodes = np.asarray(nodes, dtype=np.int64)
        return self.rows(nodes, nodes)
