"""harness: a config-driven benchmark of categorical encodings for tabular models."""

from harness.errors import ConfigError, DataError, HarnessError, StoreError

__version__ = "0.1.0"

__all__ = ["ConfigError", "DataError", "HarnessError", "StoreError", "__version__"]
