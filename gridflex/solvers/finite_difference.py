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

import logging
import math
import time
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import scipy.fft
import scipy.ndimage
import scipy.sparse as sp

from ..errors import ConvergenceError, InputError
from ..grid import GridSpec
from ..memory import check_memory
from .conjugate_gradient import Progress, conjugate_gradient
from .spectral import DEFAULT_PAD_FACTOR

__all__ = [
    "AXIS_EDGES",
    "BAND_FLEXURAL_PARAMETERS",
    "BREAK_FLEXURAL_PARAMETERS",
    "STEEP_FLEXURAL_PARAMETERS",
    "DEFAULT_MAX_BAND_NODES",
    "DEFAULT_MAX_ITERATIONS",
    "DEFAULT_TOLERANCE",
    "EDGES",
    "PlateOperator",
    "area_weights",
    "corner_rigidity",
    "default_band_width",
    "finite_difference_deflection",
    "pad_rigidity",
    "roundoff_residual",
]

log = logging.getLogger(__name__)

EDGES = ("infinite", "clamped", "free", "periodic")
"""Grid-edge options of the finite-difference solve (same on all four edges)."""

DEFAULT_TOLERANCE = 1e-8
"""Relative residual ||a q − K w|| / ||a q|| at which the iteration stops."""

DEFAULT_MAX_ITERATIONS = 300
"""Iteration limit before :class:`~gridflex.errors.ConvergenceError` is raised."""

BAND_FLEXURAL_PARAMETERS = 3.0
"""Width of the exact-solve band round a rigidity jump, in flexural parameters of its weak
side (the smallest non-zero rigidity next to the jump)."""

STEEP_FLEXURAL_PARAMETERS = 1.0
"""Width of the band round a steep but smooth rigidity change, in flexural parameters of
its weak side (measured on a Te 60 -> 10 km margin 120 km wide: 25 iterations; 75 without
a band)."""

BREAK_FLEXURAL_PARAMETERS = 0.35
"""Width of the band round breaks (zero rigidity) and non-periodic grid edges, in flexural
parameters of the adjacent plate (measured on a hinge line crossing a 512² grid of 2 km
cells: 1 -> 7 iterations, 0.5 -> 12, 0.25 -> 17; the narrower band is cheaper overall)."""

DEFAULT_MAX_BAND_NODES = 400_000
"""Cap on the band size (nodes). Beyond it the band width is halved until it fits; if even
the sharp nodes alone do not fit, the solve runs with the blend alone (more iterations)."""

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

    def _fold(self, ext: np.ndarray) -> np.ndarray:
        out = ext[1:-1, 1:-1].copy()
        py, px = (e == "periodic" for e in self.edges)
        if px:
            out[:, -1] += ext[1:-1, 0]
            out[:, 0] += ext[1:-1, -1]
        if py:
            out[-1, :] += ext[0, 1:-1]
            out[0, :] += ext[-1, 1:-1]
        if px and py:
            out[-1, -1] += ext[0, 0]
            out[-1, 0] += ext[0, -1]
            out[0, -1] += ext[-1, 0]
            out[0, 0] += ext[-1, -1]
        return out

    def _workspace(self) -> dict[str, np.ndarray]:
        work = self._work
        if not work:
            ny, nx = self.shape
            work["ext"] = np.zeros((ny + 2, nx + 2))
            work["out"] = np.zeros((ny + 2, nx + 2))
            work["twist"] = np.empty((ny + 1, nx + 1))
            for name in ("a", "b", "mx", "my", "tmp"):
                work[name] = np.empty((ny, nx))
        return work

    def apply(self, w: np.ndarray) -> np.ndarray:
        """K w (Pa) for a deflection *w* (m) of shape (ny, nx)."""
        w = np.asarray(w, dtype=np.float64).reshape(self.shape)
        work = self._workspace()
        ext, out, twist = work["ext"], work["out"], work["twist"]
        a, b, mx, my, tmp = work["a"], work["b"], work["mx"], work["my"], work["tmp"]
        py, px = (e == "periodic" for e in self.edges)
        ext[1:-1, 1:-1] = w
        if px:
            ext[1:-1, 0] = w[:, -1]
            ext[1:-1, -1] = w[:, 0]
        if py:
            ext[0, 1:-1] = w[-1]
            ext[-1, 1:-1] = w[0]
        if px and py:
            ext[0, 0], ext[0, -1], ext[-1, 0], ext[-1, -1] = w[-1, -1], w[-1, 0], w[0, -1], w[0, 0]
        centre = ext[1:-1, 1:-1]
        # undivided differences; the weights carry the 1/h^4 factors
        np.add(ext[1:-1, 2:], ext[1:-1, :-2], out=a)
        a -= centre
        a -= centre
        np.add(ext[2:, 1:-1], ext[:-2, 1:-1], out=b)
        b -= centre
        b -= centre
        np.subtract(ext[1:, 1:], ext[1:, :-1], out=twist)
        twist -= ext[:-1, 1:]
        twist += ext[:-1, :-1]
        twist *= self._w_corner
        np.multiply(self._w_xx, a, out=mx)
        np.multiply(self._w_cross, b, out=tmp)
        mx += tmp
        np.multiply(self._w_yy, b, out=my)
        np.multiply(self._w_cross, a, out=tmp)
        my += tmp
        np.add(mx, my, out=tmp)
        tmp *= -2.0
        out[0] = 0.0
        out[-1] = 0.0
        out[:, 0] = 0.0
        out[:, -1] = 0.0
        out[1:-1, 1:-1] = tmp
        out[1:-1, 2:] += mx
        out[1:-1, :-2] += mx
        out[2:, 1:-1] += my
        out[:-2, 1:-1] += my
        out[1:, 1:] += twist
        out[1:, :-1] -= twist
        out[:-1, 1:] -= twist
        out[:-1, :-1] += twist
        result = self._fold(out)
        np.multiply(self._diagonal, w, out=tmp)
        result += tmp
        return result

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


