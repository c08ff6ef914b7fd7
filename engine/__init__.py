"""bendwise engine: pure computation for testing straight lines on replicated data.

Never imports Textual, rich or plotext; heavy libraries (pandas, scipy, statsmodels) are
imported inside the functions that need them, so ``import engine`` stays cheap.
"""

from __future__ import annotations

from .data import CleaningReport, load_table, resolve_column
from .errors import BendwiseError, DataError, SpecError, UsageError
from .linearity import CheckResult, check, pure_error
from .study import Study, make_study

__all__ = [
    "BendwiseError",
    "CheckResult",
    "CleaningReport",
    "DataError",
    "SpecError",
    "Study",
    "UsageError",
    "check",
    "load_table",
    "make_study",
    "pure_error",
    "resolve_column",
]

__version__ = "0.1.0"
