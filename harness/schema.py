"""The results format in one place: columns, status words, schema version and manifest.

Every module that writes or reads a results row, a store or a ``manifest.json`` takes
its names from here (asv's ``Results`` owns its file format and ``api_version`` the same
way): the store creates its tables from :data:`COLUMNS`, cell work records the status
words, statistics and reporting filter on them.

Schema versions of the results store (``meta.schema_version``; every row's
``schema_version`` column holds the version that wrote it):

1. the ``cells`` table only.
2. the ``grid`` table (cell id, path and identity of the config last run) and the
   ``superseded`` table (rows of cells no longer in the grid, :data:`SET_ASIDE_EXTRA`).
3. the ``uses_target`` and ``leaky`` columns (the encoder class's declarations; rows of
   older stores hold NULL and readers drop the columns, see :data:`BOOL_COLUMNS`).
4. the tuning columns ``regime``, ``tuned_params`` and ``tune_s`` (every older row ran
   with fixed hyperparameters: :data:`FILLED_ON_UPGRADE`).

Each step is additive: a writer opening an older store adds the missing tables and
columns in place (new columns hold the value of :data:`FILLED_ON_UPGRADE`, or NULL) and
records the current version; a reader opens it unchanged and fills the same defaults in
memory. Versions outside :data:`READABLE_VERSIONS` are refused. A layout change that fills
old rows without changing any number keeps :data:`IDENTITY_SCHEMA` (so finished cells are
not recomputed); one that changes numbers bumps it.

Versions of ``manifest.json`` (its ``manifest_version`` key; :class:`Manifest` reads them all):

1. no ``manifest_version`` key; the protocol keys under their earlier names ``primary``,
   ``primary_regression`` and ``cardinality_bands`` (the committed samples).
2. ``manifest_version``; the protocol keys ``classification_metric``, ``regression_metric``
   and ``medium_levels`` (:data:`RENAMED_PROTOCOL_KEYS`). A manifest may lack any section
   (grouping, scaling and missing-value records came later): readers say nothing of what
   it does not record rather than guess.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field, replace

from harness.errors import StoreError
from harness.metrics import METRICS
from harness.tuning import DEFAULT_REGIME, Tuning

__all__ = [
    "SCHEMA_VERSION",
    "IDENTITY_SCHEMA",
    "READABLE_VERSIONS",
    "COLUMNS",
    "NAMES",
    "BOOL_COLUMNS",
    "FILLED_ON_UPGRADE",
    "SET_ASIDE_EXTRA",
    "OK",
    "FAILED",
    "TIMEOUT",
    "OUT_OF_MEMORY",
    "SKIPPED",
    "NOT_APPLICABLE",
    "STATUSES",
    "RETRY_STATUSES",
    "NOT_RUN",
    "TEMPLATED_STATUSES",
    "MANIFEST_VERSION",
    "RENAMED_PROTOCOL_KEYS",
    "Manifest",
    "DatasetRecord",
    "ProtocolRecord",
    "protocol_value",
]

# ----------------------------------------------------------------------------- versions
SCHEMA_VERSION = 4
#: the schema version cell identities were computed under (``grid._shared_parts``); the
#: tuning columns of version 4 are filled with ``defaults`` for every older row, so it stays 3
IDENTITY_SCHEMA = 3
#: versions this harness opens; older ones are upgraded in place by a writer
READABLE_VERSIONS = (1, 2, 3, SCHEMA_VERSION)

# -------------------------------------------------------------------------- status words
OK = "ok"
FAILED = "failed"  # the cell's own error (an exception of the encoder or the model)
TIMEOUT = "timeout"  # past its time limit (execution.cell_timeout_s or the watchdog)
OUT_OF_MEMORY = "out-of-memory"  # past execution.cell_memory_mb
SKIPPED = "skipped"  # more training rows than models.<label>.skip_above_rows
NOT_APPLICABLE = "not-applicable"  # the model family cannot take the encoder's output
STATUSES = (OK, FAILED, TIMEOUT, OUT_OF_MEMORY, SKIPPED, NOT_APPLICABLE)
#: a cell that ran and broke: `levelfold run --retry-failed` computes these again
RETRY_STATUSES = (FAILED, TIMEOUT, OUT_OF_MEMORY)
#: every status of a cell that produced no score
NOT_RUN = tuple(s for s in STATUSES if s != OK)
#: statuses whose error text is a harness template (sizes, limits, family names), never data
TEMPLATED_STATUSES = (SKIPPED, NOT_APPLICABLE, TIMEOUT)

# ------------------------------------------------------------------------------- columns
#: (column, SQL type) of a results row; order is the export order
COLUMNS = [
    ("cell_id", "TEXT PRIMARY KEY"),
    ("schema_version", "INTEGER"),
    ("config_hash", "TEXT"),
    ("dataset", "TEXT"),
    ("encoder", "TEXT"),
    ("model", "TEXT"),
    ("repeat", "INTEGER"),
    ("fold", "INTEGER"),
    ("regime", "TEXT"),
    ("status", "TEXT"),
    ("error", "TEXT"),
    ("task", "TEXT"),
    ("encoder_kind", "TEXT"),
    ("encoder_params", "TEXT"),
    ("uses_target", "INTEGER"),
    ("leaky", "INTEGER"),
    ("model_family", "TEXT"),
    ("model_params", "TEXT"),
    ("tuned_params", "TEXT"),
    ("primary_metric", "TEXT"),
    *[(m, "REAL") for m in METRICS],
    *[(f"train_{m}", "REAL") for m in METRICS],
    ("encoder_fit_s", "REAL"),
    ("encoder_transform_s", "REAL"),
    ("model_fit_s", "REAL"),
    ("predict_s", "REAL"),
    ("score_s", "REAL"),
    ("tune_s", "REAL"),
    ("n_features_in", "INTEGER"),
    ("n_features_out", "INTEGER"),
    ("encoded_mb", "REAL"),
    ("peak_rss_mb", "REAL"),
    ("n_train", "INTEGER"),
    ("n_test", "INTEGER"),
    ("max_cardinality", "INTEGER"),
    ("finished_at", "TEXT"),
]
NAMES = [c for c, _ in COLUMNS]
#: INTEGER columns that hold a boolean (SQLite has no boolean type); read back as bool
BOOL_COLUMNS = ("uses_target", "leaky")
#: what a row written before a column existed holds in it (version 4: every older cell ran
#: with fixed hyperparameters)
FILLED_ON_UPGRADE = {"regime": DEFAULT_REGIME, "tuned_params": "{}", "tune_s": 0.0}
#: the ``superseded`` table's columns after those of ``cells``
SET_ASIDE_EXTRA = [("superseded_at", "TEXT"), ("reason", "TEXT")]

# ------------------------------------------------------------------------------ manifest
MANIFEST_VERSION = 2
#: protocol keys renamed since earlier runs wrote their manifest (new -> old): the
#: committed samples and older runs hold the old names, so readers take the new one first
RENAMED_PROTOCOL_KEYS = {
    "classification_metric": "primary",
    "regression_metric": "primary_regression",
    "medium_levels": "cardinality_bands",
}


def _table(value) -> dict:
    """A JSON object of the manifest as a dict (a missing or malformed one as empty)."""
    return dict(value) if isinstance(value, Mapping) else {}


@dataclass(frozen=True)
class DatasetRecord:
    """One dataset as the run loaded it (``manifest.json``'s ``datasets`` entry).

    ``grouping_recorded`` is False for a manifest written before grouping was recorded:
    its ``group`` then says nothing.
    """

    source: str = ""
    task: str = ""
    private: bool = False
    notes: tuple[str, ...] = ()
    categorical: tuple[str, ...] = ()
    numeric: tuple[str, ...] = ()
    fingerprint: dict = field(default_factory=dict)
    group: str | None = None
    grouping_recorded: bool = False
    duplicate_test_share: float = 0.0
    clustered: bool = False

    @classmethod
    def from_dict(cls, raw) -> DatasetRecord:
        raw = _table(raw)
        return cls(
            source=str(raw.get("source") or ""),
            task=str(raw.get("task") or ""),
            private=bool(raw.get("private")),
            notes=tuple(raw.get("notes") or ()),
            categorical=tuple(raw.get("categorical") or ()),
            numeric=tuple(raw.get("numeric") or ()),
            fingerprint=_table(raw.get("fingerprint")),
            group=raw.get("group") or None,
            grouping_recorded="group" in raw,
            duplicate_test_share=float(raw.get("duplicate_test_share") or 0.0),
            clustered=bool(raw.get("clustered")),
        )

    @property
    def rows(self) -> int | None:
        """Rows of the loaded table (None when not recorded)."""
        return self.fingerprint.get("rows")

    @property
    def max_cardinality(self) -> int | None:
        """Levels of its categorical column with the most levels (None when not recorded)."""
        return self.fingerprint.get("max_cardinality")

    @property
    def cardinality(self) -> dict:
        """``{categorical column: levels}``."""
        return _table(self.fingerprint.get("cardinality"))


@dataclass(frozen=True)
class ProtocolRecord:
    """The ``[protocol]`` a run used; None where the manifest does not record a setting."""

    folds: int | None = None
    repeats: int = 1
    stratify: bool = True
    group: str | None = None
    metrics: tuple[str, ...] = ()
    classification_metric: str = "roc_auc"
    regression_metric: str = "rmse"
    medium_levels: tuple[int, int] = (10, 100)  # first and last level count of "medium", inclusive

    @classmethod
    def from_dict(cls, raw) -> ProtocolRecord:
        """Read a protocol table under the current key names, else their earlier ones."""
        raw = _table(raw)
        got = {
            key: protocol_value(raw, key)
            for key in ("folds", "repeats", "stratify", "group", "metrics", *RENAMED_PROTOCOL_KEYS)
        }
        got = {k: v for k, v in got.items() if v is not None}
        if "metrics" in got:
            got["metrics"] = tuple(got["metrics"])
        if "medium_levels" in got:
            got["medium_levels"] = tuple(int(n) for n in got["medium_levels"])
        return cls(**got)


def protocol_value(protocol: Mapping, key: str, default=None):
    """A protocol setting under its current name, else its earlier one (``default`` if neither)."""
    for name in (key, RENAMED_PROTOCOL_KEYS.get(key)):
        if name is not None and protocol.get(name) is not None:
            return protocol[name]
    return default


@dataclass(frozen=True)
class Manifest:
    """``manifest.json``: what a run was (config, datasets, settings, software, machine).

    Written by ``runner._write_manifest`` (with ``manifest_version``), read by the report
    through :meth:`from_dict`, which takes every earlier version (see this module's
    docstring). Datasets are keyed by config label until the report renames private ones
    (:meth:`with_dataset_names`).
    """

    version: int = MANIFEST_VERSION
    experiment: str = ""
    description: str = ""
    config_path: str | None = None
    config_hash: str | None = None
    seed: int | None = None
    started: str | None = None
    finished: str | None = None
    interrupted: bool = False
    status_counts: dict = field(default_factory=dict)
    packages: dict = field(default_factory=dict)  # distribution -> version (None: not installed)
    machine: dict = field(default_factory=dict)
    datasets: dict = field(default_factory=dict)  # label -> DatasetRecord
    missing_values: dict = field(default_factory=dict)  # encoder label -> how it treats a missing value
    scaling_policy: str = ""
    scaled_models: tuple[str, ...] = ()
    encoders: dict = field(default_factory=dict)  # label -> {"kind": ..., parameters}
    models: dict = field(default_factory=dict)  # label -> {"family": ..., parameters}
    protocol: ProtocolRecord = field(default_factory=ProtocolRecord)
    config: dict = field(default_factory=dict, repr=False)  # the config as run (paths cut)

    @classmethod
    def from_dict(cls, raw) -> Manifest:
        """Read a manifest of any version this harness knows.

        Raises
        ------
        StoreError
            Not a JSON object, or a version newer than :data:`MANIFEST_VERSION`.
        """
        if not isinstance(raw, Mapping):
            raise StoreError(
                f"not a JSON object (got {type(raw).__name__}); rerun `levelfold run` with "
                "the same config to rewrite it."
            )
        version = raw.get("manifest_version", 1)
        if not isinstance(version, int) or not 1 <= version <= MANIFEST_VERSION:
            raise StoreError(
                f"manifest version {version!r}, which this harness does not read (1 to "
                f"{MANIFEST_VERSION}); report it with the harness version that wrote it, or "
                "rerun `levelfold run` with the same config to rewrite it."
            )
        config = _table(raw.get("config"))
        scaling = _table(raw.get("scaling"))
        protocol = raw.get("protocol") or config.get("protocol")
        return cls(
            version=version,
            experiment=str(raw.get("experiment") or ""),
            description=str(raw.get("description") or ""),
            config_path=raw.get("config_path"),
            config_hash=raw.get("config_hash"),
            seed=raw.get("seed"),
            started=raw.get("started"),
            finished=raw.get("finished"),
            interrupted=bool(raw.get("interrupted")),
            status_counts=_table(raw.get("status_counts")),
            packages=_table(raw.get("packages")),
            machine=_table(raw.get("machine")),
            datasets={str(k): DatasetRecord.from_dict(v) for k, v in _table(raw.get("datasets")).items()},
            missing_values=_table(raw.get("missing_values")),
            scaling_policy=str(scaling.get("policy") or ""),
            scaled_models=tuple(scaling.get("scaled_models") or ()),
            encoders={k: _table(v) for k, v in _table(raw.get("encoders")).items()},
            models={k: _table(v) for k, v in _table(raw.get("models")).items()},
            protocol=ProtocolRecord.from_dict(protocol),
            config=config,
        )

    @classmethod
    def coerce(cls, manifest) -> Manifest:
        """``manifest`` itself, or the :class:`Manifest` of a dict (as :meth:`from_dict`)."""
        return manifest if isinstance(manifest, Manifest) else cls.from_dict(manifest or {})

    # --- what readers need ------------------------------------------------------------
    @property
    def cpus(self) -> int | None:
        return self.machine.get("cpus")

    @property
    def decision(self) -> dict:
        """The config's ``[decision]`` table (empty: the rule's defaults)."""
        return _table(self.config.get("decision"))

    @property
    def tuning(self) -> Tuning:
        """The config's ``[tuning]`` settings (their defaults where not recorded: ``defaults`` alone)."""
        raw = _table(self.config.get("tuning"))
        known = {"regimes", "budget", "inner_folds", "method", "seed"}
        got = {k: v for k, v in raw.items() if k in known and v is not None}
        if "regimes" in got:
            got["regimes"] = tuple(got["regimes"]) or (DEFAULT_REGIME,)
        return Tuning(**got)

    @property
    def regimes(self) -> tuple[str, ...]:
        """The tuning regimes the config listed (``defaults`` alone without tuning)."""
        return self.tuning.regimes

    def search_spaces(self, kind: str) -> dict:
        """``{label: search table}`` of the config's ``models`` or ``encoders`` that have one."""
        return {
            label: body["search"]
            for label, body in _table(self.config.get(kind)).items()
            if isinstance(body, Mapping) and isinstance(body.get("search"), Mapping)
        }

    @property
    def aliases(self) -> dict:
        """Config label -> report name (the dataset's ``alias`` when it sets one)."""
        raw = _table(self.config.get("datasets"))
        return {label: _table(raw.get(label)).get("alias") or label for label in self.datasets}

    @property
    def private_datasets(self) -> tuple[str, ...]:
        """Labels of the datasets marked private (a user's file)."""
        return tuple(label for label, d in self.datasets.items() if d.private)

    @property
    def grouping_recorded(self) -> bool:
        """Whether every dataset records its grouping (False for older manifests)."""
        return bool(self.datasets) and all(d.grouping_recorded for d in self.datasets.values())

    def model_family(self, label: str) -> str | None:
        return self.models.get(label, {}).get("family")

    def with_dataset_names(self, names: Mapping) -> Manifest:
        """The manifest with its datasets keyed by ``names[label]`` (private ones by alias)."""
        return replace(self, datasets={names.get(k, k): v for k, v in self.datasets.items()})
