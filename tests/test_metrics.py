"""``harness.metrics.score`` against scikit-learn's own metric functions, which are the
reference throughout (``roc_auc_score``, ``log_loss``, ``accuracy_score``,
``balanced_accuracy_score``, ``root_mean_squared_error``, ``mean_absolute_error``,
``r2_score``), plus the two cases a fold adds: classes absent from the test fold and
classes absent from the training fold."""

from __future__ import annotations

import numpy as np
import pytest
from sklearn import metrics as skm
from sklearn.linear_model import LogisticRegression
from sklearn.preprocessing import label_binarize

from harness.metrics import CLASSIFICATION_METRICS, GREATER_IS_BETTER, METRICS, REGRESSION_METRICS, metrics_for, score

CLASSES = {"binary": np.array(["no", "yes"]), "multiclass": np.array(["a", "b", "c", "d"])}


def _fold(rng, task, n=80):
    """Invented test fold: labels covering every class and a probability matrix."""
    classes = CLASSES[task]
    y = np.r_[classes, rng.choice(classes, n - len(classes))]
    proba = rng.dirichlet(np.ones(len(classes)), size=n)
    proba[np.arange(n), np.searchsorted(classes, y)] += 0.3  # some skill: AUC away from 0.5
    return y, proba / proba.sum(axis=1, keepdims=True), classes


def _sklearn(name, task, y, proba, classes):
    """The reference: scikit-learn's function for ``name`` called as its docs describe."""
    label = classes[proba.argmax(axis=1)]
    if name == "roc_auc" and task == "binary":
        return skm.roc_auc_score(y, proba[:, 1])  # scikit-learn: the greater label is positive
    if name == "roc_auc":
        return skm.roc_auc_score(y, proba, multi_class="ovr", average="macro", labels=classes)
    return {
        "log_loss": lambda: skm.log_loss(y, proba, labels=classes),
        "accuracy": lambda: skm.accuracy_score(y, label),
        "balanced_accuracy": lambda: skm.balanced_accuracy_score(y, label),
    }[name]()


# ----------------------------------------------------------------- against scikit-learn
@pytest.mark.parametrize("task", ["binary", "multiclass"])
@pytest.mark.parametrize("name", CLASSIFICATION_METRICS)
def test_classification_metric_equals_scikit_learn(rng, name, task):
    y, proba, classes = _fold(rng, task)
    got = score(name, task, y, proba, classes)
    assert got == pytest.approx(_sklearn(name, task, y, proba, classes), rel=1e-12, abs=1e-12)


@pytest.mark.parametrize(
    "name, reference", [("rmse", skm.root_mean_squared_error), ("mae", skm.mean_absolute_error), ("r2", skm.r2_score)]
)
def test_regression_metric_equals_scikit_learn(rng, name, reference):
    y = rng.normal(10, 3, 50)
    pred = y + rng.normal(0, 1, 50)
    assert score(name, "regression", y, pred) == pytest.approx(reference(y, pred), rel=1e-12)
    assert score(name, "regression", list(y), list(pred)) == score(name, "regression", y, pred)


@pytest.mark.parametrize(
    "name, scorer",
    [
        ("roc_auc", "roc_auc"),
        ("log_loss", "neg_log_loss"),
        ("accuracy", "accuracy"),
        ("balanced_accuracy", "balanced_accuracy"),
        ("rmse", "neg_root_mean_squared_error"),
        ("mae", "neg_mean_absolute_error"),
        ("r2", "r2"),
    ],
)
def test_orientation_follows_scikit_learns_scorer_names(name, scorer):
    # scikit-learn names a scorer neg_<metric> exactly when lower values are better
    assert scorer in skm.get_scorer_names()
    assert GREATER_IS_BETTER[name] == (not scorer.startswith("neg_"))


def test_metrics_per_task():
    assert metrics_for("regression") == REGRESSION_METRICS == ("rmse", "mae", "r2")
    assert metrics_for("binary") == metrics_for("multiclass") == CLASSIFICATION_METRICS
    assert set(METRICS) == set(GREATER_IS_BETTER) - {"task_score"}


# ------------------------------------------------------- classes absent from the test fold
def test_multiclass_auc_averages_over_the_classes_present_in_the_fold(rng):
    classes = np.array(["a", "b", "c", "d"])
    y = np.r_[["a", "b", "d"], rng.choice(["a", "b", "d"], 57)]  # no 'c' in this fold
    proba = rng.dirichlet(np.ones(4), size=60)
    got = score("roc_auc", "multiclass", y, proba, classes)
    # scikit-learn's roc_auc_score on the one-vs-rest indicator of the present classes,
    # macro-averaged (the multiclass form refuses a fold that lacks a labelled class)
    present = np.array([0, 1, 3])
    reference = skm.roc_auc_score(label_binarize(y, classes=classes[present]), proba[:, present], average="macro")
    assert got == pytest.approx(reference, rel=1e-12)
    by_hand = np.mean([skm.roc_auc_score(y == classes[j], proba[:, j]) for j in present])
    assert got == pytest.approx(by_hand, rel=1e-12)
    moved = proba.copy()
    moved[:, 2] = rng.random(60)  # the absent class's column does not count
    assert score("roc_auc", "multiclass", y, moved, classes) == pytest.approx(got, rel=1e-12)


