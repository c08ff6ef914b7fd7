"""Widgets of the bendwise app: the remedy tree, node detail, plotext charts, status line."""
