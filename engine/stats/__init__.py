"""Layer 2, statistics: the Study and its row sources, group statistics, transforms, least
squares from group totals, power sums, spread tests, the variance function.

Imports ``engine.read`` and the base modules below it, never a layer above.
"""
