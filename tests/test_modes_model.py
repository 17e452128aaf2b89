"""Mode classifier: predictions vs known truth, skops files and refusals."""

import json
import zipfile

import numpy as np
import pytest
import skops.io as sio
from modes_textures import mixed_field, small_model, small_training_set, texture

from fracto.classes import MODES, UNCLASSIFIED
from fracto.errors import FractoInputError
from fracto.modes.model import (
    ModeClassifier,
    UnweightedBinsBooster,
    card_path_for,
    load_model,
    save_model,
    sha256_of,
    write_model_card,
)
from fracto.modes.pipeline import classify_image


def test_probabilities_are_calibrated_shape():
    m = small_model()
    ts = small_training_set()
    p = m.predict_proba(ts.X[:50])
    assert list(m.classes_) == list(MODES)
    np.testing.assert_allclose(p.sum(axis=1), 1.0, atol=1e-6)
    assert (p >= 0).all()


def test_held_out_field_fractions_near_truth():
    # Truth known by construction: the label image of an unseen seed and grain size.
    img, lab = mixed_field(320, 32, seed=101, patch_px=160)
    res = classify_image(img, small_model(), seed=0, n_boot=200)
    truth = {m: float((lab == i + 1).mean()) for i, m in enumerate(MODES)}
    d = res.fractions.to_dict()
    err = [abs(d[m]["value"] - truth[m]) for m in MODES]
    # tolerance for a tiny test model on invented textures (bench/ holds the real targets)
    assert max(err) < 0.15, (d, truth)
    assert sum(v["value"] for v in d.values()) == pytest.approx(1.0)
    assert res.label_map.shape == img.shape


@pytest.mark.parametrize("mode", [1, 2, 3, 4])
def test_pure_single_mode_field_is_that_mode(mode):
    # Analytic sanity check: a field of one texture only must come out as that mode.
    img = texture(mode, (256, 256), 30, np.random.default_rng(200 + mode))
    res = classify_image(img, small_model(), n_boot=100)
    assert res.fractions.to_dict()[MODES[mode - 1]]["value"] >= 0.8


def test_threshold_sends_unsure_regions_to_unclassified():
    img, _ = mixed_field(256, 30, seed=102)
    r_hi = classify_image(img, small_model(), threshold=0.999, n_boot=50)
    r_lo = classify_image(img, small_model(), threshold=0.0, n_boot=50)
    hi, lo = r_hi.fractions_uncorrected.to_dict(), r_lo.fractions_uncorrected.to_dict()
    assert lo[UNCLASSIFIED]["value"] == 0.0
    assert hi[UNCLASSIFIED]["value"] > lo[UNCLASSIFIED]["value"]
    # the corrected fractions use every region's best class: no unclassified share,
    # and the threshold does not move them
    assert r_hi.fractions.to_dict()[UNCLASSIFIED]["value"] == 0.0
    np.testing.assert_allclose(r_hi.fractions.value, r_lo.fractions.value)
    assert r_hi.correction["unclassified_uncorrected"] == hi[UNCLASSIFIED]["value"]
    with pytest.raises(FractoInputError):
        classify_image(img, small_model(), threshold=1.5)


def test_skops_round_trip_and_card(tmp_path):
    m = small_model()
    path = tmp_path / "m.skops"
    sha = save_model(m, path)
    assert sha == sha256_of(path)
    with zipfile.ZipFile(path) as z:  # a skops archive, no pickle inside
        assert not any(n.endswith(".pkl") for n in z.namelist())
    back = load_model(path)
    X = small_training_set().X[:40]
    np.testing.assert_array_equal(back.predict_proba(X), m.predict_proba(X))
    card = write_model_card(path, back, training={"n_images": 8}, seed=0)
    assert card == card_path_for(path)
    d = json.loads(card.read_text())
    assert d["sha256"] == sha and d["classes"] == list(MODES)
    assert d["feature_set_version"] == m.feature_set_version_


