"""The references of the methods and encoders a run used, with BibTeX."""

from __future__ import annotations

from pathlib import Path

from harness.reporting import _bib
from harness.reporting._analysis import Analysis
from harness.reporting._html import Bullets, Code, Heading, Para

__all__ = ["references_section"]


def references_section(a: Analysis, root: Path) -> list:
    """The references of the methods and encoders in the run, with BibTeX."""
    keys = _bib.used_references(a.run.manifest.encoders)
    bib = "\n\n".join(_bib.BIB[k][1] for k in keys)
    (root / "references.bib").write_text(bib + "\n", encoding="utf-8")
    return [
        Heading("References", 2, "references"),
        Bullets(tuple(_bib.cite(k) + f" — `{k}`" for k in keys)),
        Para("BibTeX (also in references.bib):"),
        Code(bib, "bibtex"),
    ]
