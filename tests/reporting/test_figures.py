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
    recs = {(m, metric): stats.recommend(df, m, metric, n_boot=200) for m in models}
    return comps, recs


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
    comps, recs = _comparisons(wide)
    fig = figures.rank_plot(comps, recs)
    markers = {(line.get_marker(), line.get_markerfacecolor() == "white")
               for line in fig.axes[0].lines if len(line.get_xdata())}
    assert ("D", False) in markers  # the recommendation: a filled diamond
    assert any(m == "o" for m, _ in markers)


def test_leakage_plot_marks_flagged(wide):
    audit = stats.leakage_audit(wide)
    assert audit["flagged"].any()  # the planted leaky setting
    fig = figures.leakage_plot(audit)
    assert "  flagged" in _texts(fig)


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
    df = fake_results(rng, task="regression", skill={"te": 0.05})
    comps, recs = _comparisons(df, metric="rmse")
    figures.rank_plot(comps, recs)
    figures.relative_heatmap(df, "lin")
    figures.leakage_plot(stats.leakage_audit(df))
