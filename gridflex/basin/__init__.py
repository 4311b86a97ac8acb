"""Basin modelling: porosity-depth compaction, staged loading, backstripping, stretching.

The public names are importable from here: ``gridflex.basin.stage_loading``,
``gridflex.basin.Stage``, ``gridflex.basin.StagedBasin``, ``gridflex.basin.backstrip``,
``gridflex.basin.backstrip_layers``, ``gridflex.basin.Lithology``, the built-in
``gridflex.basin.LITHOLOGIES``, ``gridflex.basin.mckenzie_subsidence`` and its
``gridflex.basin.StretchingModel`` and the rift of a staged basin,
``gridflex.basin.Stretching``.
"""

from gridflex.basin.backstrip import backstrip, backstrip_layers
from gridflex.basin.compaction import LITHOLOGIES, Lithology
from gridflex.basin.staging import Stage, StagedBasin, stage_loading
from gridflex.basin.stretching import Stretching, StretchingModel, mckenzie_subsidence

__all__ = [
    "LITHOLOGIES",
    "Lithology",
    "Stage",
    "StagedBasin",
    "Stretching",
    "StretchingModel",
    "backstrip",
    "backstrip_layers",
    "mckenzie_subsidence",
    "stage_loading",
]
