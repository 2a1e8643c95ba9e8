"""Value rules and limits of the config: one table of rules per section, one checker.

Each rule is ``(checker, description of the allowed values)``; :data:`RULES` maps every
key of a fixed section to its rule and default, :func:`fill` applies them, and every
message names the file, the key path, the allowed values and the value received. Keys
renamed since earlier versions (:data:`RENAMED`) are refused with their new name.
"""

from __future__ import annotations

import math
import os
import re

from harness.errors import ConfigError, closest
from harness.metrics import CLASSIFICATION_METRICS, METRICS, REGRESSION_METRICS
from harness.tuning import DEFAULT_REGIME, MAX_BUDGET, MAX_INNER_FOLDS, METHODS, REGIMES

BACKENDS = ("local", "dask")
# Sane limits on numeric keys: beyond them a run never answers or exhausts the machine.
MAX_FOLDS = 100
MAX_REPEATS = 100
MAX_RETRIES = 10
MAX_TIMEOUT_S = 7 * 24 * 3600  # one week per cell
MAX_MEMORY_MB = 4 * 1024 * 1024  # 4 TiB per cell
JOBS_PER_CORE = 4  # workers beyond this many per core only compete for the cores
DEFAULT_MAX_CELLS = 50_000  # grid size above which a run must be asked for explicitly
NAME_MAX = 100
SEED_MAX = 2**32 - 1


# --------------------------------------------------------------------------- rules
# key -> (checker, description of allowed values, default)
def int_at_least(lo, hi=None):
    def ok(v):
        return isinstance(v, int) and not isinstance(v, bool) and v >= lo and (hi is None or v <= hi)

    return ok, f"an integer >= {lo}" + ("" if hi is None else f" and <= {hi:,}")


def number_at_least(lo, hi=None):
    def ok(v):
        return (
            isinstance(v, (int, float))
            and not isinstance(v, bool)
            and math.isfinite(v)
            and v >= lo
            and (hi is None or v <= hi)
        )

    return ok, f"a finite number >= {lo}" + ("" if hi is None else f" and <= {hi:,}")


_STR = (lambda v: isinstance(v, str) and v != "", "a non-empty string")


def _plain_name(v) -> bool:
    """A name that is safe as one directory level and readable in a report."""
    return (
        isinstance(v, str)
        and 0 < len(v) <= NAME_MAX
        and v == v.strip()
        and v.isprintable()
        and not any(sep in v for sep in "/\\")
        and not v.startswith(".")
    )


_NAME = (
    _plain_name,
    f"a plain name of 1 to {NAME_MAX} printable characters, without '/', '\\', a leading '.' or "
    "surrounding spaces (it names the directory results/<name>/)",
)
# a Dask address: tcp://host:port (or tls://, ws://, ...), or host:port
_ADDRESS_RE = re.compile(r"^([a-z]+://)?[A-Za-z0-9_.\-\[\]:]+:\d{1,5}$")
_ADDRESS = (
    lambda v: isinstance(v, str) and bool(_ADDRESS_RE.match(v)),
    "a Dask scheduler address such as tcp://10.0.0.5:8786",
)
_BOOL = (lambda v: isinstance(v, bool), "true or false")


def _one_of(choices):
    return (lambda v: v in choices, "one of " + ", ".join(f"'{c}'" for c in choices))


def _list_of(choices):
    ok = lambda v: isinstance(v, list) and v and all(x in choices for x in v)  # noqa: E731
    return ok, "a non-empty list drawn from " + ", ".join(choices)


_MEDIUM_LEVELS = (
    lambda v: isinstance(v, list) and len(v) == 2 and all(isinstance(x, int) for x in v) and 1 < v[0] < v[1],
    "two increasing integers [first, last], the first >= 2, e.g. [10, 100]: a dataset whose "
    "categorical column with the most levels has first to last levels (inclusive) is medium, "
    "fewer is low, more is high",
)


_regimes = (
    lambda v: isinstance(v, list) and 0 < len(v) == len(set(v)) and set(v) <= set(REGIMES),
    f"a non-empty list of distinct regimes from {', '.join(REGIMES)}",
)


def _number_between(lo, hi):
    ok = lambda v: isinstance(v, (int, float)) and not isinstance(v, bool) and lo < v < hi  # noqa: E731
    return ok, f"a number strictly between {lo} and {hi}"


