"""Ask how many resamples (and which seed) the selection-stability run uses."""

from __future__ import annotations

from typing import ClassVar

from textual import on
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Vertical
from textual.widgets import Input, Label, Static

from .once import OnceModal

__all__ = ["StabilityDialog", "parse_stability", "DEFAULT_RESAMPLES"]

DEFAULT_RESAMPLES = 200
"""As many as the README's worked example; about 10 s on the demo table."""


def parse_stability(resamples: str, seed: str) -> tuple[int, int]:
    """(resamples, seed) within the command line's limits; ValueError with a sentence otherwise."""
    try:
        n = int(resamples.strip())
    except ValueError:
        raise ValueError(f"resamples {resamples.strip()!r} is not a whole number; give e.g. 200") from None
    if not 1 <= n <= 100_000:
        raise ValueError(f"resamples {n} must lie between 1 and 100000, e.g. 200")
    try:
        s = int(seed.strip())
    except ValueError:
        raise ValueError(f"seed {seed.strip()!r} is not a whole number; give e.g. 0") from None
    if s < 0:
        raise ValueError(f"seed {s} must be ≥ 0")
    return n, s


class StabilityDialog(OnceModal[tuple[int, int] | None]):
    """Resamples and seed; Enter starts, Esc cancels."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("escape", "cancel", "Cancel", id="stability.cancel", tooltip="Do not measure"),
    ]

    def __init__(self, resamples: int, seed: int) -> None:
        super().__init__()
        self.resamples, self.seed = resamples, seed

    def compose(self) -> ComposeResult:
        with Vertical(classes="dialog"):
            yield Label("How often does each node win the suggestion on resampled data?", classes="dialog-title")
            yield Label("resamples")
            yield Input(value=str(self.resamples), id="stability-resamples", restrict=r"[0-9]*")
            yield Label("seed")
            yield Input(value=str(self.seed), id="stability-seed", restrict=r"[0-9]*")
            yield Static("", id="stability-error", classes="dialog-error")
            yield Static("Enter = start   Tab = next field   Esc = cancel. Esc on the tree stops a run; "
                         "the same numbers as grow --stability N --seed S.", classes="dialog-keys")

    def on_mount(self) -> None:
        for inp in self.query(Input):
            inp.cursor_blink = False
        first = self.query_one("#stability-resamples", Input)
        first.focus()
        first.select_all()

    @on(Input.Submitted)
    def _submitted(self) -> None:
        try:
            answer = parse_stability(self.query_one("#stability-resamples", Input).value,
                                     self.query_one("#stability-seed", Input).value)
        except ValueError as exc:
            self.query_one("#stability-error", Static).update(f"not started: {exc}")
            return
        self.finish(answer)

    def action_cancel(self) -> None:
        self.finish(None)
