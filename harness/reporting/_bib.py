"""References of the methods a run used: short citations and BibTeX entries.

``used_references(encoders)`` picks the statistics references every report relies on
plus those that the encoder settings present in the run declare on their classes
(``references`` and ``references_when``; the settings come from the manifest's
``encoders`` table: ``{label: {"kind": ..., **params}}``).
"""

from __future__ import annotations

from harness import encoders as _encoders

__all__ = ["BIB", "STATS_KEYS", "used_references", "cite"]

# key -> (short citation, BibTeX entry)
BIB = {
    "demsar2006": (
        "Demšar (2006)",
        """@article{demsar2006,
  author  = {Dem{\\v{s}}ar, Janez},
  title   = {Statistical Comparisons of Classifiers over Multiple Data Sets},
  journal = {Journal of Machine Learning Research},
  volume  = {7},
  pages   = {1--30},
  year    = {2006}
}""",
    ),
    "nadeau2003": (
        "Nadeau & Bengio (2003)",
        """@article{nadeau2003,
  author  = {Nadeau, Claude and Bengio, Yoshua},
  title   = {Inference for the Generalization Error},
  journal = {Machine Learning},
  volume  = {52},
  number  = {3},
  pages   = {239--281},
  year    = {2003}
}""",
    ),
    "bouckaert2004": (
        "Bouckaert & Frank (2004)",
        """@inproceedings{bouckaert2004,
  author    = {Bouckaert, Remco R. and Frank, Eibe},
  title     = {Evaluating the Replicability of Significance Tests for Comparing
               Learning Algorithms},
  booktitle = {Advances in Knowledge Discovery and Data Mining (PAKDD 2004)},
  series    = {LNCS},
  volume    = {3056},
  pages     = {3--12},
  publisher = {Springer},
  year      = {2004}
}""",
    ),
    "holm1979": (
        "Holm (1979)",
        """@article{holm1979,
  author  = {Holm, Sture},
  title   = {A Simple Sequentially Rejective Multiple Test Procedure},
  journal = {Scandinavian Journal of Statistics},
  volume  = {6},
  number  = {2},
  pages   = {65--70},
  year    = {1979}
}""",
    ),
    "iman1980": (
        "Iman & Davenport (1980)",
        """@article{iman1980,
  author  = {Iman, Ronald L. and Davenport, James M.},
  title   = {Approximations of the Critical Region of the {Friedman} Statistic},
  journal = {Communications in Statistics -- Theory and Methods},
  volume  = {9},
  number  = {6},
  pages   = {571--595},
  year    = {1980}
}""",
    ),
    "efron1993": (
        "Efron & Tibshirani (1993)",
        """@book{efron1993,
  author    = {Efron, Bradley and Tibshirani, Robert J.},
  title     = {An Introduction to the Bootstrap},
  publisher = {Chapman \\& Hall},
  year      = {1993}
}""",
    ),
    "micci2001": (
        "Micci-Barreca (2001)",
        """@article{micci2001,
  author  = {Micci-Barreca, Daniele},
  title   = {A Preprocessing Scheme for High-Cardinality Categorical Attributes in
             Classification and Prediction Problems},
  journal = {SIGKDD Explorations},
  volume  = {3},
  number  = {1},
  pages   = {27--32},
  year    = {2001}
}""",
    ),
    "cestnik1990": (
        "Cestnik (1990)",
        """@inproceedings{cestnik1990,
  author    = {Cestnik, Bojan},
  title     = {Estimating Probabilities: A Crucial Task in Machine Learning},
  booktitle = {Proceedings of the 9th European Conference on Artificial Intelligence
               (ECAI'90)},
  pages     = {147--149},
  year      = {1990}
}""",
    ),
    "prokhorenkova2018": (
        "Prokhorenkova et al. (2018)",
        """@inproceedings{prokhorenkova2018,
  author    = {Prokhorenkova, Liudmila and Gusev, Gleb and Vorobev, Aleksandr and
               Dorogush, Anna Veronika and Gulin, Andrey},
  title     = {{CatBoost}: Unbiased Boosting with Categorical Features},
  booktitle = {Advances in Neural Information Processing Systems 31 (NeurIPS 2018)},
  year      = {2018}
}""",
    ),
    "weinberger2009": (
        "Weinberger et al. (2009)",
        """@inproceedings{weinberger2009,
  author    = {Weinberger, Kilian and Dasgupta, Anirban and Langford, John and
               Smola, Alex and Attenberg, Josh},
  title     = {Feature Hashing for Large Scale Multitask Learning},
  booktitle = {Proceedings of the 26th International Conference on Machine Learning
               (ICML 2009)},
  pages     = {1113--1120},
  year      = {2009}
}""",
    ),
    "siddiqi2006": (
        "Siddiqi (2006)",
        """@book{siddiqi2006,
  author    = {Siddiqi, Naeem},
  title     = {Credit Risk Scorecards: Developing and Implementing Intelligent Credit
               Scoring},
  publisher = {Wiley},
  year      = {2006}
}""",
    ),
    "pargent2022": (
        "Pargent et al. (2022)",
        """@article{pargent2022,
  author  = {Pargent, Florian and Pfisterer, Florian and Thomas, Janek and Bischl, Bernd},
  title   = {Regularized Target Encoding Outperforms Traditional Methods in Supervised
             Machine Learning with High Cardinality Features},
  journal = {Computational Statistics},
  volume  = {37},
  pages   = {2671--2692},
  year    = {2022}
}""",
    ),
    "cerda2018": (
        "Cerda et al. (2018)",
        """@article{cerda2018,
  author  = {Cerda, Patricio and Varoquaux, Ga{\\"e}l and K{\\'e}gl, Bal{\\'a}zs},
  title   = {Similarity Encoding for Learning with Dirty Categorical Variables},
  journal = {Machine Learning},
  volume  = {107},
  pages   = {1477--1494},
  year    = {2018}
}""",
    ),
    "benavoli2017": (
        "Benavoli et al. (2017)",
        """@article{benavoli2017,
  author  = {Benavoli, Alessio and Corani, Giorgio and Dem{\\v{s}}ar, Janez and
             Zaffalon, Marco},
  title   = {Time for a Change: a Tutorial for Comparing Multiple Classifiers Through
             {Bayesian} Analysis},
  journal = {Journal of Machine Learning Research},
  volume  = {18},
  number  = {77},
  pages   = {1--36},
  year    = {2017}
}""",
    ),
    "schuirmann1987": (
        "Schuirmann (1987)",
        """@article{schuirmann1987,
  author  = {Schuirmann, Donald J.},
  title   = {A Comparison of the Two One-Sided Tests Procedure and the Power Approach for
             Assessing the Equivalence of Average Bioavailability},
  journal = {Journal of Pharmacokinetics and Biopharmaceutics},
  volume  = {15},
  number  = {6},
  pages   = {657--680},
  year    = {1987}
}""",
    ),
    "corani2015": (
        "Corani & Benavoli (2015)",
        """@article{corani2015,
  author  = {Corani, Giorgio and Benavoli, Alessio},
  title   = {A {Bayesian} Approach for Comparing Cross-Validated Algorithms on Multiple
             Data Sets},
  journal = {Machine Learning},
  volume  = {100},
  pages   = {285--304},
  year    = {2015}
}""",
    ),
    "hodges1963": (
        "Hodges & Lehmann (1963)",
        """@article{hodges1963,
  author  = {Hodges, J. L. and Lehmann, E. L.},
  title   = {Estimates of Location Based on Rank Tests},
  journal = {Annals of Mathematical Statistics},
  volume  = {34},
  pages   = {598--611},
  year    = {1963}
}""",
    ),
    "hesterberg2015": (
        "Hesterberg (2015)",
        """@article{hesterberg2015,
  author  = {Hesterberg, Tim C.},
  title   = {What Teachers Should Know About the Bootstrap: Resampling in the
             Undergraduate Statistics Curriculum},
  journal = {The American Statistician},
  volume  = {69},
  number  = {4},
  pages   = {371--386},
  year    = {2015}
}""",
    ),
}

