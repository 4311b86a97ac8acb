"""Benchmark: variable-te finite-difference solves against a spectral solve and spsolve.

Not collected by pytest. Each (size, case) runs in a fresh child process so that its peak
memory (ru_maxrss) is its own; inside the child the spectral baseline and (where it fits)
scipy.sparse.linalg.spsolve on the same operator run too, so the ratios are same-process.

Cases (invented, factor-10 te contrast = 1000-fold rigidity unless said):
  smooth      te 6 -> 60 km, tanh margin of half-width 80 km
  step        te 6 -> 60 km over three cells
  hinge_cross te 30 km with a te = 0 line crossing the grid
  hinge_end   te 30 km with a te = 0 line of 400 km ending inside the plate
  hinge_diag  te 30 km with a diagonal te = 0 line across the grid
  weak        te 30 km with a 60 km wide zone of te 3 km

Usage::

    python tests/benchmarks/variable.py                      # 512, 1024, 2048; 2 km cells
    python tests/benchmarks/variable.py --sizes 256,512,1024 --refine   # fixed 1024 km domain
    python tests/benchmarks/variable.py --spsolve-max 600000 # spsolve up to that many unknowns
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

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from gridflex.grid import GridSpec  # noqa: E402
from gridflex.plate import rigidity_from_te  # noqa: E402
from gridflex.solvers.finite_difference import (  # noqa: E402
    PlateOperator,
    _infinite_shape,
    finite_difference_deflection,
    pad_rigidity,
)
from gridflex.solvers.spectral import SpectralProblem  # noqa: E402

CASES = ("smooth", "step", "hinge_cross", "hinge_end", "hinge_diag", "weak")
E, NU, STIFFNESS = 1e11, 0.25, (3300.0 - 1030.0) * 9.81


def make_case(name: str, n: int, dx: float) -> tuple[np.ndarray, np.ndarray]:
    """(te, load) on an n x n grid of spacing dx centred on the origin."""
    x = (np.arange(n) - n / 2 + 0.5) * dx
    xx, yy = np.meshgrid(x, x)
    if name == "smooth":
        te = 6e3 + 54e3 * 0.5 * (1 + np.tanh(xx / 80e3))
    elif name == "step":
        te = 6e3 + 54e3 * np.clip(xx / (3 * dx) + 0.5, 0.0, 1.0)
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
    load = np.zeros((n, n))
    load[np.hypot(xx + 50e3, yy) < 80e3] = 2800 * 9.81 * 2000.0
    load[np.hypot(xx - 150e3, yy - 200e3) < 50e3] = 2800 * 9.81 * 1000.0
    return te, load


def run_one(name: str, n: int, dx: float, spsolve_max: int, tolerance: float) -> dict:
    te, load = make_case(name, n, dx)
    spec = GridSpec(n, n, dx, dx)
    rigidity = rigidity_from_te(te, E, NU)
    out: dict = {"case": name, "n": n, "dx": dx}
    # baseline: one spectral solve of the same grid with the largest te of the case (so the
    # same margin: infinite plate, pad 4.5 flexural parameters), set-up included; the median
    # of five fresh builds (rigidity nudged so no cached transfer function is reused), as
    # single runs on this shared 2-core machine have varied by a factor of two
    times = []
    for k in range(5):
        start = time.perf_counter()
        problem = SpectralProblem.build(spec, float(rigidity.max()) * (1 + 1e-4 * k), STIFFNESS)
        problem.deflection(load)
        times.append(time.perf_counter() - start)
    out["spectral_s"] = float(np.median(times))
    start = time.perf_counter()
    w, info = finite_difference_deflection(load, spec, rigidity, STIFFNESS, NU, tolerance=tolerance)
    out["fd_s"] = time.perf_counter() - start
    out.update(
        {
            k: info[k]
            for k in (
                "iterations",
                "residual",
                "band_nodes",
                "band_width",
                "setup_seconds",
                "solve_seconds",
                "force_balance_residual",
            )
        }
    )
    out["solve_shape"] = list(info["solve_shape"])
    out["levels"] = int(np.size(info["blend_levels"]))
    out["peak_mb_fd"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    shape = _infinite_shape(spec, rigidity, STIFFNESS, 4.5)
    unknowns = shape[0] * shape[1]
    if unknowns <= spsolve_max:
        import scipy.sparse.linalg as spla

        start = time.perf_counter()
        op = PlateOperator.build(pad_rigidity(rigidity, shape), STIFFNESS, NU, dx, dx)
        matrix = op.matrix().tocsc()
        rhs = np.zeros(shape)
        rhs[:n, :n] = load
        rhs *= op.area
        exact = spla.spsolve(matrix, rhs.ravel(), permc_spec="COLAMD").reshape(shape)
        out["spsolve_s"] = time.perf_counter() - start
        out["max_diff_vs_spsolve"] = float(np.abs(exact[:n, :n] - w).max() / np.abs(exact).max())
    out["peak_mb"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", default="512,1024,2048")
    parser.add_argument("--cases", default=",".join(CASES))
    parser.add_argument(
        "--refine",
        action="store_true",
        help="fixed 1024 km domain (refinement) instead of fixed 2 km cells",
    )
    parser.add_argument(
        "--spsolve-max",
        type=int,
        default=400_000,
        help="run spsolve when the padded grid has at most this many unknowns",
    )
    parser.add_argument("--tolerance", type=float, default=1e-8)
    parser.add_argument("--one", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.one:
        name, n, dx = args.one.split(":")
        print(json.dumps(run_one(name, int(n), float(dx), args.spsolve_max, args.tolerance)))
        return
    print(
        f"{'n':>5} {'case':<12} {'it':>3} {'residual':>8} {'setup':>6} {'solve':>6} "
        f"{'total':>6} {'spec':>5} {'x spec':>6} {'spsolve':>7} {'x faster':>8} "
        f"{'band':>7} {'MB fd':>6} {'MB all':>6}"
    )
    for n in map(int, args.sizes.split(",")):
        dx = 1024e3 / n if args.refine else 2e3
        for name in args.cases.split(","):
            child = subprocess.run(
                [
                    sys.executable,
                    __file__,
                    "--one",
                    f"{name}:{n}:{dx}",
                    "--spsolve-max",
                    str(args.spsolve_max),
                    "--tolerance",
                    str(args.tolerance),
                ],
                capture_output=True,
                text=True,
            )
            if child.returncode != 0:
                print(f"{n:>5} {name:<12} failed: {child.stderr.strip().splitlines()[-1]}")
                continue
            r = json.loads(child.stdout.strip().splitlines()[-1])
            sp = r.get("spsolve_s")
            sp_text = f"{sp:7.1f} {sp / r['fd_s']:8.1f}" if sp else f"{'-':>7} {'-':>8}"
            print(
                f"{n:>5} {name:<12} {r['iterations']:>3} {r['residual']:8.1e} "
                f"{r['setup_seconds']:6.2f} {r['solve_seconds']:6.2f} {r['fd_s']:6.2f} "
                f"{r['spectral_s']:5.2f} {r['fd_s'] / r['spectral_s']:6.1f} {sp_text} "
                f"{r['band_nodes']:>7} {r['peak_mb_fd']:6.0f} {r['peak_mb']:6.0f}",
                flush=True,
            )


if __name__ == "__main__":
    main()
