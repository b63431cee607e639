"""Stage 1, physics: light and dark profiles, anisotropy, mass models, the Jeans solver,
J and D factors, concentration relations, cosmology, closed-form estimators, binary orbits.
Pure functions of immutable parameter pytrees; imports nothing from later stages.
"""
