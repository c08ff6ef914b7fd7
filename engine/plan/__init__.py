"""Beside the layers: power of the lack-of-fit tests before the data exist, and the search for a
design. Imports only the base modules.
"""
