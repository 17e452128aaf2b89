"""fracto train --base: continue from a model; masks drawn on frames with a top banner.

A tiny base model is trained here on synthetic surfaces (fracto.synth via
default_model.synthetic_field, 160 px, fixed seeds); the new material's masks
are the generator's true label images. The sha256 in the card is checked
against hashlib, the stored region counts against numpy.load of the file.
"""

from __future__ import annotations

import hashlib
import json

import cv2
import numpy as np
import pytest
from PIL import Image

from fracto.classes import MODES
from fracto.cli import main
from fracto.modes.default_model import synthetic_field
from fracto.modes.training import (
    crop_mask_like_image,
    read_mask_list,
    set_from_arrays,
    set_from_masks,
    train_and_save,
)

BASE_MODES = {"intergranular": 0.4, "transgranular": 0.3, "ductile": 0.3, "fatigue": 0.0}
NEW_MODES = {"intergranular": 0.0, "transgranular": 0.0, "ductile": 0.5, "fatigue": 0.5}
BASE_SETTINGS = {
    "max_iter": 12,
    "threshold": 0.4,
    "calibration": "sigmoid",
    "n_calibration_folds": 2,
    "scale_um": None,
}


def _field(seed, modes, grain_px=18.0, size=160):
    return synthetic_field(seed, size=size, grain_px=grain_px, modes=modes, randomise_render=False)


@pytest.fixture(scope="module")
def base_model(tmp_path_factory):
    d = tmp_path_factory.mktemp("base")
    items = []
    for s in range(4):
        img, lab, _ = _field(7100 + s, BASE_MODES)
        items.append((img, lab, f"base{s}"))
    ts = set_from_arrays(items, MODES, max_regions_per_image=120, seed=0)
    path = d / "base.skops"
    train_and_save(
        ts,
        path,
        classes=MODES,
        model_params=BASE_SETTINGS,
        n_splits=2,
        importance=False,
        regions_out=d / "base.regions.npz",
    )
    return path


@pytest.fixture(scope="module")
def new_masks(tmp_path_factory):
    """Three images of the new material (ductile and fatigue) with their true masks."""
    d = tmp_path_factory.mktemp("new")
    rows = []
    for s in range(3):
        img, lab, _ = _field(7200 + s, NEW_MODES, grain_px=30.0)
        ip, mp = d / f"im{s}.png", d / f"mask{s}.png"
        Image.fromarray(np.round(img * 255).astype(np.uint8)).save(ip)
        # the generator's label 4 (fatigue) is painted as mask value 4: the new class
        Image.fromarray(lab.astype(np.uint8)).save(mp)
        rows.append(f"{ip},{mp}")
    lst = d / "list.csv"
    lst.write_text("image,mask\n" + "\n".join(rows) + "\n")
    return lst


def _train(args, capsys):
    rc = main(["train", *args, "--json"])
    cap = capsys.readouterr()
    assert rc == 0, cap.err
    return json.loads(cap.out)


def test_base_classes_settings_and_card(tmp_path, base_model, new_masks, capsys):
    base_card = json.loads(base_model.with_name("base.card.json").read_text())
    base_classes = base_card["classes"]
    # fatigue was absent from the base fields: the base knows three classes
    assert base_classes == ["intergranular", "transgranular", "ductile"]
    out = tmp_path / "adapted.skops"
    args = ["--masks", str(new_masks), "--out", str(out), "--base", str(base_model)]
    card = _train([*args, "--classes", "striated-zone", "--cv", "2"], capsys)
    # classes carried over in their order, the new class after them (mask value 4)
    assert card["classes"] == [*base_classes, "striated-zone"]
    b = card["base_model"]
    assert b["model_file"] == "base.skops" and b["new_classes"] == ["striated-zone"]
    assert b["sha256"] == hashlib.sha256(base_model.read_bytes()).hexdigest()
    with np.load(base_model.with_name("base.regions.npz"), allow_pickle=False) as z:
        n_base = len(z["y"])
    assert b["n_base_regions"] == n_base
    ts_new = set_from_masks(read_mask_list(new_masks), [*base_classes, "striated-zone"])
    assert b["n_new_regions"] == len(ts_new.y)
    assert card["training_data"]["n_regions"] == n_base + len(ts_new.y)
    assert card["training_data"]["new_regions_per_class"]["striated-zone"] > 0
    assert b["new_region_weight"] == 10.0
    # settings inherited from the base
    for k, v in BASE_SETTINGS.items():
        assert card["settings"][k] == v, k
    assert set(BASE_SETTINGS) <= set(b["settings_inherited"])
    # the new regions are scored on their own in the grouped cross-validation
    new_cv = card["cross_validation"]["new_regions"]
    assert new_cv["n_regions_scored"] == len(ts_new.y)
    # the held-out confusion holds only the new material's images (three)
    assert card["held_out_area_confusion"]["n_images_scored"] <= 3
    # the adapted model stores its regions: every new one is kept
    with np.load(tmp_path / "adapted.regions.npz", allow_pickle=False) as z:
        assert (z["y"] == "striated-zone").sum() == (ts_new.y == "striated-zone").sum()
    # the adapted model (weighted boosters) loads as a fracto model
    from fracto.modes.model import load_model

    assert list(load_model(out).classes_) == card["classes"]
    # the same list given as the full class list is the same class order
    full = ",".join([*base_classes, "striated-zone"])
    card2 = _train([*args, "--classes", full, "--cv", "2"], capsys)
    assert card2["classes"] == card["classes"]


