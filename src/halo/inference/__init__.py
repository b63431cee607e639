"""Stage 4, inference: the numpyro model, the per-star likelihood (epochs, binaries,
foreground), NUTS sampling and diagnostics, the evidence.
"""
