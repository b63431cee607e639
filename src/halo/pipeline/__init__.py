"""Stage 7, pipeline: the jobs users run (fit, predict, demo), each writing its output
folder from the earlier stages.
"""
