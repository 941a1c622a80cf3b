"""Figures (matplotlib imported lazily, inside the functions)."""