def test_explicit_options_override_the_base(tmp_path, base_model, new_masks, capsys):
    out = tmp_path / "over.skops"
    args = ["--masks", str(new_masks), "--out", str(out), "--base", str(base_model)]
    extra = ["--threshold", "0.65", "--max-iter", "7", "--new-weight", "3", "--cv", "2"]
    card = _train([*args, "--classes", "striated-zone", *extra], capsys)
    s = card["settings"]
    assert s["threshold"] == 0.65 and s["max_iter"] == 7
    assert s["calibration"] == "sigmoid" and s["n_calibration_folds"] == 2  # still the base's
    assert card["base_model"]["new_region_weight"] == 3.0
    assert {"threshold", "max_iter"} <= set(card["base_model"]["settings_given"])
    assert card["settings_source"]["calibration"] == "base"


def test_bad_base_is_refused_in_one_sentence(tmp_path, base_model, new_masks, capsys):
    import skops.io as sio
    from sklearn.linear_model import LogisticRegression

    from fracto.modes.model import load_model

    not_model = tmp_path / "notes.skops"
    not_model.write_text("not a model\n")
    other = tmp_path / "other.skops"
    other.write_bytes(sio.dumps(LogisticRegression()))
    old = load_model(base_model)
    old.feature_set_version_ = "fracto-modes-0"
    old_path = tmp_path / "old.skops"
    old_path.write_bytes(sio.dumps(old))
    out = str(tmp_path / "x.skops")
    for bad, word in (
        (not_model, "not a fracto model"),
        (other, "fracto"),
        (old_path, "feature set"),
    ):
        rc = main(["train", "--masks", str(new_masks), "--out", out, "--base", str(bad)])
        err = capsys.readouterr().err
        assert rc == 2, err
        assert word in err and "Traceback" not in err
        assert len(err.strip().splitlines()) == 1
    # a class list that reorders the base's classes
    rc = main(
        ["train", "--masks", str(new_masks), "--out", out, "--base", str(base_model),
         "--classes", "ductile,intergranular"]
    )  # fmt: skip
    err = capsys.readouterr().err
    assert rc == 2 and len(err.strip().splitlines()) == 1
    # a weight for new regions without a base
    rc = main(["train", "--masks", str(new_masks), "--out", out, "--new-weight", "2"])
    assert rc == 2


# ------------------------------------------------------------ banner regression


def _with_top_banner(img8: np.ndarray, rows: int) -> np.ndarray:
    """The image below a black information strip with white text and a bar."""
    w = img8.shape[1]
    strip = np.zeros((rows, w), np.uint8)
    cv2.putText(strip, "HV 15kV WD 9mm", (4, int(rows * 0.6)), cv2.FONT_HERSHEY_SIMPLEX,
                rows / 60, 255, 1, cv2.LINE_AA)  # fmt: skip
    cv2.rectangle(strip, (int(w * 0.7), rows // 3), (int(w * 0.9), rows // 3 + 3), 255, -1)
    return np.vstack([strip, img8])


@pytest.mark.parametrize("banner", ["auto", "top:30"])
def test_mask_on_full_frame_is_cut_like_the_image_top_banner(tmp_path, banner):
    img, _, _ = _field(7300, NEW_MODES, size=192)
    img8 = np.round(img * 255).astype(np.uint8)
    k = 30
    frame = _with_top_banner(img8, k)
    # labels in two horizontal bands, so a shift of k rows changes tile labels
    lab = np.where(np.arange(img8.shape[0])[:, None] < 96, 1, 3) * np.ones_like(img8)
    full_mask = np.vstack([np.zeros((k, img8.shape[1]), np.uint8), lab.astype(np.uint8)])
    fp = tmp_path / "frame.png"
    Image.fromarray(frame).save(fp)
    Image.fromarray(full_mask).save(tmp_path / "full.png")
    Image.fromarray(lab.astype(np.uint8)).save(tmp_path / "cropped.png")
    from fracto.io import read_sem_image

    sem = read_sem_image(fp, banner=banner)
    assert sem.banner["side"] == "top" and sem.banner["rows"] == k
    a = set_from_masks([(fp, tmp_path / "full.png")], MODES, banner=banner)
    b = set_from_masks([(fp, tmp_path / "cropped.png")], MODES, banner=banner)
    # the full-frame mask gives exactly the labels of the mask drawn on the cropped image
    np.testing.assert_array_equal(a.y, b.y)
    # same image, same features (float32 rounding in the filters aside)
    np.testing.assert_allclose(a.X, b.X, rtol=1e-5, atol=1e-7)
    assert set(a.y) == {"intergranular", "ductile"}


def test_crop_mask_like_image_both_sides():
    m = np.arange(10 * 4).reshape(10, 4)
    np.testing.assert_array_equal(
        crop_mask_like_image(m, (7, 4), {"side": "top", "rows": 3}), m[3:]
    )
    np.testing.assert_array_equal(
        crop_mask_like_image(m, (7, 4), {"side": "bottom", "rows": 3}), m[:7]
    )
    # a mask already of the image's size, or of another size, is left alone
    assert crop_mask_like_image(m, (10, 4), {"side": "top", "rows": 3}) is m
    assert crop_mask_like_image(m, (6, 4), {"side": "top", "rows": 3}) is m