# -- the solve ---------------------------------------------------------------------------


def _ramp(count: int) -> np.ndarray:
    """Weights 0 -> 1 over *count* pad cells: flat quarters at both ends, sin² between."""
    s = np.arange(1, count + 1, dtype=np.float64)
    u = np.clip((s - 0.25 * (count + 1)) / (0.5 * (count + 1)), 0.0, 1.0)
    return np.sin(0.5 * np.pi * u) ** 2


def _pad_axis_periodic(values: np.ndarray, axis: int, extra: int) -> np.ndarray:
    """Append *extra* cells along *axis* joining the last edge smoothly to the first."""
    if extra == 0:
        return values
    last = np.take(values, [-1], axis=axis)
    first = np.take(values, [0], axis=axis)
    positive = values[values > 0]
    floor = positive.min() if positive.size else 1.0
    t = _ramp(extra)
    t = t[:, None] if axis == 0 else t[None, :]
    log_pad = (1.0 - t) * np.log(np.maximum(last, floor)) + t * np.log(np.maximum(first, floor))
    pad = np.exp(log_pad)
    near_last = np.arange(1, extra + 1) <= extra / 2
    near_last = near_last[:, None] if axis == 0 else near_last[None, :]
    pad = np.where(np.where(near_last, last, first) > 0, pad, 0.0)
    return np.concatenate([values, pad], axis=axis)


def pad_rigidity(rigidity: np.ndarray, shape: tuple[int, int]) -> np.ndarray:
    """Embed a rigidity grid in a larger periodic grid that continues each edge outward.

    The grid occupies ``[:ny, :nx]`` of *shape*; beyond each edge the edge values continue
    for a quarter of the pad, then log D blends smoothly (sin² ramp over the middle half)
    into the opposite edge's values, so that the periodic wrap carries no jump. Zero
    rigidity (a break reaching the edge) continues up to the middle of the pad.

    Parameters
    ----------
    rigidity : numpy.ndarray, shape (ny, nx)
        Nodal rigidity (N m).
    shape : tuple of int
        Padded shape, at least (ny, nx).

    Returns
    -------
    numpy.ndarray of *shape*
    """
    ny, nx = rigidity.shape
    out = _pad_axis_periodic(rigidity, 1, shape[1] - nx)
    return _pad_axis_periodic(out, 0, shape[0] - ny)


def _infinite_shape(
    spec: GridSpec, rigidity: np.ndarray, stiffness: float, pad_factor: float
) -> tuple[int, int]:
    """Solve grid for ``edges="infinite"``: *pad_factor* flexural parameters of the stiffest
    edge rigidity on each side, rounded up to fast FFT lengths."""
    edge = np.concatenate([rigidity[0], rigidity[-1], rigidity[:, 0], rigidity[:, -1]])
    alpha = (4.0 * float(edge.max()) / stiffness) ** 0.25
    out = []
    for n, h in ((spec.ny, spec.dy), (spec.nx, spec.dx)):
        extra = 2 * max(math.ceil(pad_factor * alpha / h), 2)
        out.append(scipy.fft.next_fast_len(n + extra, real=True))
    return (out[0], out[1])


