"""Figures: helpers against hand computations, every figure drawn, degenerate inputs refused."""

from __future__ import annotations

import itertools

import matplotlib.image as mpimg
import numpy as np
import pandas as pd
import pytest

from harness import stats
from harness.reporting import figures
from reporting_fakes import fake_results

ENCODERS20 = tuple(f"encoder_{i:02d}_{'x' * (i % 7)}" for i in range(20))


def _comparisons(df, models=("lin",), metric="roc_auc"):
    comps = [stats.compare_encoders(stats.score_matrix(df, m, metric), n_boot=200)
             for m in models]
    decs = {(m, metric): stats.decide(df, m, metric) for m in models}
    return comps, decs


def _texts(fig):
    return [t.get_text() for t in fig.findobj(lambda o: hasattr(o, "get_text"))]


def _assert_png_not_blank(path):
    img = mpimg.imread(path)
    assert img.ndim == 3 and img.shape[0] > 100 and img.shape[1] > 100
    assert img[..., :3].std() > 0.05  # not a single colour


# --------------------------------------------------------------------------- helpers
def test_cliques_reproduce_demsar_worked_example():
    # Demšar (2006), JMLR 7, Sec. 3.2.2 worked example (Table 6): average ranks of four
    # variants over 14 data sets; at alpha = 0.10 CD = 1.12 separates only 1.964 from 3.143
    ranks = pd.Series({"c45": 44 / 14, "m": 28 / 14, "cf": 40.5 / 14, "mcf": 27.5 / 14})
    cd = stats.critical_difference(4, 14, alpha=0.10)
    assert cd == pytest.approx(1.12, abs=0.01)  # value printed in the paper
    assert figures.cliques(ranks, cd) == [("mcf", "m", "cf"), ("cf", "c45")]
    cd05 = stats.critical_difference(4, 14, alpha=0.05)  # 1.25 in the paper: no difference
    assert figures.cliques(ranks, cd05) == [("mcf", "m", "cf", "c45")]


@pytest.mark.parametrize("cd", [np.nan, 0.0])
def test_cliques_empty_without_a_difference(cd):
    assert figures.cliques(pd.Series({"a": 1.0, "b": 2.0}), cd) == []


def test_pareto_front_matches_brute_force(rng):
    cost, score = rng.random(30), rng.random(30)
    cost[5], score[5] = cost[3], score[3]  # an exact duplicate of a point
    mask = figures.pareto_front(cost, score)
    # common practice, no source: dominated = another point no worse on both, better on one
    dominated = [any((cost[j] <= cost[i] and score[j] <= score[i])
                     and (cost[j] < cost[i] or score[j] < score[i]) for j in range(30))
                 for i in range(30)]
    assert mask.tolist() == [not d for d in dominated]


# --------------------------------------------------------------------------- figures
@pytest.fixture
def wide(rng):
    skill = {e: rng.normal(0, 0.02) for e in ENCODERS20}
    return fake_results(rng, n_datasets=8, encoders=ENCODERS20, models=("lin", "gb"),
                        skill=skill, leaky=(ENCODERS20[3],))


def test_every_figure_draws_and_saves(tmp_path, rng):
    wide = fake_results(rng, n_datasets=5, encoders=("onehot", "codes", "te", "te_leaky"),
                        models=("lin", "gb"), skill={"te": 0.02}, leaky=("te_leaky",))
    comps, recs = _comparisons(wide, ("lin", "gb"))
    made = {
        "rank": figures.rank_plot(comps, recs),
        "cd": figures.cd_diagram(comps),
        "cost": figures.cost_plot(comps, stats.cost_table(wide)),
        "heat": figures.relative_heatmap(wide, "lin"),
        "leak": figures.leakage_plot(stats.leakage_audit(wide)),
        "delta": figures.delta_plot(recs.values()),
    }
    for name, fig in made.items():
        png, svg = figures.save(fig, tmp_path, name)
        _assert_png_not_blank(png)
        assert svg.read_text().lstrip().startswith("<?xml")


def test_titles_say_which_direction_is_better(wide):
    comps, recs = _comparisons(wide)
    assert any("lower is better" in t for t in _texts(figures.rank_plot(comps, recs)))
    assert any("lower is better" in t for t in _texts(figures.cd_diagram(comps)))
    assert any("top left" in t for t in _texts(figures.cost_plot(comps, stats.cost_table(wide))))
    assert any("lighter is better" in t for t in _texts(figures.relative_heatmap(wide, "lin")))


def test_cost_labels_do_not_overlap(wide):
    comps, _ = _comparisons(wide)
    fig = figures.cost_plot(comps, stats.cost_table(wide))
    renderer = fig.canvas.get_renderer()
    ax = fig.axes[0]
    boxes = [t.get_window_extent(renderer) for t in ax.texts if t.get_text() in ENCODERS20]
    assert len(boxes) == 20
    overlaps = [(a, b) for a, b in itertools.combinations(boxes, 2) if a.overlaps(b)]
    assert overlaps == []


