"""Analysis of run files: statistics, references, distributions, the verdict.

Reads run files only (through :mod:`mdgas.run`); never imports an engine.
"""
