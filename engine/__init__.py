"""bendwise engine: pure computation for testing straight lines on replicated data.

Never imports Textual, rich or plotext; heavy libraries (pandas, scipy, statsmodels) are
imported inside the functions that need them, so ``import engine`` stays cheap.
"""

from __future__ import annotations

from .cautions import CAUTION
from .checks.straight_line import CheckResult, check, pure_error
from .errors import BendwiseError, DataError, SpecError, UsageError
from .plan.power import design_power, detectable_delta, search_designs, sigma_from_pure_error
from .read.cleaning import CleaningReport
from .read.columns import resolve_column
from .read.tables import load_table
from .stats.study import Study, make_study
from .stats.transforms import Transform
from .tree.model_spec import ModelSpec, WeightRule
from .tree.residuals import residuals_by_level
from .tree.scoring import NodeScore, score_spec
from .tree.suggestion import SUGGESTION_POLICIES, Evidence, SuggestionPolicy
from .tree.tree import POST_SEARCH_CAUTION, RULES, Node, RemedyTree, Suggestion, grow
from .version import __version__

__all__ = [
    "__version__",
    "CAUTION",
    "POST_SEARCH_CAUTION",
    "RULES",
    "SUGGESTION_POLICIES",
    "BendwiseError",
    "CheckResult",
    "CleaningReport",
    "Evidence",
    "DataError",
    "ModelSpec",
    "Node",
    "NodeScore",
    "RemedyTree",
    "SpecError",
    "Study",
    "Suggestion",
    "SuggestionPolicy",
    "Transform",
    "UsageError",
    "WeightRule",
    "check",
    "design_power",
    "detectable_delta",
    "grow",
    "load_table",
    "make_study",
    "pure_error",
    "residuals_by_level",
    "resolve_column",
    "score_spec",
    "search_designs",
    "sigma_from_pure_error",
]

