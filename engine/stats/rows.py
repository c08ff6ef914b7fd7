"""Where a study's rows are, and how code that needs rows asks for them.

Most of bendwise works from group statistics. A few things need rows: row-level residual charts,
the report's scatter, the smearing sample of an export, the replicate-free checks, resampling for
stability, the Box–Cox profile of small tables. They ask the study — every study is a row source —
and get either :class:`Rows` (every used row, or a seeded sample of them, saying which) or
:class:`NoRows` with the reason. An engine that keeps the rows elsewhere (DuckDB over files; Spark
later) answers ``rows()`` with ``NoRows`` and ``row_sample(k)`` with a sample it draws itself.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator, Mapping
from dataclasses import dataclass, field
from typing import Protocol, runtime_checkable

import numpy as np

__all__ = ["LazyColumns", "NoRows", "RowSource", "Rows", "SAMPLE_SEED"]

SAMPLE_SEED = 20261202
"""Default seed of row samples (a sample is part of what an export records)."""


@dataclass(frozen=True, eq=False)
class Rows:
    """Used rows of a study: every one (``sampled`` False) or a seeded random sample."""

    y: np.ndarray
    """Response per row."""
    x: np.ndarray
    """Predictor per row."""
    covariates: Mapping[str, np.ndarray] = field(default_factory=dict)
    """Each admitted covariate per row (numbers, or category labels as text)."""
    total: int = 0
    """How many rows the study uses in all."""
    sampled: bool = False
    """True when these are a sample of the ``total`` rows."""
    weights: np.ndarray | None = None
    """The user's weight per row, when the study has a weights column (a SQL study's sample)."""

    @property
    def n(self) -> int:
        """Rows held here."""
        return int(self.y.shape[0])


class LazyColumns(Mapping[str, np.ndarray]):
    """Named columns each built on first use (category labels per row cost a pass over the rows,
    and most callers only want to know that the rows are there)."""

    def __init__(self, makers: dict[str, Callable[[], np.ndarray]]) -> None:
        self._makers = makers
        self._made: dict[str, np.ndarray] = {}

    def __getitem__(self, name: str) -> np.ndarray:
        if name not in self._made:
            self._made[name] = self._makers[name]()
        return self._made[name]

    def __iter__(self) -> Iterator[str]:
        return iter(self._makers)

    def __len__(self) -> int:
        return len(self._makers)


@dataclass(frozen=True)
class NoRows:
    """The rows are not in memory here, and why."""

    reason: str


@runtime_checkable
class RowSource(Protocol):
    """What a study answers about its rows."""

    def rows(self) -> Rows | NoRows:
        """Every used row in memory, or why they are not."""
        ...

    def row_sample(self, k: int, seed: int = SAMPLE_SEED) -> Rows:
        """A seeded random sample of ``k`` used rows (every row when there are at most ``k``)."""
        ...
