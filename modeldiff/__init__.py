"""modeldiff: what a change to an analytical model does to its numbers and its row security."""

__version__ = "0.1.0"
