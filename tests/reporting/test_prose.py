"""The report's prose logic, one test per branch: the evidence each answer states
(``_answer.decision_sentence``: switch or keep, test over datasets or folds, what else is
shown not worse), the caveats that qualify it (the Holm floor, the power caveat, leaky
settings never chosen) and the robustness sentence (``_robustness.robustness_sentence``).

Each scenario is a small invented results table (``fake_results``); the expected text is
formatted here from the numbers of the decision it states, so a change to the wording, a
flipped branch or a sentence built from other numbers fails.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from harness import stats
from harness.reporting._analysis import analyse
from harness.reporting._answer import decision_caveats, decision_sentence
from harness.reporting._html import Bullets, Note, Para
from harness.reporting._leakage import leakage_section
from harness.reporting._robustness import robustness_section, robustness_sentence
from harness.reporting._run import Run

from reporting_fakes import fake_results

LEAK_CAVEAT = "Never chosen (target statistics fitted on the rows they encode): "
ROBUST_PARA = "Exploratory and uncorrected for the number of slices"


def _analysis(tmp_path, df, reference=None):
    """Analyse ``df`` as the report does (the team's incumbent ``reference`` configured),
    from a run record built in memory: the prose needs no store."""
    manifest = {
        "models": {m: {"family": f} for m, f in zip(df["model"], df["model_family"])},
        "protocol": {"folds": 3, "repeats": 1, "medium_levels": [10, 100]},
        "config": {"decision": {"reference": reference}} if reference else {},
    }
    run = Run(directory=tmp_path, results=stats.pool_task_score(df), manifest=manifest)
    return analyse(run, n_boot=50)


def _decision(a, model="lin"):
    return next(d for d in a.headline if d.model == model)


def _pct(v):
    return f"{100 * v:+.2f} %"


def _p(p):
    return "p < 0.0001" if p < 1e-4 else f"p = {p:.3g}"


def _evidence(d, enc, test, family_words):
    """The evidence phrase of ``enc`` as the answer states it, from its decision row."""
    r = d.table.loc[enc]
    m = int((d.table["family"] == r["family"]).sum())
    return (
        f"{r['verdict']} (Holm-adjusted one-sided {test} {_p(r['p_ni_holm'])} over the {m} "
        f"{family_words}, against 'worse by more than {100 * d.rule.margin:g} %'), effect "
        f"{_pct(r['effect'])} [{_pct(r['lower'])}, {_pct(r['upper'])}] (simultaneous "
        f"one-sided bounds at {r['bound_level']:.2g}), P(practically worse) = "
        f"{r['prob_worse']:.2f}"
    )


def _cheaper(r):
    return f"cheaper by {r['saving_s']:.3g} s per fold ({100 * (1 - r['cost_ratio']):.0f} %)"


def _head(d, family="lin"):
    return (
        f"**{d.model}** ({family}), judged on ROC AUC over {d.n_datasets} dataset(s) "
        f"against the reference **{d.reference}**"
    )


# ------------------------------------------------------------------- evidence strength
def test_a_switch_over_datasets_states_the_wilcoxon_evidence_and_the_saving(tmp_path, rng):
    # 'cheap' costs half the reference's time and scores better on all 8 datasets
    df = fake_results(rng, n_datasets=8, encoders=("cheap", "ref"), skill={"cheap": 0.03})
    a = _analysis(tmp_path, df, reference="ref")
    d = _decision(a)
    assert (d.method, d.choice, d.table.loc["cheap", "verdict"]) == ("datasets", ("cheap",), "superior")
    r = d.table.loc["cheap"]
    assert decision_sentence(d, a) == (
        f"{_head(d)}: use **cheap** — "
        f"{_evidence(d, 'cheap', 'Wilcoxon', 'candidates that save enough cost')}; it is "
        f"{_cheaper(r)}."
    )
    assert r["saving_s"] == pytest.approx(0.062) and r["cost_ratio"] == pytest.approx(0.5)
    assert decision_caveats(d, a) == []  # reachable, decided, nothing leaky, nothing failed


def test_a_switch_on_one_dataset_states_the_corrected_t_and_its_scope(tmp_path, rng):
    df = fake_results(rng, n_datasets=1, folds=10, encoders=("cheap", "ref"), skill={"cheap": 0.03})
    a = _analysis(tmp_path, df, reference="ref")
    d = _decision(a)
    assert (d.method, d.choice) == ("folds", ("cheap",))
    assert decision_sentence(d, a) == (
        f"{_head(d)}: use **cheap** — "
        f"{_evidence(d, 'cheap', 'corrected resampled t', 'candidates that save enough cost')}; "
        f"it is {_cheaper(d.table.loc['cheap'])}. Scope: this answer holds for the dataset d0 "
        "only; it rests on 10 fold-paired differences, not on a sample of datasets."
    )
    assert decision_caveats(d, a) == []  # 10 outer folds: no few-folds caveat


def test_keeping_the_reference_says_why_and_lists_what_else_is_not_worse(tmp_path, rng):
    # better but dearer candidates cannot replace the reference; one of them is leaky
    df = fake_results(
        rng,
        n_datasets=8,
        encoders=("ref", "dear", "te_leaky"),
        skill={"dear": 0.03, "te_leaky": 0.03},
        leaky=("te_leaky",),
    )
    a = _analysis(tmp_path, df, reference="ref")
    d = _decision(a)
    assert not d.switch and list(d.table["family"]) == ["reference", "other", "leaky"]
    assert decision_sentence(d, a) == (
        f"{_head(d)}: keep **ref** — no candidate is shown non-inferior and cheaper by at least "
        "20 % and 0.01 s per fold. Also shown non-inferior or better, not chosen: dear "
        "(superior, not cheaper (2.00 × the reference's time per fold)); te_leaky (superior, "
        "not cheaper (3.00 × the reference's time per fold), excluded: leaky)."
    )


def test_keeping_the_reference_with_nothing_else_shown_not_worse(tmp_path, rng):
    df = fake_results(rng, n_datasets=8, encoders=("ref", "worse"), skill={"worse": -0.05})
    a = _analysis(tmp_path, df, reference="ref")
    d = _decision(a)
    assert d.table.loc["worse", "verdict"] == "inferior"
    assert decision_sentence(d, a) == (
        f"{_head(d)}: keep **ref** — no candidate is shown non-inferior and cheaper by at least "
        "20 % and 0.01 s per fold."
    )


def test_a_model_without_scores_has_no_choice(tmp_path, rng):
    df = fake_results(rng, models=("lin", "gb"))
    bad = df["model"] == "gb"
    df.loc[bad, "status"], df.loc[bad, "error"] = "failed", "ValueError: no"
    a = _analysis(tmp_path, df)
    d = _decision(a, "gb")
    assert decision_sentence(d, a).endswith(": **no choice** — no encoder has a score for this model.")
    assert decision_caveats(d, a) == ["No scored cell for this model and metric."]


def test_a_model_without_scores_names_no_reference(tmp_path, rng):
    df = fake_results(rng, models=("lin", "gb"))
    df.loc[df["model"] == "gb", "status"] = "failed"
    a = _analysis(tmp_path, df)
    assert "None" not in decision_sentence(_decision(a, "gb"), a)


# ---------------------------------------------------------- caveats on the evidence
def test_too_few_datasets_state_the_holm_floor_and_how_many_are_needed(tmp_path, rng):
    df = fake_results(rng, n_datasets=4, encoders=("cheap", "ref"))
    a = _analysis(tmp_path, df, reference="ref")
    d = _decision(a)
    assert not d.reachable
    # 2^-4 = 0.0625 >= 0.05 with one candidate; 2^-5 < 0.05: five datasets would do
    # (Wilcoxon 1945: all N signs alike give the exact one-sided p = 2^-N)
    assert decision_caveats(d, a)[0] == (
        "With 4 datasets the smallest one-sided signed-rank p is 2^-4 = 0.0625, times 1 for "
        "Holm = 0.0625 ≥ α = 0.05: no candidate can be shown non-inferior, so every verdict "
        "is inconclusive and the reference is kept; at least 5 datasets are needed for any "
        "verdict."
    )


def test_enough_datasets_state_no_holm_floor(tmp_path, rng):
    df = fake_results(rng, n_datasets=5, encoders=("cheap", "ref"))
    a = _analysis(tmp_path, df, reference="ref")
    d = _decision(a)
    assert d.reachable
    assert not any(c.startswith("With 5 datasets") for c in decision_caveats(d, a))


def _power_caveat(d, have, named):
    return (
        "Inconclusive candidates and the datasets in all that the Holm-adjusted "
        "non-inferiority test would need at their observed spread of effects to reject at "
        f"the margin with power {d.rule.power:g} (this run has {have}): {named}."
    )


@pytest.mark.parametrize(
    "skill, needed",
    [
        (-0.006, "about 52"),  # effect -0.64 %: a few dozen datasets
        (-0.0075, "about 364"),  # effect -0.87 %: hundreds, still counted
        (-0.008, "more than 1,000"),  # effect -0.94 %, just above the -1 % margin
    ],
)
def test_power_caveat_says_how_many_datasets_an_inconclusive_candidate_needs(tmp_path, rng, skill, needed):
    df = fake_results(rng, n_datasets=6, encoders=("cheap", "ref"), skill={"cheap": skill})
    a = _analysis(tmp_path, df, reference="ref")
    d = _decision(a)
    r = d.table.loc["cheap"]
    assert r["verdict"] == "inconclusive" and np.isfinite(r["needed"])
    want = "more than 1,000" if r["needed"] > 1000 else f"about {r['needed']:.0f}"
    assert want == needed  # the scenario hits the intended branch
    assert decision_caveats(d, a) == [_power_caveat(d, 6, f"cheap {needed}")]


def test_power_caveat_says_when_more_datasets_would_not_help(tmp_path, rng):
    # 'worse' sits beyond the margin (effect -1.0 %): no number of datasets shows it
    # non-inferior; 'cheap' needs a few more; both inconclusive at 4 datasets
    df = fake_results(rng, n_datasets=4, encoders=("cheap", "ref", "worse"), skill={"worse": -0.012})
    a = _analysis(tmp_path, df, reference="ref")
    d = _decision(a)
    assert np.isinf(d.table.loc["worse", "needed"]) and np.isfinite(d.table.loc["cheap", "needed"])
    assert decision_caveats(d, a)[1:] == [
        _power_caveat(d, 4, f"cheap about {d.table.loc['cheap', 'needed']:.0f}"),
        (
            "More datasets would not be expected to show worse non-inferior (the estimated effect "
            "is not above the margin)."
        ),
    ]


def test_power_caveat_on_one_dataset_speaks_of_repeats(tmp_path, rng):
    df = fake_results(rng, n_datasets=1, folds=10, encoders=("cheap", "ref"), skill={"cheap": -0.01})
    a = _analysis(tmp_path, df, reference="ref")
    d = _decision(a)
    assert d.table.loc["cheap", "needed_unit"] == "repeats"
    assert decision_caveats(d, a) == [
        (
            "More repeats would not be expected to show cheap non-inferior (the effect or the fold "
            "spread does not allow it)."
        )
    ]


def test_no_power_caveat_once_every_candidate_has_a_verdict(tmp_path, rng):
    df = fake_results(rng, n_datasets=8, encoders=("cheap", "ref", "worse"), skill={"cheap": 0.03, "worse": -0.05})
    a = _analysis(tmp_path, df, reference="ref")
    assert not any("Inconclusive" in c or "More datasets" in c for c in decision_caveats(_decision(a), a))


# ------------------------------------------------------------------------ leak caveats
def test_leak_caveat_names_every_leaky_setting(tmp_path, rng):
    df = fake_results(
        rng,
        n_datasets=5,
        encoders=("onehot", "te", "te_leaky", "te_loo"),
        skill={"te": 0.02},
        leaky=("te_leaky", "te_loo"),
    )
    a = _analysis(tmp_path, df)
    caveats = decision_caveats(_decision(a), a)
    assert [c for c in caveats if c.startswith(LEAK_CAVEAT)] == [LEAK_CAVEAT + "te_leaky, te_loo."]


def test_no_leak_caveat_without_a_leaky_setting(tmp_path, rng):
    df = fake_results(rng, n_datasets=5, encoders=("onehot", "te", "te_b"), skill={"te": 0.02})
    a = _analysis(tmp_path, df)
    d = _decision(a)
    assert d.table["eligible"].all()
    assert not any("Never chosen" in c or "leaky" in c for c in decision_caveats(d, a))
    assert "excluded: leaky" not in decision_sentence(d, a)


def _bullets(blocks):
    return [item for b in blocks if isinstance(b, Bullets) for item in b.items]


def test_leakage_section_says_the_leaky_setting_is_never_chosen(tmp_path, rng):
    # te_leaky: no cross-fitting, never chosen; te_b: cross-fitted like its twin te
    df = fake_results(
        rng,
        n_datasets=3,
        encoders=("onehot", "te", "te_b", "te_leaky"),
        folds=8,
        skill={"te": 0.08, "te_b": 0.08},
        leaky=("te_leaky",),
    )
    a = _analysis(tmp_path / "run", df)
    items = _bullets(leakage_section(a, tmp_path / "report"))
    summary = stats.audit_summary(a.audit).set_index("encoder")
    assert len(items) == 3  # te and te_b are each other's twin
    never = "; never chosen (it fits target statistics on the rows it encodes)."
    for enc, twin, ending in (("te_leaky", "te", never), ("te_b", "te", "."), ("te", "te_b", ".")):
        r = summary.loc[enc]
        where = (
            f"flagged on {r['flagged_datasets']} of {r['n_datasets']} dataset(s)"
            if r["flagged_datasets"]
            else f"flagged on none of {r['n_datasets']} dataset(s)"
        )
        assert (
            f"**{enc}** with lin: {where} against its twin '{twin}' (median gap excess "
            f"{r['median_gap_diff']:+.3f}, median test effect "
            f"{_pct(r['median_test_effect'])}){ending}" in items
        )
    assert summary.loc["te_leaky", "flagged_datasets"] > 0 == summary.loc["te_b", "flagged_datasets"]


def test_leakage_section_without_a_twin_says_there_is_nothing_to_audit(tmp_path, rng):
    a = _analysis(tmp_path / "run", fake_results(rng, encoders=("onehot", "codes")))
    blocks = leakage_section(a, tmp_path / "report")
    assert _bullets(blocks) == []
    assert Para("No target-statistics setting has a cross-fitted twin in this run: nothing to audit.") in blocks


# ----------------------------------------------------------------- robustness sentence
def _rob(*rows):
    """A robustness table (``stats.ROBUSTNESS_COLUMNS``) from (model, axis, slice, choice,
    n_datasets, reachable, agrees) tuples."""
    frame = pd.DataFrame(rows, columns=["model", "axis", "slice", "choice", "n_datasets", "reachable", "agrees"])
    frame = frame.assign(
        method="datasets", verdict="kept", effect=np.nan, lower=np.nan, label="exploratory, uncorrected"
    )
    return frame[stats.ROBUSTNESS_COLUMNS]


ROBUSTNESS_SENTENCES = {  # case -> (rows of _rob(), the sentence)
    "without_slices": ((), "No slice differs from the headline analysis: nothing to vary."),
    "when_every_slice_agrees": (
        (("lin", "metric", "log_loss", "te", 8, True, True), ("lin", "regime", "high", "te", 5, True, True)),
        "lin: the rule makes the headline choice in 2 of 2 slices.",
    ),
    "discounts_agreement_where_no_verdict_is_reachable": (
        (
            ("lin", "metric", "log_loss", "te", 8, True, True),
            ("lin", "regime", "low", "te", 2, False, True),
            ("lin", "regime", "high", "te", 3, False, True),
        ),
        "lin: the rule makes the headline choice in 3 of 3 slices (in 2 of them too few "
        "datasets leave no verdict reachable, so that agreement says nothing).",
    ),
    "names_each_slice_that_moves_the_choice": (
        (
            ("lin", "metric", "log_loss", "codes", 8, True, False),
            ("lin", "metric", "accuracy", "te", 8, True, True),
            ("lin", "regime", "high", "onehot | codes", 5, True, False),
        ),
        "lin: the rule makes the headline choice in 1 of 3 slices; it chooses otherwise in "
        "metric 'log loss' (codes, 8 dataset(s)), regime 'high' (onehot | codes, 5 dataset(s)).",
    ),
    "never_counts_a_slice_too_small_for_a_verdict_as_a_change": (
        (
            ("lin", "metric", "log_loss", "onehot", 8, True, False),
            ("lin", "regime", "low", "codes", 2, False, False),
            ("lin", "regime", "high", "te", 6, True, True),
        ),
        "lin: the rule makes the headline choice in 1 of 3 slices; it chooses otherwise in "
        "metric 'log loss' (onehot, 8 dataset(s)); in 1 slice(s) too few datasets leave no verdict "
        "reachable, so the rule can only keep the reference there, which is no evidence against the "
        "choice: regime 'low' (2 dataset(s)).",
    ),
    "has_one_clause_per_model_in_table_order": (
        (
            ("lin", "regime", "low", "codes", 6, True, False),
            ("gb", "regime", "low", "te", 2, False, True),
            ("gb", "metric", "accuracy", "te", 8, True, True),
        ),
        "lin: the rule makes the headline choice in 0 of 1 slices; it chooses otherwise in "
        "regime 'low' (codes, 6 dataset(s)). "
        "gb: the rule makes the headline choice in 2 of 2 slices (in 1 of them too few "
        "datasets leave no verdict reachable, so that agreement says nothing).",
    ),
}


@pytest.mark.parametrize("case", ROBUSTNESS_SENTENCES)
def test_robustness_sentence(case):
    rows, sentence = ROBUSTNESS_SENTENCES[case]
    assert robustness_sentence(_rob(*rows)) == sentence


def test_robustness_section_states_the_sentence_of_the_run(tmp_path, rng):
    # 'cheap' wins over all 8 datasets; each regime alone has too few datasets to switch
    df = fake_results(rng, n_datasets=8, encoders=("cheap", "ref"), skill={"cheap": 0.03})
    a = _analysis(tmp_path / "run", df, reference="ref")
    rob = a.robustness.set_index(["axis", "slice"])
    assert not rob.loc[("regime", "low"), "agrees"] and not rob.loc[("regime", "low"), "reachable"]
    sentence = robustness_sentence(a.robustness)
    mute = [f"regime '{s}' ({rob.loc[('regime', s), 'n_datasets']} dataset(s))" for s in ("low", "medium", "high")]
    same = int(a.robustness["agrees"].sum())
    assert sentence == (
        f"lin: the rule makes the headline choice in {same} of {len(rob)} slices; in 3 slice(s) too few "
        "datasets leave no verdict reachable, so the rule can only keep the reference there, which is no "
        f"evidence against the choice: {', '.join(mute)}."
    )
    paras = [b.text for b in robustness_section(a, tmp_path / "report") if isinstance(b, Para)]
    assert len(paras) == 1 and paras[0].startswith(ROBUST_PARA) and paras[0].endswith(sentence)


def test_robustness_section_without_slices_says_so(tmp_path, rng):
    # one dataset, one regime, and every other metric judges the same datasets: a slice
    # differs only by its metric, so keep ROC AUC alone
    df = fake_results(rng, n_datasets=1, folds=4)
    df[["log_loss", "accuracy", "balanced_accuracy"]] = np.nan
    a = _analysis(tmp_path / "run", df)
    assert a.robustness.empty
    blocks = robustness_section(a, tmp_path / "report")
    assert not [b for b in blocks if isinstance(b, Para)]
    assert (
        Note("No slice differs from the headline analysis (one metric, one regime): there is nothing to vary.")
        in blocks
    )
