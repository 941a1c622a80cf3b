"""Likelihood models, one module per data shape (jump, probe and ring-down records)."""
