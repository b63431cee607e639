"""Satellite workspaces: catalogue versions, runs and their history, safe against crashes.

The work is done by one module per job; the names stay importable from here for now:

- :mod:`halo.workspace.record`: the SQLite record, the object folder and the lock
- :mod:`halo.workspace.create`: a new workspace, satellite and model spec versions
- :mod:`halo.workspace.catalogues`: catalogue versions (content-addressed) and ``halo add``
- :mod:`halo.workspace.planning`: what the next refit would do
- :mod:`halo.workspace.refit`: ``halo refit``
- :mod:`halo.workspace.views`: status, history and the history figure
"""

from halo.workspace.catalogues import add_catalogue  # moved
from halo.workspace.create import init_workspace, set_models, set_satellite  # moved
from halo.workspace.record import DB_NAME, Workspace, open_workspace  # moved
from halo.workspace.refit import last_settings, refit  # moved
from halo.workspace.views import history, history_figure, latest_run_folder, status  # moved

__all__ = [
    "init_workspace",
    "add_catalogue",
    "refit",
    "status",
    "history",
    "Workspace",
    "DB_NAME",
    "open_workspace",
    "set_models",
    "set_satellite",
    "last_settings",
    "history_figure",
    "latest_run_folder",
]
