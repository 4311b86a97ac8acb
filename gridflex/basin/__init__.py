"""Basin modelling: porosity-depth compaction, staged loading and backstripping.

The public names are importable from here: ``gridflex.basin.stage_loading``,
``gridflex.basin.Stage``, ``gridflex.basin.StagedBasin``, ``gridflex.basin.backstrip``,
``gridflex.basin.backstrip_layers``, ``gridflex.basin.Lithology`` and the built-in
``gridflex.basin.LITHOLOGIES``.
"""

from gridflex.basin.backstrip import backstrip, backstrip_layers
from gridflex.basin.compaction import LITHOLOGIES, Lithology
from gridflex.basin.staging import Stage, StagedBasin, stage_loading

__all__ = [
    "LITHOLOGIES",
    "Lithology",
    "Stage",
    "StagedBasin",
    "backstrip",
    "backstrip_layers",
    "stage_loading",
]
