"""Stage 3, mock catalogues with a known truth (distribution-function sampling, binaries,
epochs, field stars).
"""
