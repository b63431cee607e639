"""Stage 2, inputs: the satellite description file, velocity catalogues, model specs, and
spec + values -> physics objects.
"""
