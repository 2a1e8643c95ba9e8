"""The decision rule: one frozen object that the code applies and the report's prose states."""

from __future__ import annotations

from dataclasses import dataclass, fields

__all__ = ["DecisionRule", "VERDICTS", "SHOWN_NOT_WORSE"]

#: verdict words, in the order of precedence in which they are assigned
VERDICTS = ("superior", "equivalent", "non-inferior", "inferior", "inconclusive")
#: verdicts that let a candidate be chosen
SHOWN_NOT_WORSE = ("superior", "equivalent", "non-inferior")
#: outer folds in total (folds x repeats) below which a one-dataset answer warns
MIN_FOLDS_ONE_DATASET = 10


@dataclass(frozen=True)
class DecisionRule:
    """Margin, level and savings threshold of the choice (config section ``[decision]``).

    Attributes
    ----------
    reference : str or None
        The incumbent encoder; None = the best average rank among eligible settings.
    margin : float
        Relative non-inferiority margin on the unit-free per-dataset effect.
    alpha : float
        Level of every one-sided test.
    min_saving : float
        Smallest relative cost saving (1 - cost ratio) worth switching for.
    min_saving_s : float
        Smallest absolute saving, seconds per fold (median over datasets).
    prior_strength : float
        Dirichlet weight of the pseudo-observation of the Bayesian signed-rank test.
    power : float
        Power the sample-size figures aim at.
    """

    reference: str | None = None
    margin: float = 0.01
    alpha: float = 0.05
    min_saving: float = 0.20
    min_saving_s: float = 0.01
    prior_strength: float = 0.5
    power: float = 0.8

    @classmethod
    def from_mapping(cls, values) -> DecisionRule:
        """Build from the validated ``[decision]`` table (unknown keys ignored)."""
        names = {f.name for f in fields(cls)}
        return cls(**{k: v for k, v in dict(values or {}).items() if k in names})

    def describe(self) -> str:
        """The rule in words, every number taken from this object."""
        ref = (
            f"the reference '{self.reference}'"
            if self.reference
            else "the reference (the eligible setting with the best average rank, chosen from "
            "the data, which makes the tests conservative)"
        )
        m, a = _pct(self.margin), f"{self.alpha:g}"
        return (
            f"Each candidate is compared with {ref} on a unit-free effect per dataset: "
            f"(score − reference) / |reference| for scores, log(reference error / error) "
            f"for errors, so a positive effect means better. A candidate is non-inferior "
            f"when a one-sided Wilcoxon signed-rank test rejects 'the median effect is at "
            f"most −{m}' at α = {a}, Holm-adjusted within its family; superior when it "
            f"rejects 'at most 0'; equivalent only when both one-sided tests against −{m} and +{m} reject "
            f"(TOST); inferior when the test of 'at least −{m}' rejects; otherwise "
            f"inconclusive. On one dataset the same tests run on fold-paired effects with "
            f"the corrected resampled t. Families are set by cost alone: the candidates "
            f"whose median cost ratio saves at least {_pct(self.min_saving)} and "
            f"{self.min_saving_s:g} s per fold form the family the choice reads, so a "
            f"candidate that cannot save that much never changes the choice; the others "
            f"are adjusted among themselves and their verdicts are secondary. Among the "
            f"non-inferior (or better) cost-saving candidates the one with the largest "
            f"cost saving is chosen; otherwise the reference is kept. Exact cost ties go "
            f"to the larger effect, then to fewer output features; a tie that remains is "
            f"stated. Settings that fit target statistics on the rows they encode are "
            f"never chosen."
        )


def _pct(value: float) -> str:
    return f"{100 * value:g} %"
