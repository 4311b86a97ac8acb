"""Benchmark: variable-te finite-difference solves against a spectral solve, spsolve and a
sparse Cholesky factorisation.

Not collected by pytest. Each (size, case) runs in a fresh child process so that its peak
memory (ru_maxrss) is its own; inside the child the spectral baseline and (where they fit)
scipy.sparse.linalg.spsolve and a CHOLMOD sparse Cholesky (scikit-sparse, if installed: it
builds against the Debian package libsuitesparse-dev; never a dependency of gridflex or its
tests) on the same operator run too, so the ratios are same-process. The largest difference
from the direct solve is given relative to its peak.

Cases (invented; rigidity ratios are te ratios cubed):
  smooth        te 6 -> 60 km, tanh margin of half-width 80 km
  step          te 6 -> 60 km over three cells
  hinge_cross   te 30 km with a te = 0 line crossing the grid
  hinge_end     te 30 km with a te = 0 line of 400 km ending inside the plate
  hinge_diag    te 30 km with a diagonal te = 0 line across the grid
  weak          te 30 km with a 60 km wide zone of te 3 km
  weak_zone     te 25 km with a 20 km wide zone of te 0.5 km (fixed width under refinement)
  margin_hinges te 5 -> 50 km, tanh margin of half-width 40 km, crossed by a te = 0 line
                across the grid and by one of 500 km that crosses it and ends inside
  hinge_network te 30 km with two te = 0 lines crossing each other across the grid and a
                third of 400 km ending inside at both ends
  step_sharp    te 5 -> 50 km in one cell
  te_map        a smooth random te map spanning 0-100 km (seeded; features of about
                40 km, about a tenth of it te = 0, a tenth 100 km), tapered to te = 0
                over the outer 50 km so that the margin of ``edges="infinite"`` stays
                a few cells (a 100 km te at the edge would pad each side by 900 km)

Measured (``--refine``, 2048 km domain, default tolerance; iterations at 256² / 512² /
1024² / 2048², on a shared 2-core machine):

  ==============  ====================  ========================  =====================
  case            one band width: 3     per-node band, at least   same, caps calibrated
                  weak-side flexural    1 stiff-side flexural     (2048²: band nodes,
                  parameters (before)   parameter                 peak memory)
  ==============  ====================  ========================  =====================
  weak_zone       26 / 44 / - / -       7 / 8 / 8 / 20 (capped)   9 (437 k, 2.5 GB)
  margin_hinges   19 / 56 / - / -       17 / 17 / 18 / -          34 (611 k, 2.8 GB)
  hinge_network   23 / 28 / - / -       7 / 9 / 10 / 62 (capped)  23 (568 k, 2.4 GB)
  step_sharp      13 / - / - / -        9 / 10 / 10 / -           14 (419 k, 2.7 GB)
  smooth          20 / - / - / -        20 / 20 / 20 / -          (no band)
  ==============  ====================  ========================  =====================

At 2048² the bands met the fixed 1.5 GiB LU memory cap of the time and shrank, so the
iterations grew there (the margin with hinges 18 -> 34). With the cap set from the memory
left (:func:`gridflex.solvers.rigidity_features.factor_budget`, at most 6 GiB), measured
at 2048² on a 2-core machine loaded by other jobs (load average 5-10, so the times are
rough; iterations are exact), before -> after:

  ==============  ===========  ===================  ======================  ==========
  case            iterations   band nodes           set-up / solve (s)      peak MB
  ==============  ===========  ===================  ======================  ==========
  margin_hinges   34 -> 18     611 k -> 943 k       45 / 248 -> 221 / 142   2857 -> 3875
  hinge_network   23 -> 10     568 k -> 989 k       78 / 144 -> 193 / 102   2427 -> 3612
  step_sharp      14 -> 11     419 k -> 744 k       131 / 121 -> 282 / 71   2731 -> 3665
  weak_zone       9            437 k (never capped)  147 / 78               2473
  ==============  ===========  ===================  ======================  ==========

So 256² / 512² / 1024² / 2048²: weak_zone 7 / 8 / 8 / 9, margin_hinges 17 / 17 / 18 / 18,
hinge_network 7 / 9 / 10 / 10, step_sharp 9 / 10 / 10 / 11, smooth 20 / 20 / 20. The
wider band's LU (SuperLU, one thread) costs set-up time: fewer iterations, a dearer
set-up; a single solve at 2048² took longer in total, repeated solves of one set-up
(histories, infill, fitting) gain.

Band reaching a fixed distance into the stiff plate
(:data:`gridflex.solvers.rigidity_features.STIFF_SIDE_REACH_FLEXURAL_PARAMETERS`: 1.3
flexural parameters counted to the band solve's frame, at least 1 from the sharp nodes;
``max_band_nodes`` 1 M -> 1.5 M). With one width from the sharp nodes the zone solved
exactly reached about three spacings further (the sharp ring and the stencil's two-row
frame), 24 km beyond the width at 256² and 3 km at 2048², and the hinge network's
energy-norm error fell per iteration by a factor of about 15 / 8.7 / 6.7 at 256² / 512² /
1024². Measured on a shared 2-core machine (2048 km domain, default tolerance), iterations
at 256² / 512² / 1024² (/ 2048²), before (the parent commit, measured the same day) ->
after, and band nodes at 1024²:

  ==============  =================  ==================  ===================
  case            before             after               band 1024²
  ==============  =================  ==================  ===================
  smooth          19 / 19 / 19       19 / 19 / 19        (no band)
  step            8 / 10 / 10        8 / 9 / 9           243 k -> 252 k
  hinge_cross     5 / 6 / 6          5 / 5 / 5           120 k -> 145 k
  hinge_end       5 / 5 / 5          5 / 4 / 4           22 k -> 28 k
  hinge_diag      5 / 5 / 5          5 / 5 / 5           232 k -> 281 k
  weak            6 / 7 / 7          6 / 6 / 6           161 k -> 187 k
  weak_zone       7 / 8 / 8          7 / 7 / 7 / 6       111 k -> 130 k
  margin_hinges   17 / 17 / 17       17 / 16 / 16 / 16   226 k -> 245 k
  hinge_network   7 / 9 / 10         7 / 7 / 7 / 7       250 k -> 301 k
  step_sharp      9 / 9 / 10         9 / 9 / 9 / 11      192 k -> 240 k
  te_map          11 / 15 / 20       11 / 15 / 15        999 k -> 1023 k
  ==============  =================  ==================  ===================

At 2048², one run at a time (before: 9 / 18 / 10 / 11 iterations in the table above,
measured earlier, not re-run):

  ==============  ==========  ===========  ======================  =========
  case            iterations  band nodes   set-up / solve (s)      peak MB
  ==============  ==========  ===========  ======================  =========
  weak_zone       6           535 k        58 / 14                 2897
  margin_hinges   16          1004 k       124 / 82                3886
  hinge_network   7           1227 k       116 / 40                4152
  step_sharp      11          744 k        68 / 35                 3495
  ==============  ==========  ===========  ======================  =========

The sharp step's band at its full reach exceeded the LU memory estimate's cap (6 GiB at
25 bytes per node and node across), so it fell back to the band of one flexural parameter
(744 k nodes, as before) and took 11 iterations, as before (9 at 1024²: +22 %); the
margin with hinges (1.004 M) and the hinge network (1.23 M) fit only under the raised node
cap of 1.5 M.

At 256² the bands are those of before except margin_hinges (11.8 k -> 12.4 k) and
step_sharp (12.0 k -> 13.6 k); largest difference from CHOLMOD there 4.8e-11 to 7.3e-9
of the peak over all cases, as before; at 512² hinge_network 6.0e-10 and weak_zone
1.5e-9 (after). te_map (not a case of fixed features) still grows
from 256² to 512² (11 -> 15); at 1024² its band was capped before (by the 1 M node cap)
and after (by the LU memory estimate), set-up 158 -> 240 s, peak 3.8 -> 4.0 GB.

te_map (0-100 km with te = 0 patches; not yet robust): at 256² of 4 km cells 28 iterations,
largest difference from spsolve 1.0e-8 of the peak, but the band holds 71 k of the 90 k
nodes (it is nearly a direct solve); with the band switched off (max_band_nodes=0) the
blend alone does not converge in 300 iterations at 256² of 4 km or of 1 km cells (error
estimate 0.03-0.15, ConvergenceError). At 4096² of 250 m cells (solve grid 4320²) the set-up
took 60 s (band capped at 962 k nodes, 9.5 km wide; 8 blend levels; peak 5.2 GB) and the run
was stopped after some minutes of iterating, without a result: the 4096² target is not
shown. Under a data-size limit of 7.6 GB (ulimit -d) the same run failed with MemoryError
allocating the CG vectors after set-up (the grid estimate counts one array per blend level
for two or three levels, not eight).

Tried and not kept: a coarse-grid correction, cubic B-splines on a coarse grid of spacing
H (Galerkin operator Pᵀ K P from 81 coloured probe products, factorised by SuperLU), as
deflation (A-DEF2, Tang, Nabben, Vuik & Erlangga 2009, J. Sci. Comput. 39), balancing
(BNN) or additive combination with the band and blend. On the margin with hinges at 512²
(4 km cells): 17 iterations -> 9 (H = 16 or 32 km, deflation or balancing), 10 (64 km),
11 (128 km); additive 16-19. At 1024²: 18 -> 10 (32 km), 12 (128 km). But each deflated
iteration costs about twice as much (a second operator product, and the first band solve
is no longer skipped since the coarse step leaves a residual on the band), and the
probes cost 81 operator products (7-67 s here), so a solve was slower at 512² and 1024²
(1024²: 48-56 s against 20 s). A smooth coarse space does not stand in for the band's
stiff-side width either: with the band narrowed to 0.5 / 0.25 stiff flexural parameters,
30 -> 19-23 and 41 -> 28-34 iterations at 512² (the slow modes bend at the hinges, which
a smooth spline cannot).

CHOLMOD at 1024² (same process, after the solve): weak_zone
1055 s against 6.0 s (176 times), hinge_network 361 s against 8.0 s (45 times); largest
difference 3.7e-9 and 9.5e-10 of the peak; peak memory 4.3 and 4.0 GB against 0.6 and
0.9 GB.

Periodic band distance and the blend's least ramp (gridflex.solvers.rigidity_features
.SharpDistance, gridflex.solvers.preconditioners.MIN_RAMP_RATIO / SINGLE_LEVEL_RATIO),
iterations at default settings, ``--refine`` (2048 km domain) except where a cell size is
given, before -> after: te_map 11 / 15 / 15 -> 7 / 7 / 6 at 256² / 512² / 1024² (band
1.04 M nodes at 1024², set-up 79 s, solve 8 s), 512² of 2 km 30 -> 10; at 1024²
margin_hinges 16, hinge_network 7, step_sharp 9, weak_zone 7, smooth 19 (unchanged). A
smooth Gaussian te valley (25 -> 3 km, 30 km half-width; not a case here) 121-256 -> 6-7.
At 2048² of 1 km te_map still raises ConvergenceError (600 iterations, 706 s; band at
the 1.5 M node cap, a partial band, 5 levels): the capped band stays the open problem.

Over the band's caps the solve now takes aggregation multigrid (gridflex.solvers.multigrid;
the ``preconditioner`` column): te_map at 2048² of 1 km (``--refine``) 40 iterations,
set-up 91 s, solve 65 s, peak 7.0 GB; at 2048² of 500 m (``--dx 0.5``) 38 iterations,
set-up 88 s, solve 55 s, peak 7.4 GB (ConvergenceError before in both; 87 and 91
iterations with a fourth multigrid level, see gridflex.solvers.multigrid.MAX_LEVELS). The
other cases keep their bands (at their full or least widths) and are unchanged (re-run:
1024² te_map 6, margin_hinges 16, hinge_network 7; 2048² step_sharp 11, hinge_network 7).
At 4096² of 250 m (``--sizes 4096 --dx 0.25``) the multigrid's set-up does not fit in
24 GiB (estimated 37 GB) and te_map still raises ConvergenceError (300 iterations, 12.3
min, peak 7.6 GB, with the partial band).

The multigrid set-up is now built from the library's kernels with a lean energy
minimisation and a blocked Galerkin product (peak about 0.65 kB per node instead of
1.8 kB), and its strength threshold is 0.05: te_map at 2048² of 1 km (``--refine``) 39
iterations (threshold 0), set-up 63 s, solve 43 s, peak 3.6 GB; with threshold 0.05 23
iterations (multigrid set-up 68 s, solve 32 s). At 4096² of 250 m (``--sizes 4096 --dx
0.25``): 37 iterations, accuracy 7.9e-8, set-up 386 s, solve 208 s, peak 15.4 GB (threshold
0: 42 iterations, 265 s, 205 s, 14.3 GB): converged where the partial band did not.

te_map at 2 km cells (the default sizes), band and blend (default) against the multigrid
forced (``max_band_nodes=1``), measured in one process: 256² 12 iterations, 2.1 s in all
against 28 and 4.5 s; 512² 10 and 8.2 s against 27 and 10.2 s; 1024² (band of 1.04 M of
1.17 M nodes) 6 and 59.2 s (set-up 54.4 s, solve 4.8 s) against 25 and 36.6 s (21.4 s,
15.2 s); the deflections agree to 1.4e-9 of the peak. At 2048² the band is over its caps
and the multigrid takes 19. The multigrid's own counts fall with the grid (28 / 27 / 25 /
19): the jump 6 -> 19 at 2048² is the change of method. Left as is: at 1024² the
multigrid is the faster single solve, but the band's factor is made once and each further
solve of a history or an infill costs 4.8 s against 15.2 s.

The multigrid's patch smoother is now built only when a solve is still short of its
tolerance after 50 iterations (gridflex.solvers.multigrid.PATCH_HORIZON): te_map at 2048²
of 2 km, default settings, 22 iterations, set-up 75.9 s, solve 35.7 s, 111.6 s in all,
peak 3.7 GB, against 19 iterations, 99.3 + 40.6 = 139.8 s and 9.4 GB with the patches
built at set-up (session 13's run of this script).

Usage::

    python tests/benchmarks/variable.py                      # 512, 1024, 2048; 2 km cells
    python tests/benchmarks/variable.py --sizes 256,512,1024,2048 --refine   # 2048 km domain
    python tests/benchmarks/variable.py --spsolve-max 600000 # spsolve up to that many unknowns
    python tests/benchmarks/variable.py --cholesky-max 3000000
    python tests/benchmarks/variable.py --sizes 4096 --dx 0.25 --cases te_map
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import scipy.ndimage

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from gridflex.grid import GridSpec  # noqa: E402
from gridflex.plate import rigidity_from_te  # noqa: E402
from gridflex.solvers.finite_difference import (  # noqa: E402
    DEFAULT_TOLERANCE,
    FiniteDifferenceSolver,
)
from gridflex.solvers.spectral import SpectralProblem  # noqa: E402

CASES = ("weak_zone", "margin_hinges", "hinge_network", "step_sharp", "smooth")
ALL_CASES = (
    "smooth",
    "step",
    "hinge_cross",
    "hinge_end",
    "hinge_diag",
    "weak",
    "weak_zone",
    "margin_hinges",
    "hinge_network",
    "step_sharp",
    "te_map",
)
E, NU, STIFFNESS = 1e11, 0.25, (3300.0 - 1030.0) * 9.81
REFINE_DOMAIN = 2048e3
"""Side of the fixed domain of ``--refine`` (m)."""


def _line(coordinate: np.ndarray, value: float, dx: float) -> np.ndarray:
    """The one line of nodes nearest to *coordinate* = *value*."""
    return np.abs(coordinate - value) <= 0.5 * dx


def make_case(name: str, n: int, dx: float) -> tuple[np.ndarray, np.ndarray]:
    """(te, load) on an n x n grid of spacing dx centred on the origin."""
    x = (np.arange(n) - n / 2 + 0.5) * dx
    xx, yy = np.meshgrid(x, x)
    if name == "smooth":
        te = 6e3 + 54e3 * 0.5 * (1 + np.tanh(xx / 80e3))
    elif name == "step":
        te = 6e3 + 54e3 * np.clip(xx / (3 * dx) + 0.5, 0.0, 1.0)
    elif name == "step_sharp":
        te = np.where(xx > 0, 50e3, 5e3)
    elif name == "margin_hinges":
        te = 5e3 + 45e3 * 0.5 * (1 + np.tanh(xx / 40e3))
        te[_line(yy, -100e3, dx)] = 0.0
        te[_line(xx, -150e3, dx) & (yy > -300e3) & (yy < 200e3)] = 0.0
    elif name == "te_map":
        noise = np.random.default_rng(15).standard_normal((n, n))
        field = scipy.ndimage.gaussian_filter(noise, 20e3 / dx, mode="wrap")
        field = (field - field.mean()) / field.std()
        te = 100e3 * np.clip(0.5 + field / 2.6, 0.0, 1.0)  # ±1.3 sigma: 0 and 100 km
        edge = np.minimum(np.minimum(xx, -xx), np.minimum(yy, -yy)) + n * dx / 2
        te *= np.clip(edge / 50e3, 0.0, 1.0)
    elif name == "weak_zone":
        te = np.full((n, n), 25e3)
        te[np.abs(xx - 100e3) < 10e3] = 0.5e3
    else:
        te = np.full((n, n), 30e3)
        if name == "hinge_cross":
            te[:, n // 2] = 0.0
        elif name == "hinge_end":
            te[(np.arange(n)[None, :] == n // 2) & (np.abs(yy) < 200e3)] = 0.0
        elif name == "hinge_diag":
            te[np.abs(xx - yy) < 0.5 * dx] = 0.0
        elif name == "weak":
            te[np.abs(xx - 100e3) < 30e3] = 3e3
        elif name == "hinge_network":
            te[_line(xx, 0.0, dx)] = 0.0
            te[_line(yy, 50e3, dx)] = 0.0
            te[_line(xx, 200e3, dx) & (np.abs(yy) < 200e3)] = 0.0
    load = np.zeros((n, n))
    load[np.hypot(xx + 50e3, yy) < 80e3] = 2800 * 9.81 * 2000.0
    load[np.hypot(xx - 150e3, yy - 200e3) < 50e3] = 2800 * 9.81 * 1000.0
    return te, load


def _peak_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def run_one(
    name: str, n: int, dx: float, spsolve_max: int, cholesky_max: int, tolerance: float
) -> dict:
    te, load = make_case(name, n, dx)
    spec = GridSpec(n, n, dx, dx)
    rigidity = rigidity_from_te(te, E, NU)
    out: dict = {"case": name, "n": n, "dx": dx}
    # baseline: one spectral solve of the same grid with the largest te of the case (so the
    # same margin: infinite plate, pad 4.5 flexural parameters), set-up included; the median
    # of three fresh builds (rigidity nudged so no cached transfer function is reused), as
    # single runs on this shared 2-core machine have varied by a factor of two
    times = []
    for k in range(3):
        start = time.perf_counter()
        problem = SpectralProblem.build(spec, float(rigidity.max()) * (1 + 1e-4 * k), STIFFNESS)
        problem.deflection(load)
        times.append(time.perf_counter() - start)
    out["spectral_s"] = float(np.median(times))
    start = time.perf_counter()
    solver = FiniteDifferenceSolver.build(spec, rigidity, STIFFNESS, NU, tolerance=tolerance)
    w, info = solver.solve(load)
    out["fd_s"] = time.perf_counter() - start
    for key in (
        "iterations",
        "residual",
        "accuracy",
        "backward_error",
        "preconditioner",
        "band_nodes",
        "band_width",
        "setup_seconds",
        "solve_seconds",
        "force_balance_residual",
    ):
        out[key] = info[key]
    out["solve_shape"] = list(info["solve_shape"])
    out["levels"] = int(np.size(info["blend_levels"]))
    out["peak_mb_fd"] = _peak_mb()
    shape = solver.shape
    unknowns = shape[0] * shape[1]
    full = np.zeros(shape)
    full[solver.window] = load
    rhs = (solver.operator.area * full).ravel()
    exact = None
    if unknowns <= cholesky_max:
        try:
            from sksparse.cholmod import cholesky  # type: ignore[import-not-found]
        except ImportError:
            out["cholesky"] = "scikit-sparse not installed"
        else:
            start = time.perf_counter()
            factor = cholesky(solver.operator.matrix().tocsc())
            exact = factor(rhs).reshape(shape)
            out["cholesky_s"] = time.perf_counter() - start
            del factor
    if exact is None and unknowns <= spsolve_max:
        import scipy.sparse.linalg as spla

        start = time.perf_counter()
        matrix = solver.operator.matrix().tocsc()
        exact = spla.spsolve(matrix, rhs, permc_spec="COLAMD").reshape(shape)
        out["spsolve_s"] = time.perf_counter() - start
    if exact is not None:
        out["max_diff_vs_direct"] = float(
            np.abs(exact[solver.window] - w).max() / np.abs(exact).max()
        )
    out["peak_mb"] = _peak_mb()
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", default="512,1024,2048")
    parser.add_argument("--cases", default=",".join(CASES), help=f"of {','.join(ALL_CASES)}")
    parser.add_argument(
        "--refine",
        action="store_true",
        help="fixed 2048 km domain (refinement) instead of fixed 2 km cells",
    )
    parser.add_argument(
        "--spsolve-max",
        type=int,
        default=400_000,
        help="run spsolve when the padded grid has at most this many unknowns (and no "
        "Cholesky ran)",
    )
    parser.add_argument(
        "--cholesky-max",
        type=int,
        default=2_500_000,
        help="run the CHOLMOD Cholesky when the padded grid has at most this many unknowns",
    )
    parser.add_argument(
        "--dx", type=float, default=2.0, help="cell size (km) without --refine; default 2"
    )
    parser.add_argument("--tolerance", type=float, default=DEFAULT_TOLERANCE)
    parser.add_argument(
        "--one", help=argparse.SUPPRESS
    )  # one (case, size) in this process: name:n:dx
    args = parser.parse_args()
    if args.one:
        name, n, dx = args.one.split(":")
        result = run_one(
            name, int(n), float(dx), args.spsolve_max, args.cholesky_max, args.tolerance
        )
        print(json.dumps(result))
        return
    print(
        f"{'n':>5} {'dx km':>5} {'case':<13} {'it':>3} {'accuracy':>8} {'residual':>8} "
        f"{'setup':>6} {'solve':>6} {'total':>6} {'x spec':>6} {'direct':>7} {'x faster':>8} "
        f"{'vs direct':>9} {'band':>7} {'MB fd':>6} {'MB all':>6}"
    )
    for n in map(int, args.sizes.split(",")):
        dx = REFINE_DOMAIN / n if args.refine else 1e3 * args.dx
        for name in args.cases.split(","):
            child = subprocess.run(
                [
                    sys.executable,
                    __file__,
                    "--one",
                    f"{name}:{n}:{dx}",
                    "--spsolve-max",
                    str(args.spsolve_max),
                    "--cholesky-max",
                    str(args.cholesky_max),
                    "--tolerance",
                    str(args.tolerance),
                ],
                capture_output=True,
                text=True,
            )
            if child.returncode != 0:
                print(f"{n:>5} {name:<13} failed: {child.stderr.strip().splitlines()[-1]}")
                continue
            r = json.loads(child.stdout.strip().splitlines()[-1])
            direct = r.get("cholesky_s", r.get("spsolve_s"))
            kind = "c" if "cholesky_s" in r else "s"
            direct_text = (
                f"{direct:6.1f}{kind} {direct / r['fd_s']:8.1f}" if direct else f"{'-':>7} {'-':>8}"
            )
            diff = r.get("max_diff_vs_direct")
            diff_text = f"{diff:9.1e}" if diff is not None else f"{'-':>9}"
            print(
                f"{n:>5} {dx / 1e3:5.2f} {name:<13} {r['iterations']:>3} {r['accuracy']:8.1e} "
                f"{r['residual']:8.1e} {r['setup_seconds']:6.2f} {r['solve_seconds']:6.2f} "
                f"{r['fd_s']:6.2f} {r['fd_s'] / r['spectral_s']:6.1f} {direct_text} "
                f"{diff_text} {r['band_nodes']:>7} {r['peak_mb_fd']:6.0f} {r['peak_mb']:6.0f}",
                flush=True,
            )
            if "cholesky" in r:
                print(f"      ({r['cholesky']}: no Cholesky baseline)")


if __name__ == "__main__":
    main()
