"""Stage 4, inference: the numpyro model, the per-star likelihood (epochs, binaries,
foreground), the dispersion-resolution check, NUTS sampling and diagnostics, the evidence.
"""