SECTIONS = ("experiment", "protocol", "datasets", "encoders", "models", "execution", "decision", "tuning")


RULES = {
    "experiment": {
        "name": (_NAME, None),
        "seed": (int_at_least(0, 2**32 - 1), 0),
        "description": ((lambda v: isinstance(v, str), "a string"), ""),
        "output": (_STR, None),
    },
    "protocol": {
        "folds": (int_at_least(2, MAX_FOLDS), 5),
        "repeats": (int_at_least(1, MAX_REPEATS), 1),
        "stratify": (_BOOL, True),
        "group": (_STR, None),
        "metrics": (_list_of(METRICS), list(METRICS)),
        "classification_metric": (_one_of(CLASSIFICATION_METRICS), "roc_auc"),
        "regression_metric": (_one_of(REGRESSION_METRICS), "rmse"),
        "medium_levels": (_MEDIUM_LEVELS, [10, 100]),
    },
    "execution": {
        "jobs": (int_at_least(1), 1),
        "backend": (_one_of(BACKENDS), "local"),
        "scheduler": (_ADDRESS, None),
        "cell_timeout_s": (number_at_least(1, MAX_TIMEOUT_S), 900.0),
        "cell_memory_mb": (int_at_least(0, MAX_MEMORY_MB), 0),
        "retries": (int_at_least(0, MAX_RETRIES), 1),
        "max_cells": (int_at_least(1), DEFAULT_MAX_CELLS),
    },
    # the decision rule (harness.stats.DecisionRule); read by the report, not by the runner
    "decision": {
        "reference": (_STR, None),
        "margin": (_number_between(0, 0.5), 0.01),
        "alpha": (_number_between(0, 0.5), 0.05),
        "min_saving": (_number_between(-1e-12, 1), 0.20),
        "min_saving_s": (number_at_least(0), 0.01),
    },
    # nested tuning (harness.tuning): which regimes run, and the search of a tuned cell
    "tuning": {
        "regimes": (_regimes, [DEFAULT_REGIME]),
        "budget": (int_at_least(1, MAX_BUDGET), 10),
        "inner_folds": (int_at_least(2, MAX_INNER_FOLDS), 3),
        "method": (_one_of(METHODS), "random"),
        "seed": (int_at_least(0, SEED_MAX), None),
    },
}


# ------------------------------------------------------------------------ renamed keys
#: config keys renamed since earlier versions so that each name means one thing:
#: section -> {old key: (new key, what the new key means)}
RENAMED = {
    "protocol": {
        "primary": (
            "classification_metric",
            "the metric every classification dataset is scored on; "
            "`primary` also named the results column `primary_metric` and the pooled score",
        ),
        "primary_regression": ("regression_metric", "the metric every regression dataset is scored on"),
        "cardinality_bands": (
            "medium_levels",
            "the same two numbers: a dataset whose categorical column "
            "with the most levels has first to last levels (inclusive) is medium, "
            "fewer is low, more is high",
        ),
    },
    "datasets": {"max_rows": ("sample_rows", "keep a seeded random subsample of that many rows")},
    "models": {"max_rows": ("skip_above_rows", "skip the cells whose training fold has more rows")},
}


def under_former_names(raw: dict) -> dict:
    """``raw`` with each renamed key under its former name: a rename keeps the config hash
    (and with it the output directory of a ``--data`` run)."""

    def former(table, section):
        names = {new: old for old, (new, _) in RENAMED[section].items()}
        return {names.get(k, k): v for k, v in table.items()} if isinstance(table, dict) else table

    out = dict(raw)
    if "protocol" in out:
        out["protocol"] = former(out["protocol"], "protocol")
    for section in ("datasets", "models"):
        if isinstance(out.get(section), dict):
            out[section] = {label: former(body, section) for label, body in out[section].items()}
    return out


def check_renamed(table: dict, section: str, path: str, where: str, accepted=None) -> None:
    """Refuse a key of an earlier version, naming its new key (one meaning per name).

    ``accepted`` (the keys the table may hold, when known) leaves an old key whose new key
    would not be accepted either to the unknown-key check.
    """
    for old, (new, meaning) in RENAMED.get(section, {}).items():
        if old in table and (accepted is None or new in accepted):
            raise ConfigError(
                f"`{where}.{old}` in {path} was renamed '{new}' ({meaning}); write {new} = {table[old]!r} instead."
            )


