"""Beside the layers: row sources that keep the rows where they are (DuckDB over Parquet/CSV
files; room for others). They fill the statistics ``engine.stats`` defines and import only
``engine.read``, ``engine.stats`` and the base modules.
"""
