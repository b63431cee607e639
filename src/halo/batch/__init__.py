"""Stage 9, batches: many fits at once on a Dask distributed cluster (the manifest, the
runner, the batch tables).
"""
