"""pairlens: exploratory association analysis for every pair of columns."""

__version__ = "0.1.0"
