"""Pure functions of the results table: tests, ranks, the decision, leakage, cost.

Every public function takes the tidy results table (one row per dataset x encoder x
model x repeat x fold, see ``DEVELOPERS.md``) or an object derived from it, and keeps
only rows with ``status == "ok"``. Nothing here reads the store, draws or writes files.

Modules, one seam each: ``_tests`` (significance tests as pure array functions),
``_matrix`` (the datasets x encoders score matrix, per-cell summaries), ``_compare``
(ranks, Friedman, Nemenyi, aggregations), ``_rule`` and ``_decision`` (the frozen
decision rule and its application), ``_leakage`` (eligibility and the paired audit),
``_robust`` (regimes and the robustness of the choice), ``_cost``.

Missing cells
    A cell is a (dataset, encoder) pair of one model. The decision pairs each candidate
    with the reference on the datasets where both have a score, so nothing is dropped
    for it. The rank matrix must be complete: ``missing="auto"`` drops the incomplete
    encoders or the incomplete datasets, whichever keeps more cells, but never drops an
    encoder named in ``keep`` (the reference and the choice); the dropped names are kept
    on the :class:`ScoreMatrix` and reported.
Degenerate input
    Fewer than two datasets or encoders never raise: tests return NaN and a caveat says
    why. All-tied data give a Friedman statistic of 0 and p-values of 1.
"""

from harness.stats._common import (
    AGGREGATIONS,
    MISSING_POLICIES,
    POOLED,
    STATUS_OK,
    metric_values,
    ok_rows,
    orientation,
    pool_task_score,
    unit_free_delta,
)
from harness.stats._compare import (
    RANK_CI_MIN_DATASETS,
    Comparison,
    aggregate_scores,
    average_ranks,
    compare_encoders,
    control_z_test,
    expanded_alpha,
    friedman_test,
    top_encoders,
    wilcoxon_vs_control,
    win_tie_loss,
)
from harness.stats._cost import COST_PARTS, cost_table
from harness.stats._decision import DECISION_COLUMNS, Decision, decide, decision_table
from harness.stats._leakage import AUDIT_COLUMNS, audit_summary, eligible_rows, leakage_audit, leaky_settings, twins
from harness.stats._matrix import ScoreMatrix, paired_corrected_t, rank_rows, score_matrix, summarize_cells
from harness.stats._robust import ROBUSTNESS_COLUMNS, cardinality_regime, choice_robustness, dataset_regimes
from harness.stats._rule import MIN_FOLDS_ONE_DATASET, SHOWN_NOT_WORSE, VERDICTS, DecisionRule
from harness.stats._tests import (
    BayesSignedRank,
    CorrectedT,
    CorrelatedT,
    FriedmanResult,
    HodgesLehmann,
    bayesian_signed_rank,
    corrected_t,
    corrected_t_greater,
    correlated_t,
    critical_difference,
    cv_test_train_ratio,
    datasets_needed,
    friedman_from_ranks,
    friedman_permutation_p,
    hodges_lehmann,
    holm,
    nemenyi_q,
    repeats_needed,
    signed_rank_greater,
    signed_rank_less,
)

__all__ = [
    "AGGREGATIONS",
    "MISSING_POLICIES",
    "POOLED",
    "STATUS_OK",
    "metric_values",
    "ok_rows",
    "orientation",
    "pool_task_score",
    "unit_free_delta",
    "RANK_CI_MIN_DATASETS",
    "expanded_alpha",
    "Comparison",
    "aggregate_scores",
    "average_ranks",
    "compare_encoders",
    "control_z_test",
    "friedman_test",
    "top_encoders",
    "wilcoxon_vs_control",
    "win_tie_loss",
    "COST_PARTS",
    "cost_table",
    "DECISION_COLUMNS",
    "Decision",
    "decide",
    "decision_table",
    "AUDIT_COLUMNS",
    "audit_summary",
    "eligible_rows",
    "leakage_audit",
    "leaky_settings",
    "twins",
    "ScoreMatrix",
    "paired_corrected_t",
    "rank_rows",
    "score_matrix",
    "summarize_cells",
    "ROBUSTNESS_COLUMNS",
    "cardinality_regime",
    "choice_robustness",
    "dataset_regimes",
    "MIN_FOLDS_ONE_DATASET",
    "SHOWN_NOT_WORSE",
    "VERDICTS",
    "DecisionRule",
    "BayesSignedRank",
    "CorrectedT",
    "CorrelatedT",
    "FriedmanResult",
    "HodgesLehmann",
    "bayesian_signed_rank",
    "corrected_t",
    "corrected_t_greater",
    "correlated_t",
    "critical_difference",
    "cv_test_train_ratio",
    "datasets_needed",
    "friedman_from_ranks",
    "friedman_permutation_p",
    "hodges_lehmann",
    "holm",
    "nemenyi_q",
    "repeats_needed",
    "signed_rank_greater",
    "signed_rank_less",
]