def default_band_width(rigidity: np.ndarray, sharp: np.ndarray, stiffness: float) -> float:
    """Band width (m) for the sharp nodes of a rigidity grid.

    :data:`BAND_FLEXURAL_PARAMETERS` flexural parameters of the weakest non-zero rigidity next
    to a jump (more than ten-fold between neighbours, non-zero on both sides);
    :data:`STEEP_FLEXURAL_PARAMETERS` of the weakest rigidity at a steep but smooth change;
    :data:`BREAK_FLEXURAL_PARAMETERS` of the weakest plate next to a zero (break) or a grid
    edge; the widest of these.
    """
    from .preconditioners import SHARP_RATIO

    positive = np.where(rigidity > 0, rigidity, np.inf)
    low_positive = scipy.ndimage.minimum_filter(positive, size=3, mode="nearest")
    low = scipy.ndimage.minimum_filter(rigidity, size=3, mode="nearest")
    high = scipy.ndimage.maximum_filter(rigidity, size=3, mode="nearest")
    touches_zero = low == 0
    jump = sharp & ~touches_zero & (high > SHARP_RATIO * low)
    steep = sharp & ~touches_zero & ~jump
    other = sharp & touches_zero & np.isfinite(low_positive)
    width = 0.0
    for mask, factor in (
        (jump, BAND_FLEXURAL_PARAMETERS),
        (steep, STEEP_FLEXURAL_PARAMETERS),
        (other, BREAK_FLEXURAL_PARAMETERS),
    ):
        if mask.any():
            weak = float(low_positive[mask].min())
            width = max(width, factor * (4.0 * weak / stiffness) ** 0.25)
    return width


def roundoff_residual(rigidity: np.ndarray, stiffness: float, spacing: float) -> float:
    """Rough smallest relative residual a float64 deflection can have (dimensionless).

    The fourth differences lose eps (alpha / h)^4 to cancellation, alpha the largest
    flexural parameter and h the spacing; the factor 0.15 is fitted to a stall at 1.1e-8
    seen with alpha / h = 137.
    """
    alpha = (4.0 * float(rigidity.max()) / stiffness) ** 0.25
    return 0.15 * float(np.finfo(np.float64).eps) * (alpha / spacing) ** 4


