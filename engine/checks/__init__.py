"""Layer 3, tests: the pure-error lack-of-fit test, the nested F test, the straight-line check
with its side tests (Mandel, spread, replicate-free checks).

Imports ``engine.stats`` and below.
"""
