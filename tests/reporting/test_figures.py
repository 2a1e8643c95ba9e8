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
    comps = [stats.compare_encoders(stats.score_matrix(df, m, metric), n_boot=200) for m in models]
    decs = {(m, metric): stats.decide(df, m, metric) for m in models}
    return comps, decs


def _texts(fig):
    return [t.get_text() for t in fig.findobj(lambda o: hasattr(o, "get_text"))]


def _assert_png_not_blank(path):
    img = mpimg.imread(path)
    assert img.ndim == 3 and img.shape[0] > 100 and img.shape[1] > 100
    assert img[..., :3].std() > 0.05  # not a single colour


def _assert_png_of(fig, path, dpi=150):
    """A real PNG file of plausible size whose pixels are the figure's inches x dpi."""
    assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert 5_000 < path.stat().st_size < 2_000_000
    height, width = mpimg.imread(path).shape[:2]
    w_in, h_in = fig.get_size_inches()
    assert abs(width - w_in * dpi) <= 1 and abs(height - h_in * dpi) <= 1


def _hand_ranks(df, model, metric):
    """Average rank per encoder computed from the frame: the fold mean per dataset, rank 1
    the best, ties sharing the average rank (Demšar 2006, JMLR 7, Sec. 3.2.2)."""
    ok = df.loc[(df["model"] == model) & (df["status"] == "ok")]
    means = ok.groupby(["dataset", "encoder"])[metric].mean().unstack("encoder")
    lower_is_better = metric in ("rmse", "mae", "log_loss")
    return means.rank(axis=1, ascending=lower_is_better).mean()


def _marked(ax, skip=("<", ">")):
    """Row label (the y tick's text) -> (x, marker) of every point marker on the panel;
    ``skip``: markers that are not data points (the delta plot's off-window arrows)."""
    names = dict(zip(ax.get_yticks(), (t.get_text() for t in ax.get_yticklabels())))
    out = {}
    for line in ax.lines:
        if line.get_linestyle() == "None" and line.get_marker() not in skip:
            for x, y in zip(np.asarray(line.get_xdata(), float), line.get_ydata()):
                out[names[y]] = (float(x), line.get_marker())
    return out


def _segments(ax):
    """Row label -> (x0, x1) of each horizontal whisker drawn with ``hlines``."""
    names = dict(zip(ax.get_yticks(), (t.get_text() for t in ax.get_yticklabels())))
    return {
        names[seg[0][1]]: (seg[0][0], seg[1][0])
        for coll in ax.collections
        if hasattr(coll, "get_segments")
        for seg in coll.get_segments()
    }


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
    dominated = [
        any(
            (cost[j] <= cost[i] and score[j] <= score[i]) and (cost[j] < cost[i] or score[j] < score[i])
            for j in range(30)
        )
        for i in range(30)
    ]
    assert mask.tolist() == [not d for d in dominated]


# --------------------------------------------------------------------------- figures
@pytest.fixture
def wide(rng):
    skill = {e: rng.normal(0, 0.02) for e in ENCODERS20}
    return fake_results(
        rng, n_datasets=8, encoders=ENCODERS20, models=("lin", "gb"), skill=skill, leaky=(ENCODERS20[3],)
    )


def test_every_figure_draws_and_saves(tmp_path, rng):
    wide = fake_results(
        rng,
        n_datasets=5,
        encoders=("onehot", "codes", "te", "te_leaky"),
        models=("lin", "gb"),
        skill={"te": 0.02},
        leaky=("te_leaky",),
    )
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
        assert (png.name, svg.name) == (f"{name}.png", f"{name}.svg")
        _assert_png_of(fig, png)
        _assert_png_not_blank(png)
        assert svg.read_text().lstrip().startswith("<?xml")
    # one panel per model, each titled with its model (the audit's panels in its order)
    for name in ("rank", "cd", "cost", "delta", "leak"):
        panels = [ax for ax in made[name].axes if ax.get_visible()]
        want = ["gb", "lin"] if name == "leak" else ["lin", "gb"]
        assert [ax.get_title(loc="left").split(" · ")[0] for ax in panels] == want, name


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
    markers = {
        (line.get_marker(), line.get_markerfacecolor() == "white")
        for line in fig.axes[0].lines
        if len(line.get_xdata())
    }
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
    df = fake_results(
        rng, n_datasets=3, encoders=("onehot", "te", "te_leaky"), folds=8, skill={"te": 0.08}, leaky=("te_leaky",)
    )
    audit = stats.leakage_audit(df)
    assert audit["flagged"].any()  # the planted leaky setting
    fig = figures.leakage_plot(audit)
    assert any(t.startswith("  flagged") for t in _texts(fig))