def test_foreign_untrusted_and_old_files_are_refused(tmp_path):
    from fractions import Fraction

    from sklearn.linear_model import LogisticRegression

    # not a skops file at all
    junk = tmp_path / "junk.skops"
    junk.write_bytes(b"not a model")
    with pytest.raises(FractoInputError, match="not a fracto model"):
        load_model(junk)
    # a skops file of something else
    other = tmp_path / "other.skops"
    sio.dump(LogisticRegression().fit([[0.0], [1.0]], [0, 1]), other)
    with pytest.raises(FractoInputError, match="not a fracto mode model"):
        load_model(other, trust=True)
    # a fracto model carrying a type fracto does not expect: refused unless trusted
    m = small_model()
    odd = ModeClassifier(MODES).set_params(**m.get_params())
    odd.__dict__.update(m.__dict__)
    odd.extra_ = Fraction(1, 3)  # fractions.Fraction: not in skops' or fracto's trusted set
    p_odd = tmp_path / "odd.skops"
    sio.dump(odd, p_odd)
    with pytest.raises(FractoInputError, match="--trust"):
        load_model(p_odd)
    assert isinstance(load_model(p_odd, trust=True), ModeClassifier)
    # another feature-set version
    old = ModeClassifier(MODES)
    old.__dict__.update(m.__dict__)
    old.feature_set_version_ = "fracto-modes-0"
    p_old = tmp_path / "old.skops"
    sio.dump(old, p_old)
    with pytest.raises(FractoInputError, match="feature set"):
        load_model(p_old)
    with pytest.raises(FractoInputError, match="does not exist"):
        load_model(tmp_path / "missing.skops")


def test_training_refuses_unknown_labels():
    ts = small_training_set()
    with pytest.raises(FractoInputError):
        ModeClassifier(("intergranular", "ductile")).fit(ts.X, ts.y, ts.groups)


# ---------------------------------------------------------------- held-out contract


def _scored_model():
    """A tiny model scored on whole held-out images (six small fields)."""
    from fracto.modes.scoring import training_data_from_arrays

    items = []
    for seed, grain in zip(range(6), (20, 28, 36) * 2, strict=True):
        img, lab = mixed_field(192, grain, 600 + seed, patch_px=96)
        items.append((img, lab, f"f{seed}"))
    ts, images = training_data_from_arrays(items, MODES, max_regions_per_image=200)
    m = ModeClassifier(MODES, max_iter=20, n_importance_repeats=1).fit(
        ts.X, ts.y, ts.groups, feature_names=ts.names, score_images=images
    )
    return m, ts, images


def test_whole_image_confusion_conserves_each_true_area():
    # Identity: every block's true class area lands in exactly one predicted column,
    # so each row of an image's confusion sums to that class's true area.
    m, ts, images = _scored_model()
    assert m.confusion_per_group_.shape == (len(images), 4, 4)
    for cm, img in zip(m.confusion_per_group_, images, strict=True):
        np.testing.assert_allclose(cm.sum(axis=1), img.block_truth.sum(axis=(0, 1)), rtol=1e-9)
    np.testing.assert_allclose(m.confusion_, m.confusion_per_group_.sum(axis=0))
    assert m.confusion_groups_ == [str(i.group) for i in images]
    assert "whole held-out images" in m.confusion_source_
    assert ((m.confidence_per_group_ > 0.25) & (m.confidence_per_group_ <= 1.0)).all()
    imp = m.feature_importance_
    assert imp.shape == (ts.X.shape[1],) and np.isfinite(imp).all()
    s = m.cv_summary()
    assert s["labels"] == list(MODES) and 0.0 < s["area_accuracy"] <= 1.0


def test_tile_confusion_is_out_of_fold():
    # Reference: sklearn's cross_val_predict with the same grouped folds and the same
    # (uncalibrated) booster. The stored labels come from calibrators fitted without
    # the fold too, which costs a few points on 16 tiny images (measured 0.79 vs 0.84),
    # so the held-out accuracy must be near sklearn's and below the in-sample one.
    from sklearn.metrics import confusion_matrix
    from sklearn.model_selection import GroupKFold, cross_val_predict

    m = small_model()
    ts = small_training_set()
    cm = m.confusion_
    assert cm.sum() == len(ts.y) and "training tiles" in m.confusion_source_
    # same booster (scikit-learn's, with bin edges from the unweighted data)
    base = UnweightedBinsBooster(
        max_iter=40,
        max_leaf_nodes=15,
        early_stopping=False,
        class_weight="balanced",
        random_state=0,
    )
    ref_pred = cross_val_predict(base, ts.X, ts.y, groups=ts.groups, cv=GroupKFold(3))
    ref = confusion_matrix(ts.y, ref_pred, labels=list(MODES))
    assert np.trace(cm) / cm.sum() == pytest.approx(np.trace(ref) / ref.sum(), abs=0.08)
    in_sample = float((m.predict_best(ts.X) == ts.y).mean())
    assert in_sample > np.trace(cm) / cm.sum()


