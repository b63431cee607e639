"""Foundations shared by every stage: units and constants, immutable pytrees, numerical
building blocks, quantiles, the output vocabulary, input errors and atomic file writes.
"""
