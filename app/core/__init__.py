"""Numerical core: pure functions on NumPy arrays.

Nothing in this package knows about pandas, HTTP, SQLite or files.
"""
