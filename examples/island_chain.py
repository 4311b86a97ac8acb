"""The demo's invented island chain, through the Python API instead of a scenario file.

Run:  python examples/island_chain.py [OUTPUT_DIR]
"""

from __future__ import annotations

import sys
from pathlib import Path

import gridflex
from gridflex.io.netcdf import write_netcdf
from gridflex.io.plots import plot_deflection_map
from gridflex.results.summary import deflection_summary, format_summary
from gridflex.synthetic import empty_grid, island_chain_height

ROCK, WATER = 2800.0, 1030.0  # kg/m^3: basaltic edifices standing in sea water


def main(out_dir: Path) -> None:
    grid = empty_grid(rows=480, columns=512, spacing=2e3)
    height = island_chain_height(grid)  # m above the sea floor
    load = gridflex.pressure_from_height(height, ROCK - WATER)
    plate = gridflex.Plate(te=25e3, youngs_modulus=100e9, infill_density=WATER)
    print(
        f"rigidity {plate.rigidity:.3e} N m, flexural parameter "
        f"{plate.flexural_parameter / 1e3:.1f} km"
    )
    result = gridflex.solve(load, plate)
    print(format_summary(deflection_summary(result)))
    out_dir.mkdir(parents=True, exist_ok=True)
    print("wrote", write_netcdf(result, out_dir / "island_chain_api.nc", overwrite=True))
    print("wrote", plot_deflection_map(result, out_dir / "island_chain_api.png", overwrite=True))


if __name__ == "__main__":
    main(Path(sys.argv[1]) if len(sys.argv) > 1 else Path("gridflex-demo"))
