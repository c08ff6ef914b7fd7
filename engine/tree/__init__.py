"""Layer 4, the remedy tree: model specs, scoring of a node, the moves (one family a module,
registered in ``engine.tree.moves``), the Box–Cox and Box–Tidwell searches, the tree and the
honest suggestion.

Imports ``engine.checks`` and below.
"""