def test_heatmap_orders_rows_by_cardinality(wide):
    fig = figures.relative_heatmap(wide, "lin")
    labels = [t.get_text() for t in fig.axes[0].get_yticklabels()]
    card = [int(s.split("max ")[1].split(" ")[0]) for s in labels]
    assert card == sorted(card)


def test_heatmap_says_in_words_what_its_lines_mean(wide):
    texts = _texts(figures.relative_heatmap(wide, "lin", low=10, high=100))
    assert not any("lines split regimes" in t for t in texts)
    assert any(
        "A horizontal line separates datasets with fewer than 10, 10 to 100, and more than 100 levels." in t
        for t in texts
    )
    one_regime = wide.assign(max_cardinality=5)  # nothing to separate: no line, no sentence
    texts = _texts(figures.relative_heatmap(one_regime, "lin"))
    assert not any("horizontal line" in t for t in texts)
    assert any("fewest at the top" in t for t in texts)


# ------------------------------------------------------------- what each figure plots
@pytest.fixture
def four(rng):
    """Eight datasets (enough for rank intervals), four encoders of clearly different
    skill, one model."""
    return fake_results(
        rng, n_datasets=8, encoders=("onehot", "codes", "te", "freq"), skill={"te": 0.04, "onehot": 0.02, "freq": -0.03}
    )


def test_rank_plot_draws_the_average_ranks_of_the_frame(four):
    comps, decs = _comparisons(four)
    d = decs[("lin", "roc_auc")]
    ax = figures.rank_plot(comps, decs).axes[0]
    hand = _hand_ranks(four, "lin", "roc_auc")
    drawn = _marked(ax)
    assert {e: x for e, (x, _) in drawn.items()} == pytest.approx(hand.to_dict())
    assert [t.get_text() for t in ax.get_yticklabels()] == list(comps[0].ranks.index)
    assert list(comps[0].ranks["avg_rank"]) == sorted(hand)  # rows best first
    assert drawn[d.reference][1] == "s"  # the reference, as the legend says
    assert sorted(t.get_text() for t in ax.texts) == sorted(f"{v:.2f}" for v in hand)
    whiskers = _segments(ax)
    assert set(whiskers) == set(hand.index)
    for e, (lo, hi) in whiskers.items():  # the bootstrap interval of each encoder
        assert (lo, hi) == pytest.approx(tuple(comps[0].ranks.loc[e, ["ci_low", "ci_high"]]))
    assert [t.get_text() for t in ax.figure.legends[0].get_texts()] == [
        "reference",
        "chosen (when not the reference)",
        "other",
        "95% bootstrap interval over datasets",
    ]


def test_cd_diagram_draws_each_rank_its_reach_and_its_letters(four):
    from harness.reporting._figdecision import group_letters

    comps, _ = _comparisons(four)
    ax = figures.cd_diagram(comps).axes[0]
    hand = _hand_ranks(four, "lin", "roc_auc").sort_values()
    assert hand.is_unique  # no tie: the row order is the rank order
    cd = stats.critical_difference(4, 8, alpha=0.05)  # Demšar (2006), Sec. 3.2.2
    assert [t.get_text() for t in ax.get_yticklabels()] == [f"{e}  ({v:.2f})" for e, v in hand.items()]
    np.testing.assert_allclose(np.asarray(ax.lines[0].get_xdata(), float), hand.to_numpy())
    bands = [c.get_paths()[0].vertices[:, 0] for c in ax.collections]
    np.testing.assert_allclose([(b.min(), b.max()) for b in bands], np.column_stack([hand, hand + cd]))
    assert [t.get_text() for t in ax.texts] == list(group_letters(hand, cd))
    assert f"critical difference {cd:.2f}" in ax.get_xlabel()


def test_cost_plot_puts_each_encoder_at_its_median_seconds_and_rank(four):
    comps, _ = _comparisons(four)
    ax = figures.cost_plot(comps, stats.cost_table(four)).axes[0]
    seconds = (
        (four["encoder_fit_s"] + four["encoder_transform_s"] + four["model_fit_s"]).groupby(four["encoder"]).median()
    )  # per fold, median over all rows
    hand = _hand_ranks(four, "lin", "roc_auc")
    labels = {t.get_text(): t for t in ax.texts}
    assert set(labels) == set(hand.index)
    for e, t in labels.items():  # each label points at its encoder's point
        assert t.xy == pytest.approx((seconds[e], hand[e]))
    points = {
        (round(x, 9), round(y, 9), line.get_marker())
        for line in ax.lines
        if line.get_linestyle() == "None"
        for x, y in zip(line.get_xdata(), line.get_ydata())
    }
    # the Pareto front by brute force: no other encoder both cheaper-or-equal and
    # better-or-equal ranked, better on one (common practice, no source)
    front = {
        e
        for e in hand.index
        if not any(
            seconds[o] <= seconds[e] and hand[o] <= hand[e] and (seconds[o], hand[o]) != (seconds[e], hand[e])
            for o in hand.index
        )
    }
    assert points == {(round(seconds[e], 9), round(hand[e], 9), "^" if e in front else "o") for e in hand.index}
    assert {e for e, t in labels.items() if t.get_fontweight() == "bold"} == front
    assert ax.get_xscale() == "log"


