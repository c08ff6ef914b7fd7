"""Layer 1, reading: load a table, find its columns, read them as numbers, count what is dropped.

Imports only ``engine.errors`` below it.
"""
