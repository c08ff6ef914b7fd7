"""A modal screen that answers once.

Keys keep arriving while a dismissed screen is on its way out: a second Enter or Esc would
dismiss again and pop the screen beneath it (Textual then raises ScreenStackError, or the app is
left on an empty screen). Every dialog answers through :meth:`OnceModal.finish`, which ignores
everything after the first answer and anything while the screen is not the current one.
"""

from __future__ import annotations

from textual.screen import ModalScreen, ScreenResultType

__all__ = ["OnceModal"]


class OnceModal(ModalScreen[ScreenResultType]):
    """ModalScreen whose result is given at most once."""

    _answered: bool = False

    def finish(self, result: ScreenResultType) -> None:
        """Dismiss with ``result`` unless already answered or no longer on top."""
        if self._answered or not self.is_current:
            return
        self._answered = True
        self.dismiss(result)
