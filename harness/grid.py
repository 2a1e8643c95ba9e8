"""Config -> the ordered list of cells (a pure function).

A cell is one dataset x encoder x model x repeat x fold. Cells are ordered so that all
models of one *encoding unit* (dataset, repeat, fold, encoder) are adjacent: the runner
encodes once per unit and trains every model of the unit on that one matrix.
"""

from __future__ import annotations

import fnmatch
from dataclasses import dataclass

from harness.config import Config, DatasetSpec, EncoderSpec, ModelSpec, digest

__all__ = ["SCHEMA_VERSION", "Cell", "build_grid", "select", "units"]

SCHEMA_VERSION = 2  # 2: uses_target and leaky columns (encoder declarations)


@dataclass(frozen=True)
class Cell:
    dataset: str
    encoder: EncoderSpec
    model: ModelSpec
    repeat: int
    fold: int
    cell_id: str

    @property
    def unit(self) -> tuple:
        return (self.dataset, self.repeat, self.fold, self.encoder.label)

    @property
    def path(self) -> str:
        return f"{self.dataset}/{self.encoder.label}/{self.model.label}/r{self.repeat}f{self.fold}"


def cell_hash(config: Config, dataset: DatasetSpec, encoder: EncoderSpec, model: ModelSpec, repeat: int, fold: int) -> str:
    """Content hash of everything that determines a cell's numbers (not execution settings)."""
    p = config.protocol
    payload = {
        "schema": SCHEMA_VERSION,
        "seed": config.seed,
        "protocol": [p.folds, p.repeats, p.stratify, p.group, sorted(p.metrics), p.primary, p.primary_regression],
        "dataset": [dataset.label, dataset.source, dataset.params],
        "encoder": [encoder.label, encoder.kind, encoder.params],
        "model": [model.label, model.family, model.params, model.max_rows],
        "repeat": repeat,
        "fold": fold,
    }
    return digest(payload, 24)


def build_grid(config: Config, layout: dict[str, tuple[int, int]] | None = None) -> list[Cell]:
    """All cells of ``config`` in unit order.

    Parameters
    ----------
    config : Config
    layout : dict, optional
        ``{dataset label: (repeats, folds)}`` for datasets that bring their own splits
        (OpenML tasks); others use the protocol's repeats and folds.
    """
    layout = layout or {}
    cells = []
    for ds in config.datasets:
        repeats, folds = layout.get(ds.label, (config.protocol.repeats, config.protocol.folds))
        for repeat in range(repeats):
            for fold in range(folds):
                for enc in config.encoders:
                    for model in config.models:
                        cid = cell_hash(config, ds, enc, model, repeat, fold)
                        cells.append(Cell(ds.label, enc, model, repeat, fold, cid))
    return cells


def select(cells: list[Cell], pattern: str | None) -> list[Cell]:
    """Cells whose dataset, encoder or model label, or whose path, matches a shell pattern."""
    if not pattern:
        return list(cells)
    return [
        c
        for c in cells
        if any(fnmatch.fnmatchcase(s, pattern) for s in (c.dataset, c.encoder.label, c.model.label, c.path))
    ]


def units(cells: list[Cell]) -> list[list[Cell]]:
    """Group cells into encoding units, keeping grid order."""
    groups: dict[tuple, list[Cell]] = {}
    for cell in cells:
        groups.setdefault(cell.unit, []).append(cell)
    return list(groups.values())
