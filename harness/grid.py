"""Config -> the ordered list of cells (a pure function of the config and the data's checksums).

A cell is one dataset x encoder x model x repeat x fold. Cells are ordered so that all
models of one *encoding unit* (dataset, repeat, fold, encoder) are adjacent: the runner
encodes once per unit and trains every model of the unit on that one matrix.

A cell's *identity* is everything that determines its numbers: the dataset's source
settings and content checksum, the encoder's and the model's resolved parameters
(defaults filled in), the protocol, the seed, the position (repeat, fold) and the version
of the code that computes it. ``cell_id`` is the digest of the identity, so a changed
setting, a replaced data file or a new harness version gives new cells, and the store
sets the old rows aside (``store.Store.bind_grid``).
"""

from __future__ import annotations

import fnmatch
import json
from dataclasses import dataclass, field

from harness import encoders as _encoders
from harness import models as _models
from harness.config import Config, DatasetSpec, EncoderSpec, ModelSpec, digest
from harness.schema import IDENTITY_SCHEMA, SCHEMA_VERSION  # SCHEMA_VERSION stays importable from here
from harness.tuning import DEFAULT_REGIME

__all__ = ["SCHEMA_VERSION", "CODE_VERSION", "Cell", "build_grid", "select", "units", "changed_parts", "regimes_of"]

# Bump when a change to the code alters the numbers a cell records (an encoder's
# arithmetic, a model default, the scaling policy, the metrics): every cell then gets a
# new identity and is recomputed, and rows of the old code are set aside.
CODE_VERSION = 2


@dataclass(frozen=True)
class Cell:
    dataset: str
    encoder: EncoderSpec
    model: ModelSpec
    repeat: int
    fold: int
    cell_id: str
    identity: dict = field(default_factory=dict, compare=False, hash=False)
    regime: str = DEFAULT_REGIME  # tuning regime (harness.tuning.REGIMES)

    @property
    def unit(self) -> tuple:
        return (self.dataset, self.repeat, self.fold, self.encoder.label, self.regime)

    @property
    def path(self) -> str:
        tuned = "" if self.regime == DEFAULT_REGIME else f"{self.regime}/"
        return f"{self.dataset}/{self.encoder.label}/{self.model.label}/{tuned}r{self.repeat}f{self.fold}"


def _shared_parts(config: Config) -> dict:
    """Identity parts common to every cell of a config (protocol, seed, code)."""
    p = config.protocol
    return {
        "code": digest([harness_version(), CODE_VERSION, IDENTITY_SCHEMA], 12),
        "seed": digest(config.seed, 12),
        # values only, in this order: renaming a protocol key keeps every cell id
        "protocol": digest(
            [p.folds, p.repeats, p.stratify, p.group, sorted(p.metrics), p.classification_metric, p.regression_metric],
            12,
        ),
    }


#: dataset keys renamed since cell identities were first computed: new name -> the name the
#: identity digests, so that a renamed key keeps every finished cell (``sample_rows`` was
#: ``max_rows``)
IDENTITY_KEYS = {"sample_rows": "max_rows"}


def _dataset_part(dataset: DatasetSpec, checksum) -> str:
    params = {IDENTITY_KEYS.get(k, k): v for k, v in dataset.params.items()}
    return digest([dataset.label, dataset.source, params, checksum], 12)


def _encoder_part(encoder: EncoderSpec) -> str:
    return digest([encoder.label, encoder.kind, resolved_encoder_params(encoder)], 12)


def _model_part(model: ModelSpec) -> str:
    resolved = _models.resolved_params(model.family, model.params)
    return digest([model.label, model.family, resolved, model.skip_above_rows], 12)


def _regime_part(config: Config, regime: str, encoder: EncoderSpec, model: ModelSpec) -> str:
    """Identity of a tuned regime: the search settings and the spaces searched."""
    spaces = [model.search, encoder.search if regime == "tuned-both" else ()]
    return digest([regime, config.tuning.identity(), repr(spaces)], 12)


def regimes_of(config: Config, model: ModelSpec) -> list[str]:
    """The regimes a model runs under: ``defaults`` if listed, tuned ones if it has a search space."""
    return [r for r in config.tuning.regimes if r == DEFAULT_REGIME or model.search]


def cell_hash(identity: dict, repeat: int, fold: int) -> str:
    """Content hash of a cell: its identity parts and its position."""
    return digest({**identity, "repeat": repeat, "fold": fold}, 24)


def changed_parts(old: dict, new: dict) -> list[str]:
    """Names of the identity parts that differ between two cells at the same position."""
    return [k for k in sorted(set(old) | set(new)) if old.get(k) != new.get(k)]


def harness_version() -> str:
    import harness

    return harness.__version__


def resolved_encoder_params(encoder: EncoderSpec) -> dict:
    """Every parameter of the encoder as built, config values and defaults alike."""
    params = _encoders.build(encoder.kind, **encoder.params).get_params(deep=False)
    return json.loads(json.dumps(params, sort_keys=True, default=repr))


def build_grid(
    config: Config, layout: dict[str, tuple[int, int]] | None = None, checksums: dict | None = None
) -> list[Cell]:
    """All cells of ``config`` in unit order.

    Parameters
    ----------
    config : Config
    layout : dict, optional
        ``{dataset label: (repeats, folds)}`` for datasets that bring their own splits
        (OpenML tasks); others use the protocol's repeats and folds.
    checksums : dict, optional
        ``{dataset label: content checksum}`` of the loaded data (``Dataset.fingerprint``);
        the runner always passes them, so replacing a file under the same label gives
        new cells. Without them (grid arithmetic in tests) the checksum part is empty.
    """
    layout = layout or {}
    checksums = checksums or {}
    shared = _shared_parts(config)
    enc_parts = {e.label: _encoder_part(e) for e in config.encoders}
    model_parts = {m.label: _model_part(m) for m in config.models}
    cells = []
    for ds in config.datasets:
        repeats, folds = layout.get(ds.label, (config.protocol.repeats, config.protocol.folds))
        data_part = _dataset_part(ds, checksums.get(ds.label))
        parts = {}
        for e in config.encoders:
            for m in config.models:
                base = {**shared, "dataset": data_part, "encoder": enc_parts[e.label], "model": model_parts[m.label]}
                for regime in regimes_of(config, m):  # a defaults cell's identity is as before tuning existed
                    tuned = {} if regime == DEFAULT_REGIME else {"regime": _regime_part(config, regime, e, m)}
                    parts[(e.label, m.label, regime)] = {**base, **tuned}
        for repeat in range(repeats):
            for fold in range(folds):
                for enc in config.encoders:
                    for regime in config.tuning.regimes:
                        for model in config.models:
                            identity = parts.get((enc.label, model.label, regime))
                            if identity is None:
                                continue
                            cid = cell_hash(identity, repeat, fold)
                            cells.append(Cell(ds.label, enc, model, repeat, fold, cid, identity, regime))
    return cells


def select(cells: list[Cell], pattern: str | None) -> list[Cell]:
    """Cells whose dataset, encoder or model label, or whose path, matches a shell pattern."""
    if not pattern:
        return list(cells)
    return [
        c
        for c in cells
        if any(fnmatch.fnmatchcase(s, pattern) for s in (c.dataset, c.encoder.label, c.model.label, c.regime, c.path))
    ]


def units(cells: list[Cell]) -> list[list[Cell]]:
    """Group cells into encoding units, keeping grid order."""
    groups: dict[tuple, list[Cell]] = {}
    for cell in cells:
        groups.setdefault(cell.unit, []).append(cell)
    return list(groups.values())
