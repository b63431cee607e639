"""Stage 5, results: posterior draws -> physical quantities, per-star probabilities,
model comparison and the summary schema.
"""