# --------------------------------------------------------------------------- checks
def check_keys(table: dict, allowed, path: str, where: str) -> None:
    for key in table:
        if key not in allowed:
            place = f"[{where}] " if where else "the top level "
            kind = "key" if where else "section"
            raise ConfigError(
                f"unknown {kind} '{key}' in {place}of {path}; allowed: {', '.join(allowed)}.{closest(key, allowed)}"
            )


def fill(table: dict, rules: dict, path: str, section: str) -> dict:
    if not isinstance(table, dict):
        raise ConfigError(f"`{section}` in {path} must be a table ([{section}]); got {table!r}.")
    check_renamed(table, section, path, section)
    check_keys(table, rules, path, section)
    out = {}
    for key, ((ok, allowed), default) in rules.items():
        if key not in table:
            out[key] = default
            continue
        value = table[key]
        if not ok(value):
            raise ConfigError(f"`{section}.{key}` in {path} must be {allowed}; got {shown_value(value)}.")
        out[key] = value
    return out


def check_finite(node, path: str, where: str) -> None:
    """TOML allows inf and nan; no key of a config means either."""
    if isinstance(node, dict):
        for key, value in node.items():
            check_finite(value, path, f"{where}.{key}" if where else str(key))
    elif isinstance(node, list):
        for value in node:
            check_finite(value, path, where)
    elif isinstance(node, float) and not math.isfinite(node):
        raise ConfigError(f"`{where}` in {path} must be a finite number; got {node!r}. Give a finite value.")


def check_jobs(jobs: int, where: str) -> None:
    """Worker processes are capped at a multiple of this machine's cores."""
    cores = os.cpu_count() or 1
    if jobs > JOBS_PER_CORE * cores:
        raise ConfigError(
            f"{where} must be at most {JOBS_PER_CORE} x the {cores} core(s) of this machine = "
            f"{JOBS_PER_CORE * cores}; got {jobs:,}. Each job is a worker process: more than that only "
            "competes for the cores. Lower it (the number of cores is a good choice)."
        )


def _n_variants(body) -> int:
    if not isinstance(body, dict):
        return 1
    return math.prod(len(v) for k, v in body.items() if isinstance(v, list) and k not in ("kind", "search"))


def check_grid_size(raw: dict, sections: dict, path: str) -> None:
    """Refuse a grid above ``execution.max_cells`` before any list is expanded."""
    prot, limit = sections["protocol"], sections["execution"]["max_cells"]
    n_enc = sum(_n_variants(b) for b in raw["encoders"].values())
    size = len(raw["datasets"]) * n_enc * len(raw["models"]) * prot["repeats"] * prot["folds"]
    if size > limit:
        raise ConfigError(
            f"{path} describes {size:,} cells ({len(raw['datasets'])} datasets x {n_enc:,} encoder "
            f"variants x {len(raw['models'])} models x {prot['repeats']} repeats x {prot['folds']} folds), "
            f"more than `execution.max_cells` = {limit:,}. Shorten the lists of encoder values, or raise "
            "`execution.max_cells` if you mean it."
        )


def shown_value(value, limit: int = 60) -> str:
    """A value as the user can see it: quoted (so spaces show), control characters escaped, cut."""
    text = repr(value)
    if len(text) <= limit:
        return text
    return f"{text[:limit]}... ({len(value) if isinstance(value, str) else len(text)} characters)"


def check_label(label, what: str, path: str) -> None:
    if not (isinstance(label, str) and label.strip() and label.isprintable() and len(label) <= NAME_MAX):
        raise ConfigError(
            f"the {what} label {shown_value(label)} in {path} must be 1 to {NAME_MAX} printable characters, not blank: "
            f"it names rows, tables and figures. Rename that [{what}s.<label>] table."
        )


def check_unique(labels, what: str, path: str) -> None:
    seen = set()
    for label in labels:
        if label in seen:
            raise ConfigError(f"duplicate {what} label '{label}' in {path}; every label must be unique.")
        seen.add(label)


def add_task_metrics(prot: dict) -> None:
    """Each task's own metric is always recorded, listed in `metrics` or not."""
    for key in ("classification_metric", "regression_metric"):
        if prot[key] not in prot["metrics"]:
            prot["metrics"] = list(prot["metrics"]) + [prot[key]]
