"""bendwise engine: pure computation for testing straight lines on replicated data.

Never imports Textual, rich or plotext; heavy libraries (pandas, scipy, statsmodels) are
imported inside the functions that need them, so ``import engine`` stays cheap.
"""

from __future__ import annotations

from .cautions import CAUTION
from .data import CleaningReport, load_table, resolve_column
from .errors import BendwiseError, DataError, SpecError, UsageError
from .linearity import CheckResult, check, pure_error
from .plan import design_power, detectable_delta, search_designs, sigma_from_pure_error
from .remedies import POST_SEARCH_CAUTION, RULES, Node, RemedyTree, Suggestion, grow
from .scoring import NodeScore, residuals_by_level, score_spec
from .spec import ModelSpec, WeightRule
from .study import Study, make_study
from .suggestion import SUGGESTION_POLICIES, Evidence, SuggestionPolicy
from .transforms import Transform

__all__ = [
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

__version__ = "0.1.0"
