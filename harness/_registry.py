"""Run-time additions to the three name registries: encoder kinds, dataset sources, model families.

Each registry is a plain dict whose shipped entries are listed in a ``BUILTIN_*`` tuple. The
hooks (``encoders.register``, ``datasets.register_source``, ``models.register_family``) check
their own value and call :func:`add`; the matching removals call :func:`remove`, which refuses
to remove a shipped entry.
"""

from __future__ import annotations

from harness.errors import ConfigError

__all__ = ["add", "remove"]


def add(registry: dict, name, value, what: str) -> None:
    """Put ``value`` into ``registry`` under ``name``, a Python identifier not taken yet.

    ``what`` names the registry in messages ("encoder kind", "dataset source", ...).
    """
    if not (isinstance(name, str) and name.isidentifier()):
        raise ConfigError(f"{what} {name!r} must be a Python identifier; pick another name.")
    if name in registry:
        raise ConfigError(f"{what} '{name}' is already registered; pick another name, or unregister it first.")
    registry[name] = value


def remove(registry: dict, builtin, name, what: str, hook: str) -> None:
    """Delete ``name`` from ``registry`` if ``hook`` added it (it is not in ``builtin``)."""
    added = sorted(set(registry) - set(builtin))
    if name not in added:
        shipped = " ships with the package" if name in builtin else " is not registered"
        raise ConfigError(
            f"{what} '{name}'{shipped}; only entries added by {hook}() can be removed: {', '.join(added) or '(none)'}."
        )
    del registry[name]
