"""Modal dialogs returning typed results through ``dismiss``."""

from .alpha import AlphaDialog, parse_alpha
from .confirm import ConfirmDialog
from .export import ExportDialog
from .stability import StabilityDialog, parse_stability

__all__ = ["AlphaDialog", "ConfirmDialog", "ExportDialog", "StabilityDialog", "parse_alpha", "parse_stability"]
