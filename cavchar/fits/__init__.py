"""Fits: record -> model -> sampler -> FitResult, one module per data shape."""