#: methods every report uses: corrected t intervals, ranks, Friedman/Iman-Davenport,
#: Nemenyi, the decision (Wilcoxon with Holm, Hodges-Lehmann, TOST, Bayesian signed-rank
#: and correlated t), bootstrap intervals of the average rank
STATS_KEYS = (
    "demsar2006",
    "nadeau2003",
    "bouckaert2004",
    "iman1980",
    "holm1979",
    "efron1993",
    "hesterberg2015",
    "hodges1963",
    "schuirmann1987",
    "benavoli2017",
    "corani2015",
)


def cite(key: str) -> str:
    """Short citation of ``key`` (e.g. ``"Demšar (2006)"``)."""
    return BIB[key][0]


def _encoder_keys(spec: dict) -> tuple[str, ...]:
    """References an encoder setting declares (``CategoricalEncoder.references``)."""
    kind = spec.get("kind")
    if kind not in _encoders.ENCODERS:  # a manifest from a run with other kinds
        return ()
    return _encoders.declaration(kind, {k: v for k, v in spec.items() if k != "kind"}).references


def used_references(encoders: dict) -> list[str]:
    """Keys of the references relevant to a run, statistics first, no duplicates.

    Parameters
    ----------
    encoders : dict
        The manifest's ``encoders`` table.
    """
    keys = list(STATS_KEYS)
    for spec in encoders.values():  # loop over encoder settings
        keys += _encoder_keys(spec if isinstance(spec, dict) else {})
    return list(dict.fromkeys(keys))
