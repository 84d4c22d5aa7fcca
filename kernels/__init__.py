"""Heat kernels and transition matrices, one family per module.

Each module evaluates a kernel to float64 accuracy as an eigen-series or an
image sum, with its truncation chosen from t, and provides exact samplers.
"""
