"""Stage 5, results: posterior draws -> physical quantities, per-star probabilities and the
members table, the classic estimators, the dispersion check in words, model comparison and the
summary schema.
"""