def finite_difference_deflection(
    load: np.ndarray,
    spec: GridSpec,
    rigidity: np.ndarray,
    stiffness: float,
    poisson_ratio: float,
    edges: str | tuple[str, str] = "infinite",
    *,
    pad_factor: float = DEFAULT_PAD_FACTOR,
    tolerance: float = DEFAULT_TOLERANCE,
    max_iterations: int = DEFAULT_MAX_ITERATIONS,
    band_width: float | None = None,
    max_band_nodes: int = DEFAULT_MAX_BAND_NODES,
    progress: Progress | None = None,
) -> tuple[np.ndarray, dict[str, Any]]:
    """Deflection of a plate of spatially varying rigidity by preconditioned CG.

    Parameters
    ----------
    load : numpy.ndarray, shape (ny, nx)
        Vertical stress q (Pa, positive downward).
    spec : GridSpec
        Grid shape and spacing (m).
    rigidity : numpy.ndarray, shape (ny, nx)
        Nodal flexural rigidity D (N m), >= 0; 0 marks broken cells.
    stiffness : float
        Restoring stiffness Δρ g (Pa m⁻¹).
    poisson_ratio : float
        ν.
    edges : {"infinite", "clamped", "free", "periodic"}, default "infinite"
        ``"infinite"``: the grid is a window onto an unbounded plate: it is embedded in a
        periodic margin of *pad_factor* flexural parameters (of the largest edge rigidity)
        on each side, in which the edge rigidity continues (:func:`pad_rigidity`) and the
        load is zero. ``"clamped"``, ``"free"``, ``"periodic"``: see :data:`AXIS_EDGES`.
        A pair of :data:`AXIS_EDGES` values sets the y and x axes separately (no margin),
        for example ``("periodic", "free")`` for a strip that models a line load.
    pad_factor : float, default 4.5
        Margin for ``"infinite"``, in flexural parameters.
    tolerance : float, default 1e-8
        Relative residual to reach.
    max_iterations : int, default 300
        Iteration limit.
    band_width : float, optional
        Width (m) of the exact-solve band round sharp features; default
        :data:`BAND_FLEXURAL_PARAMETERS` flexural parameters of the weak side.
    max_band_nodes : int, default 400000
        Cap on the band size; see :func:`~gridflex.solvers.preconditioners.sharp_band`.
    progress : callable, optional
        Called with (iterations done, iteration limit) after each iteration and with
        (iterations, iterations) when converged.

    Returns
    -------
    deflection : numpy.ndarray, shape (ny, nx)
        w (m, positive down).
    info : dict
        ``iterations``, ``residual`` (true relative residual), ``tolerance``,
        ``solve_shape``, ``blend_levels`` (N m), ``band_nodes``, ``band_width`` (m),
        ``force_balance_residual``, ``locally_compensated_load`` (N, load on the gap side
        of plate ends), ``setup_seconds``, ``solve_seconds``.

    Raises
    ------
    InputError
        Bad edges, tolerance or sizes; not enough memory.
    ConvergenceError
        The tolerance was not reached within *max_iterations*.
    """
    from .preconditioners import (
        SINGLE_PRECISION_UNTIL,
        BandSolver,
        BlendPreconditioner,
        MultiplicativePreconditioner,
        sharp_band,
    )

    if isinstance(edges, tuple):
        if len(edges) != 2 or any(e not in AXIS_EDGES for e in edges):
            raise InputError(f"an edges pair must hold two of {AXIS_EDGES!r}; got {edges!r}")
    elif edges not in EDGES:
        raise InputError(f"edges must be one of {', '.join(map(repr, EDGES))}; got {edges!r}")
    if not (0.0 < tolerance < 1.0):
        raise InputError(f"tolerance must lie in (0, 1), got {tolerance!r}")
    if int(max_iterations) < 1:
        raise InputError(f"max_iterations must be >= 1, got {max_iterations!r}")
    if not pad_factor >= 0:
        raise InputError(f"pad_factor must be >= 0, got {pad_factor!r}")
    start = time.perf_counter()
    ny, nx = spec.shape
    rigidity = np.asarray(rigidity, dtype=np.float64)
    if edges == "infinite":
        shape = _infinite_shape(spec, rigidity, stiffness, pad_factor)
        axis_edges: tuple[str, str] = ("periodic", "periodic")
    else:
        shape = spec.shape
        axis_edges = edges if isinstance(edges, tuple) else (edges, edges)
    n = shape[0] * shape[1]
    # operator weights (8), CG vectors (5), preconditioner work (~8 + 2 per blend level)
    check_memory(8.0 * n * 27, f"finite-difference solve on a grid of {shape[0]} x {shape[1]}")
    if edges == "infinite":
        solve_rigidity = pad_rigidity(rigidity, shape)
        rhs_load = np.zeros(shape)
        rhs_load[:ny, :nx] = load
    else:
        solve_rigidity, rhs_load = rigidity, np.asarray(load, dtype=np.float64)
    operator = PlateOperator.build(
        solve_rigidity, stiffness, poisson_ratio, spec.dy, spec.dx, axis_edges
    )
    if band_width is None:
        probe = sharp_band(operator, 0.0, max_band_nodes)[2]
        band_width = default_band_width(solve_rigidity, probe, stiffness)
    nodes, width_used, _ = sharp_band(operator, float(band_width), int(max_band_nodes))
    band = BandSolver.build(operator, nodes)
    blend = BlendPreconditioner.build(operator, nodes)
    rhs = operator.area * rhs_load
    floor = roundoff_residual(solve_rigidity, stiffness, min(spec.dx, spec.dy))
    if floor > 0.5 * tolerance:
        log.warning(
            "tolerance %.1e is close to the round-off limit (about %.0e) of a plate this stiff "
            "on cells this small; the iteration may stop short of it", tolerance, floor,
        )
    preconditioner = MultiplicativePreconditioner(
        operator, blend, band, SINGLE_PRECISION_UNTIL * float(np.linalg.norm(rhs))
    )
    setup = time.perf_counter() - start
    log.info(
        "finite-difference solve on %s nodes: %d blend levels, band of %d nodes (%.0f m)",
        shape, blend.levels.size, band.size, width_used,
    )
    try:
        x, iterations, residual = conjugate_gradient(
            operator.apply, rhs, preconditioner.apply, float(tolerance), int(max_iterations),
            progress,
        )
    except ConvergenceError as exc:
        raise ConvergenceError(
            f"{exc}. On this grid the flexural parameter spans up to "
            f"{(4.0 * float(solve_rigidity.max()) / stiffness) ** 0.25 / min(spec.dx, spec.dy):.0f}"
            f" cells; double-precision round-off alone limits the residual to about "
            f"{floor:.0e}"
        ) from exc
    solve_seconds = time.perf_counter() - start - setup
    total = float(np.abs(rhs).sum())
    imbalance = abs(stiffness * float((operator.area * x).sum()) - float(rhs.sum()))
    cell = spec.dx * spec.dy
    info: dict[str, Any] = {
        "iterations": int(iterations),
        "residual": float(residual),
        "tolerance": float(tolerance),
        "solve_shape": shape,
        "blend_levels": blend.levels.copy(),
        "band_nodes": band.size,
        "band_width": float(width_used),
        "force_balance_residual": imbalance / total if total > 0 else 0.0,
        "locally_compensated_load": float(((1.0 - operator.area) * rhs_load).sum() * cell),
        "setup_seconds": setup,
        "solve_seconds": solve_seconds,
    }
    return np.ascontiguousarray(x[:ny, :nx]), info