def test_heatmap_cells_are_the_shortfall_computed_from_the_frame(rng):
    # the excluded leaky setting scores best: its shortfall is negative, drawn as 0 (best)
    df = fake_results(
        rng,
        n_datasets=5,
        encoders=("onehot", "codes", "te", "te_leaky"),
        skill={"te": 0.03, "te_leaky": 0.06},
        leaky=("te_leaky",),
    )
    eligible = ("onehot", "codes", "te")
    ax = figures.relative_heatmap(df, "lin", eligible=eligible).axes[0]
    means = df.groupby(["dataset", "encoder"])["roc_auc"].mean().unstack("encoder")
    best = means[list(eligible)].max(axis=1)
    hand = 100 * means.rsub(best, axis=0).div(best, axis=0)  # % short of the best eligible
    rows = [t.get_text().split()[0] for t in ax.get_yticklabels()]
    cols = [t.get_text() for t in ax.get_xticklabels()]
    assert "te_leaky (excluded)" in cols and "te (excluded)" not in cols
    cols = [c.replace(" (excluded)", "") for c in cols]
    assert sorted(rows) == sorted(means.index) and sorted(cols) == sorted(means.columns)
    shown = hand.loc[rows, cols]
    assert (shown["te_leaky"] < 0).all()
    np.testing.assert_allclose(ax.images[0].get_array().filled(np.nan), shown.clip(lower=0))
    assert cols == list(shown.mean().sort_values(kind="stable").index)  # best on average first
    words = [t.get_text() for t in ax.texts]
    assert len(words) == shown.size and words.count("best") == len(rows)  # one best per row
    # cardinalities 5, 12, 40, 80, 150: low | medium x3 | high, two lines between regimes
    assert sorted(seg[0][1] for seg in ax.collections[-1].get_segments()) == [0.5, 3.5]


def _hodges_lehmann(d):
    """Median of the Walsh averages (Hodges & Lehmann 1963, Ann. Math. Statist. 34)."""
    d = np.asarray(d, float)
    return float(np.median([(a + b) / 2 for i, a in enumerate(d) for b in d[i:]]))


def test_delta_plot_draws_each_candidates_effect_and_the_margin(four):
    from harness.reporting._figdecision import VERDICT_MARKERS

    _, decs = _comparisons(four)
    d = decs[("lin", "roc_auc")]
    ax = figures.delta_plot(decs.values()).axes[0]
    drawn = {label.split("  (")[0]: v for label, v in _marked(ax).items()}
    means = four.groupby(["dataset", "encoder"])["roc_auc"].mean().unstack("encoder")
    ref = means[d.reference]
    assert set(drawn) == set(means.columns) - {d.reference}
    for e, (x, marker) in drawn.items():  # x: % effect against the reference, by hand
        effect = _hodges_lehmann((means[e] - ref) / ref.abs())
        assert x == pytest.approx(100 * effect, abs=1e-9)
        assert marker == VERDICT_MARKERS[d.table.loc[e, "verdict"]][0]
    dashed = [line for line in ax.lines if line.get_linestyle() == "--"]
    assert len(dashed) == 1 and dashed[0].get_xdata()[0] == pytest.approx(-100 * d.rule.margin)
    chosen = [t.get_text() for t in ax.get_yticklabels() if "(chosen)" in t.get_text()]
    assert chosen == [f"{c}  (chosen)" for c in d.choice if c != d.reference]


def test_leakage_plot_draws_each_settings_gap_excess(rng):
    df = fake_results(
        rng, n_datasets=3, encoders=("onehot", "te", "te_leaky"), folds=8, skill={"te": 0.08}, leaky=("te_leaky",)
    )
    audit = stats.leakage_audit(df)
    ax = figures.leakage_plot(audit).axes[0]
    drawn = _marked(ax)
    gap = (df["train_roc_auc"] - df["roc_auc"]).groupby([df["dataset"], df["encoder"]]).mean()
    assert set(drawn) == {f"te_leaky vs te · {ds}" for ds in ("d0", "d1", "d2")}
    for ds in ("d0", "d1", "d2"):  # optimism gap minus the twin's, mean over folds, by hand
        x, marker = drawn[f"te_leaky vs te · {ds}"]
        assert x == pytest.approx(gap[ds, "te_leaky"] - gap[ds, "te"], abs=1e-12)
        row = audit.set_index("dataset").loc[ds]
        assert marker == ("s" if row["flagged"] else "o")
        assert _segments(ax)[f"te_leaky vs te · {ds}"] == pytest.approx((row["gap_low"], row["gap_high"]))
    flagged = [t.get_text() for t in ax.texts if t.get_text().startswith("  flagged")]
    assert len(flagged) == int(audit["flagged"].sum())


