"""Parametric mappings: a small numpy network f(x) -> y trained on a pair loss.

``transform`` maps points the network never saw.  See ``docs/notes/parametric.md``.
"""

from ._estimators import ParametricMDS, ParametricSammon, ParametricTSNE
from ._training import TrainingDiverged

__all__ = ["ParametricMDS", "ParametricSammon", "ParametricTSNE", "TrainingDiverged"]
