"""halo: spherical Jeans modelling of faint Milky Way satellites.

Importing ``halo`` switches JAX to float64 (the physics needs it) and keeps every library cache
out of the user's home folder.
"""

import jax as _jax

_jax.config.update("jax_enable_x64", True)

__version__ = "0.1.0"
