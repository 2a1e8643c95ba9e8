"""The encoder registry: one explicit dict from config kind to class.

``build(kind, **params)`` returns an unfitted encoder; ``KINDS`` lists the kinds.
"""

from __future__ import annotations

from harness.encoders._frequency import FrequencyCodes
from harness.encoders._hashing import HashedCodes
from harness.encoders._integer import IntegerCodes
from harness.encoders._onehot import OneHotCodes
from harness.encoders._passthrough import DropColumns, NativeCategories
from harness.encoders._target import TargetStatistics
from harness.errors import ConfigError, closest

ENCODERS = {
    "integer": IntegerCodes,
    "onehot": OneHotCodes,
    "hashing": HashedCodes,
    "frequency": FrequencyCodes,
    "target": TargetStatistics,
    "drop": DropColumns,
    "native": NativeCategories,
}

KINDS = tuple(sorted(ENCODERS))

__all__ = [
    "ENCODERS",
    "KINDS",
    "build",
    "params_of",
    "DropColumns",
    "FrequencyCodes",
    "HashedCodes",
    "IntegerCodes",
    "NativeCategories",
    "OneHotCodes",
    "TargetStatistics",
]


def params_of(kind: str) -> tuple[str, ...]:
    """Names of the parameters an encoder kind accepts."""
    return tuple(sorted(_cls(kind)().get_params(deep=False)))


def build(kind: str, **params):
    """Return an unfitted encoder of ``kind`` with ``params``.

    Raises
    ------
    ConfigError
        If ``kind`` is unknown or a parameter does not belong to it.
    """
    cls = _cls(kind)
    allowed = params_of(kind)
    for name in params:
        if name not in allowed:
            raise ConfigError(
                f"encoder kind '{kind}' has no parameter '{name}'; allowed: "
                f"{', '.join(allowed) or '(none)'}.{closest(name, allowed)}"
            )
    return cls(**params)


def _cls(kind: str):
    try:
        return ENCODERS[kind]
    except KeyError:
        raise ConfigError(
            f"unknown encoder kind '{kind}'; allowed: {', '.join(KINDS)}.{closest(kind, KINDS)}"
        ) from None
