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
    hi = classify_image(img, small_model(), threshold=0.999, n_boot=50).fractions.to_dict()
    lo = classify_image(img, small_model(), threshold=0.0, n_boot=50).fractions.to_dict()
    assert lo[UNCLASSIFIED]["value"] == 0.0
    assert hi[UNCLASSIFIED]["value"] > lo[UNCLASSIFIED]["value"]
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