# ------------------------------------------------------------------------ degenerate
def test_one_dataset_rank_plot_but_no_cd(rng):
    df = fake_results(rng, n_datasets=1)
    comps, recs = _comparisons(df)
    ax = figures.rank_plot(comps, recs).axes[0]
    drawn = {e: x for e, (x, _) in _marked(ax).items()}  # the ranks on d0 itself
    assert drawn == pytest.approx(_hand_ranks(df, "lin", "roc_auc").to_dict())
    assert "no interval: too few datasets" in ax.get_title(loc="left")
    assert _segments(ax) == {}  # and no whisker drawn
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


def test_regression_only_draws_errors_the_right_way_up(rng):
    df = fake_results(
        rng, task="regression", skill={"te": 0.05}, encoders=("onehot", "codes", "te", "te_in"), leaky=("te_in",)
    )
    comps, recs = _comparisons(df, metric="rmse")
    # ranks: the smallest RMSE ranks first
    ax = figures.rank_plot(comps, recs).axes[0]
    hand = _hand_ranks(df, "lin", "rmse")
    assert {e: x for e, (x, _) in _marked(ax).items()} == pytest.approx(hand.to_dict())
    assert hand.idxmin() == "te" and ax.get_yticklabels()[0].get_text() == "te"
    assert " · RMSE · 4 dataset(s)" in ax.get_title(loc="left")
    # heatmap: % above the smallest RMSE of each dataset
    ax = figures.relative_heatmap(df, "lin").axes[0]
    means = df.groupby(["dataset", "encoder"])["rmse"].mean().unstack("encoder")
    hand = 100 * means.sub(means.min(axis=1), axis=0).div(means.min(axis=1), axis=0)
    rows = [t.get_text().split()[0] for t in ax.get_yticklabels()]
    cols = [t.get_text() for t in ax.get_xticklabels()]
    np.testing.assert_allclose(ax.images[0].get_array().filled(np.nan), hand.loc[rows, cols])
    assert cols[0] == "te"
    # leakage: the gap of an error is relative, (test - train) / test, minus the twin's
    ax = figures.leakage_plot(stats.leakage_audit(df)).axes[0]
    rel = ((df["rmse"] - df["train_rmse"]) / df["rmse"]).groupby([df["dataset"], df["encoder"]]).mean()
    drawn = _marked(ax)
    assert set(drawn) == {f"te_in vs te · d{i}" for i in range(4)}
    for i in range(4):  # loop over datasets
        x, _ = drawn[f"te_in vs te · d{i}"]
        assert x == pytest.approx(rel[f"d{i}", "te_in"] - rel[f"d{i}", "te"], abs=1e-12)
        assert x > 0.3  # the planted leak: training error 0.4 below the test error


def test_regime_plot_draws_each_encoders_effect_under_each_regime(rng):
    from harness.reporting._tuning import REGIME_MARKERS, regime_plot

    frames = {
        "defaults": fake_results(rng, n_datasets=8, encoders=("onehot", "codes", "te"), skill={"te": 0.03}),
        "tuned-model": fake_results(rng, n_datasets=8, encoders=("onehot", "codes", "te"), skill={"codes": 0.02}),
    }
    rule = stats.DecisionRule(reference="onehot")
    decs = {("lin", r): stats.decide(df, "lin", "roc_auc", rule) for r, df in frames.items()}
    ax = regime_plot(decs).axes[0]
    names = [t.get_text() for t in ax.get_yticklabels()]
    assert names == ["codes", "te"]  # the candidates, reference left out
    by_marker = {mk: r for r, (mk, _) in REGIME_MARKERS.items()}
    drawn = {}
    for line in ax.lines:
        if line.get_linestyle() == "None":
            for x, y in zip(line.get_xdata(), line.get_ydata()):
                drawn[(names[round(y)], by_marker[line.get_marker()])] = float(x)
    for regime, df in frames.items():  # x: % effect against onehot, by hand from the frame
        means = df.groupby(["dataset", "encoder"])["roc_auc"].mean().unstack("encoder")
        for e in names:
            effect = _hodges_lehmann((means[e] - means["onehot"]) / means["onehot"].abs())
            assert drawn[(e, regime)] == pytest.approx(100 * effect, abs=1e-9)
    dashed = [line for line in ax.lines if line.get_linestyle() == "--"]
    margin = decs[("lin", "defaults")].rule.margin
    assert len(dashed) == 1 and dashed[0].get_xdata()[0] == pytest.approx(-100 * margin)
    legend = [t.get_text() for t in ax.figure.legends[0].get_texts()]
    assert legend == ["defaults", "tuned-model"]
