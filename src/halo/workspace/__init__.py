"""Stage 8, workspaces: catalogue versions, the run record, refit planning, status and
history.
"""
