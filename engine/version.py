"""The version of bendwise (one place; the package metadata carries the same number)."""

__version__ = "0.1.0"
