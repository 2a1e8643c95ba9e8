"""Figures, tables and the report writer. They only read the results store.

``write_report(dir, compare=None)`` writes ``dir/report/`` (see ``report.py``);
``figures`` and ``tables`` hold the pure functions it uses, for notebooks.
"""

from harness.reporting import figures, tables
from harness.reporting.report import Analysis, Run, analyse, load_run, write_report

__all__ = ["write_report", "load_run", "analyse", "Run", "Analysis", "figures", "tables"]
