"""The moves of the remedy tree, one family a module, registered in ``MOVES`` (the tree's order).

To add a family: write a module here with a class that has ``name``, ``answers`` and
``propose(tree, node) -> list[Offer | Skip]`` (see ``base.py``), and add an instance to ``MOVES``.
"""

from __future__ import annotations

from .base import MoveFamily, Offer, Skip, coefficients, cost, interval_text
from .box_tidwell import BoxTidwell
from .boxcox import BoxCox
from .covariates import AddCovariate, Interaction
from .degree import MAX_DEGREE, Degree
from .predictor import PredictorTransforms
from .response import ResponseTransforms
from .weights import Weights

MOVES: tuple[MoveFamily, ...] = (
    ResponseTransforms(),
    BoxCox(),
    PredictorTransforms(),
    BoxTidwell(),
    Degree(),
    AddCovariate(),
    Interaction(),
    Weights(),
)
"""Every move family, in the order the tree offers their moves."""

__all__ = ["MAX_DEGREE", "MOVES", "MoveFamily", "Offer", "Skip", "coefficients", "cost", "interval_text"]
