"""prespec: pre-specified comparisons of proportions, locked, run and audited."""

__version__ = "0.1.0"