@pytest.mark.parametrize("task, classes", [("binary", ["no", "yes"]), ("multiclass", ["a", "b", "c"])])
def test_auc_is_nan_when_the_fold_holds_one_class(task, classes):
    proba = np.full((5, len(classes)), 1 / len(classes))
    assert np.isnan(score("roc_auc", task, [classes[0]] * 5, proba, classes))


def test_binary_auc_reads_the_second_class_column(rng):
    y, proba, classes = _fold(rng, "binary")
    flipped = score("roc_auc", "binary", y, proba[:, ::-1], classes)
    assert flipped == pytest.approx(1 - score("roc_auc", "binary", y, proba, classes), rel=1e-12)


# ---------------------------------------------------- classes absent from the training fold
def test_alignment_puts_each_trained_class_in_its_dataset_column():
    # the runner's alignment of predict_proba columns to the dataset's classes
    from harness.cellwork import _align

    classes = np.array(["a", "b", "c", "d"])
    proba = np.array([[0.25, 0.75], [0.6, 0.4]])
    full = _align(proba, np.array(["b", "d"]), classes)
    np.testing.assert_array_equal(full, [[0, 0.25, 0, 0.75], [0, 0.6, 0, 0.4]])
    assert _align(proba, np.array(["x", "y"]), np.array(["x", "y"])) is proba


def test_a_class_missing_from_training_still_counts_in_the_test_metrics(rng):
    from harness.cellwork import _align

    classes = np.array(["a", "b", "c"])
    X_train = rng.normal(size=(60, 2))
    y_train = np.where(X_train[:, 0] > 0, "a", "b")  # 'c' never seen in training
    X_test = rng.normal(size=(30, 2))
    y_test = np.r_[["c"] * 6, np.where(X_test[6:, 0] > 0, "a", "b")]
    model = LogisticRegression().fit(X_train, y_train)
    proba = _align(model.predict_proba(X_test), model.classes_, classes)
    assert proba.shape == (30, 3) and np.all(proba[:, 2] == 0)
    np.testing.assert_allclose(proba[:, :2], model.predict_proba(X_test))
    # ROC AUC: 'c' counts with a constant score (AUC 0.5, all ties), scikit-learn per class
    per_class = [skm.roc_auc_score(y_test == c, proba[:, j]) for j, c in enumerate(classes)]
    assert per_class[2] == 0.5
    assert score("roc_auc", "multiclass", y_test, proba, classes) == pytest.approx(np.mean(per_class))
    # accuracy: every 'c' row is wrong
    label = classes[proba.argmax(axis=1)]
    assert score("accuracy", "multiclass", y_test, proba, classes) == skm.accuracy_score(y_test, label)
    assert score("balanced_accuracy", "multiclass", y_test, proba, classes) == pytest.approx(
        skm.balanced_accuracy_score(y_test, label)
    )
    # log loss: finite; the zero column is clipped at 1e-15 and rows renormalised before
    # scikit-learn's log_loss (which would clip at the float64 epsilon instead)
    clipped = np.clip(proba, 1e-15, 1.0)
    clipped /= clipped.sum(axis=1, keepdims=True)
    got = score("log_loss", "multiclass", y_test, proba, classes)
    assert np.isfinite(got) and got == pytest.approx(skm.log_loss(y_test, clipped, labels=classes))
    assert got > skm.log_loss(y_test[6:], proba[6:, :2], labels=classes[:2])  # 'c' rows cost


# ------------------------------------------------------------------ undefined and refused
def test_r2_of_one_row_is_nan():
    assert np.isnan(score("r2", "regression", [1.0], [2.0]))


@pytest.mark.parametrize(
    "name, task, pattern",
    [
        ("roc_auc", "regression", "metric 'roc_auc' does not apply to regression"),
        ("rmse", "binary", "metric 'rmse' does not apply to classification"),
        ("f1", "multiclass", "metric 'f1' does not apply to classification"),
    ],
)
def test_a_metric_of_the_other_task_is_refused(name, task, pattern):
    with pytest.raises(ValueError, match=pattern):
        score(name, task, [0, 1], np.array([[0.5, 0.5], [0.5, 0.5]]), [0, 1])
