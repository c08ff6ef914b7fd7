"""Layer 5, hand-on: the spec document (write and read back), the report, the reproduction
script, predictions and inverse predictions from a spec, chart data for the app.

Imports ``engine.tree`` and below.
"""