def test_rank_plot_shapes_carry_meaning_without_colour(wide):
    from dataclasses import replace

    comps, decs = _comparisons(wide)
    d = decs[("lin", "roc_auc")]
    other = next(e for e in comps[0].ranks.index if e != d.reference)
    fig = figures.rank_plot(comps, {("lin", "roc_auc"): replace(d, choice=(other,))})
    markers = {(line.get_marker(), line.get_markerfacecolor() == "white")
               for line in fig.axes[0].lines if len(line.get_xdata())}
    assert ("D", False) in markers  # the choice: a filled diamond
    assert ("s", False) in markers  # the reference: a grey square
    assert any(m == "o" for m, _ in markers)


def test_delta_plot_gives_each_verdict_its_own_shape(wide):
    from harness.reporting._figdecision import VERDICT_MARKERS

    shapes = {(mk, face) for mk, face, _ in VERDICT_MARKERS.values()}
    assert len(shapes) == len(VERDICT_MARKERS)  # readable in greyscale: no two alike
    _, decs = _comparisons(wide)
    fig = figures.delta_plot(decs.values())
    assert any("margin" in t for t in _texts(fig))


def test_group_letters_follow_the_nemenyi_cliques():
    from harness.reporting._figdecision import group_letters

    # Demšar (2006), Sec. 3.2.2 worked example: ranks 3.143, 2.000, 2.893, 1.964, CD 1.25
    r = pd.Series([44 / 14, 28 / 14, 40.5 / 14, 27.5 / 14], index=["c4.5", "m", "cf", "both"])
    letters = group_letters(r, 1.25)
    for a, b in itertools.combinations(r.index, 2):  # share a letter iff within the CD
        assert bool(set(letters[a]) & set(letters[b])) == (abs(r[a] - r[b]) < 1.25)


def test_leakage_plot_marks_flagged(rng):
    df = fake_results(rng, n_datasets=3, encoders=("onehot", "te", "te_leaky"), folds=8,
                      skill={"te": 0.08}, leaky=("te_leaky",))
    audit = stats.leakage_audit(df)
    assert audit["flagged"].any()  # the planted leaky setting
    fig = figures.leakage_plot(audit)
    assert any(t.startswith("  flagged") for t in _texts(fig))


def test_heatmap_orders_rows_by_cardinality(wide):
    fig = figures.relative_heatmap(wide, "lin")
    labels = [t.get_text() for t in fig.axes[0].get_yticklabels()]
    card = [int(s.split("max ")[1].split(" ")[0]) for s in labels]
    assert card == sorted(card)


# ------------------------------------------------------------------------ degenerate
def test_one_dataset_rank_plot_but_no_cd(rng):
    df = fake_results(rng, n_datasets=1)
    comps, recs = _comparisons(df)
    figures.rank_plot(comps, recs)
    with pytest.raises(figures.NothingToPlot, match="at least 2 complete dataset"):
        figures.cd_diagram(comps)


def test_one_encoder_has_nothing_to_compare(rng):
    df = fake_results(rng, encoders=("codes",))
    comps, recs = _comparisons(df)
    with pytest.raises(figures.NothingToPlot, match="average-rank plot"):
        figures.rank_plot(comps, recs)
    with pytest.raises(figures.NothingToPlot, match="score-versus-cost"):
        figures.cost_plot(comps, stats.cost_table(df))
    with pytest.raises(figures.NothingToPlot, match="at least 2 encoders"):
        figures.relative_heatmap(df, "lin")


def test_no_timing_no_cost_plot(rng):
    df = fake_results(rng)
    comps, _ = _comparisons(df)
    df[["encoder_fit_s", "encoder_transform_s", "model_fit_s"]] = np.nan
    with pytest.raises(figures.NothingToPlot, match="timing"):
        figures.cost_plot(comps, stats.cost_table(df))


def test_empty_audit_no_leakage_plot(rng):
    df = fake_results(rng)
    df["train_roc_auc"] = np.nan
    with pytest.raises(figures.NothingToPlot, match="training score"):
        figures.leakage_plot(stats.leakage_audit(df))


def test_regression_only_draws(rng):
    df = fake_results(rng, task="regression", skill={"te": 0.05},
                      encoders=("onehot", "codes", "te", "te_in"), leaky=("te_in",))
    comps, recs = _comparisons(df, metric="rmse")
    figures.rank_plot(comps, recs)
    figures.relative_heatmap(df, "lin")
    figures.leakage_plot(stats.leakage_audit(df))
