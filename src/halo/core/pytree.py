"""Immutable parameter containers that JAX can trace (jit, grad, vmap).

Every physical component (light profile, dark profile, anisotropy, mass model) is a frozen
dataclass registered as a JAX pytree: array-valued fields are leaves, fields declared with
``static()`` are compile-time metadata (e.g. a flag or a quadrature order).
"""

import dataclasses

import jax

__all__ = ["pytree", "static"]


def static(default=dataclasses.MISSING):
    """A dataclass field that is static metadata (not traced)."""
    if default is dataclasses.MISSING:
        return dataclasses.field(metadata={"static": True})
    return dataclasses.field(default=default, metadata={"static": True})


def pytree(cls):
    """Decorator: frozen dataclass + JAX pytree registration.

    Fields whose metadata has ``static=True`` become pytree metadata; all others are leaves.
    """
    cls = dataclasses.dataclass(frozen=True)(cls)
    fields = dataclasses.fields(cls)
    data = [f.name for f in fields if not f.metadata.get("static", False)]
    meta = [f.name for f in fields if f.metadata.get("static", False)]
    return jax.tree_util.register_dataclass(cls, data_fields=data, meta_fields=meta)
