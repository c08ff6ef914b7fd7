"""Modal dialogs returning typed results through ``dismiss``."""

from .alpha import AlphaDialog, parse_alpha
from .confirm import ConfirmDialog
from .export import ExportDialog

__all__ = ["AlphaDialog", "ConfirmDialog", "ExportDialog", "parse_alpha"]
