"""One exception family. The CLI turns any of these into a one-paragraph message and exit code."""

from __future__ import annotations

import difflib

__all__ = [
    "HarnessError",
    "ConfigError",
    "DataError",
    "StoreError",
    "OutputError",
    "DiskFullError",
    "ClusterError",
    "EncoderInputError",
    "closest",
]


class HarnessError(Exception):
    """Base of every error the tool reports to a user (exit code 2 unless overridden)."""

    exit_code = 2


class ConfigError(HarnessError):
    """A config file or command-line option is invalid."""


class DataError(HarnessError):
    """A dataset cannot be loaded or does not fit the protocol."""


class StoreError(HarnessError):
    """The results store is unreadable, locked, or of an unknown schema."""

    exit_code = 3


class OutputError(HarnessError):
    """An output path (directory, export file, report) cannot be written."""


class DiskFullError(HarnessError):
    """No space left on the device of an output: the run stops, committed rows are kept."""

    exit_code = 4


class ClusterError(HarnessError):
    """The Dask cluster was lost (scheduler gone, or units lost more often than retries allow)."""

    exit_code = 5


class EncoderInputError(HarnessError, ValueError):
    """An encoder received input it cannot handle (e.g. an unseen category under ``unseen='error'``)."""


def closest(word: str, choices) -> str:
    """Return ``" Closest match: 'x'."`` for the closest of ``choices``, or ``""``.

    A whole sentence ending in a period, placed after the sentence that lists the allowed
    values. A caller that wraps a message (``f"{str(exc).rstrip('.')}. Fix ..."``) then reads
    "Closest match: 'x'. Fix ...", where a trailing question mark read "'x'?. Fix".
    """
    match = difflib.get_close_matches(str(word), [str(c) for c in choices], n=1, cutoff=0.6)
    return f" Closest match: '{match[0]}'." if match else ""
