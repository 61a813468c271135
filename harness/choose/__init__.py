"""Choose a method within a time budget: a pool, successive halving through the runner, a recommendation.

``choose`` chains the stages as :mod:`harness.api` does (suite -> run ->
compare), once per rung; see ``docs/choose.md``.
"""

from .budget import TimeModel, fit_time_model, parse_budget
from .halving import CARE_WEIGHTS, Rung, plan_rungs
from .pool import DEFAULT_GRIDS, Candidate, Pool, default_pool
from .recommend import Recommendation, RungRecord, recommendation_text
from .search import choose

__all__ = [
    "CARE_WEIGHTS",
    "DEFAULT_GRIDS",
    "Candidate",
    "Pool",
    "Recommendation",
    "Rung",
    "RungRecord",
    "TimeModel",
    "choose",
    "default_pool",
    "fit_time_model",
    "parse_budget",
    "plan_rungs",
    "recommendation_text",
]
