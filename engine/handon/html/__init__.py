"""The HTML report of an export: one self-contained page with inline SVG figures.

Drawing needs matplotlib (the ``bendwise[report]`` extra); it is imported only when a page is
built, so the engine's computation modules never load it.
"""

from .page import html_available, report_html

__all__ = ["html_available", "report_html"]