def test_feature_references_and_contract_survive_skops(tmp_path):
    m = small_model()
    X = small_training_set().X
    np.testing.assert_allclose(m.feature_reference_, np.median(X, axis=0), rtol=1e-6)
    np.testing.assert_allclose(m.feature_quantiles_[0], np.percentile(X, 5, axis=0), rtol=1e-6)
    p = tmp_path / "c.skops"
    save_model(m, p)
    back = load_model(p)  # no --trust needed: only known types and plain arrays
    for a in ("confusion_", "confusion_per_group_", "feature_reference_", "feature_quantiles_"):
        np.testing.assert_array_equal(getattr(back, a), getattr(m, a))
    assert back.confusion_groups_ == m.confusion_groups_


def test_sigmoid_and_two_class_models():
    ts = small_training_set()
    keep = np.isin(ts.y, ["ductile", "fatigue"])
    m = ModeClassifier(MODES, max_iter=10, calibration="sigmoid", n_importance_repeats=0).fit(
        ts.X[keep], ts.y[keep], ts.groups[keep]
    )
    p = m.predict_proba(ts.X[keep][:30])
    assert p.shape == (30, 2)
    np.testing.assert_allclose(p.sum(axis=1), 1.0)
    assert m.confusion_.shape == (2, 2)
    none = ModeClassifier(MODES, max_iter=10, calibration="none").fit(ts.X, ts.y, ts.groups)
    assert none.confusion_ is None and none.predict_proba(ts.X[:5]).shape == (5, 4)


def test_calibration_ensemble_members_average_to_the_model():
    # Code walking the ensemble (estimator_.calibrated_classifiers_) sees the calibrated
    # fold boosters; with ensemble=True their mean is the model's probability.
    ts = small_training_set()
    m = ModeClassifier(MODES, max_iter=10, random_state=0, ensemble=True).fit(
        ts.X, ts.y, ts.groups
    )
    assert m.final_booster_ is None
    X = ts.X[:25]
    members = m.member_proba(X)
    assert members.shape == (m.n_cv_folds_, 25, 4)
    np.testing.assert_allclose(members.mean(axis=0), m.predict_proba(X), atol=1e-12)
    assert list(m.estimator_.classes_) == list(m.classes_)
    # the default (one refitted booster) keeps the same members for disagreement
    d = small_model()
    assert d.final_booster_ is not None
    assert d.member_proba(X).shape == (d.n_cv_folds_, 25, 4)


def test_refitted_booster_matches_sklearn_calibrated_classifier_cv():
    # Reference: scikit-learn's CalibratedClassifierCV(ensemble=False) with the same
    # grouped folds fits its isotonic one-vs-rest calibrators on cross_val_predict
    # decision scores and applies them to one estimator fitted on all data; the
    # boosting is deterministic (no subsampling, no early stopping), so fracto's
    # default model must give the same probabilities.
    from sklearn.calibration import CalibratedClassifierCV
    from sklearn.model_selection import GroupKFold

    ts = small_training_set()
    m = ModeClassifier(MODES, max_iter=5, random_state=0, n_importance_repeats=0).fit(
        ts.X, ts.y, ts.groups
    )
    # same booster (scikit-learn's, with bin edges from the unweighted data)
    base = UnweightedBinsBooster(
        max_iter=5,
        max_leaf_nodes=15,
        early_stopping=False,
        class_weight="balanced",
        random_state=0,
    )
    cv = list(GroupKFold(3).split(ts.X, ts.y, ts.groups))
    ref = CalibratedClassifierCV(base, method="isotonic", cv=cv, ensemble=False)
    ref.fit(np.asarray(ts.X, dtype=np.float32), ts.y)
    X = np.asarray(ts.X[::7], dtype=np.float32)
    order = [list(ref.classes_).index(c) for c in m.classes_]
    np.testing.assert_allclose(m.predict_proba(X), ref.predict_proba(X)[:, order], atol=1e-9)
