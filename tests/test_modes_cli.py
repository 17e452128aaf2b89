"""fracto classify / fracto train end to end, and bad input -> exit status 2."""

import json

import numpy as np
import pytest
from modes_textures import mixed_field, small_model, texture
from PIL import Image

from fracto.cli import main
from fracto.modes.model import save_model


def _png(path, arr):
    Image.fromarray(np.round(np.clip(arr, 0, 1) * 255).astype(np.uint8)).save(path)
    return str(path)


@pytest.fixture(scope="module")
def model_file(tmp_path_factory):
    p = tmp_path_factory.mktemp("model") / "m.skops"
    save_model(small_model(), p)
    return str(p)


def test_classify_json_and_overlay(tmp_path, model_file, capsys):
    img, _ = mixed_field(256, 30, seed=300)
    f = _png(tmp_path / "field.png", img)
    ov, lab = tmp_path / "ov.png", tmp_path / "lab.png"
    rc = main(
        [
            "classify",
            f,
            "--model",
            model_file,
            "--json",
            "--overlay",
            str(ov),
            "--labels",
            str(lab),
            "--seed",
            "3",
            "--n-boot",
            "100",
        ]
    )
    assert rc == 0
    d = json.loads(capsys.readouterr().out)
    assert set(d["fractions"]) == {
        "intergranular",
        "transgranular",
        "ductile",
        "fatigue",
        "unclassified",
    }
    for v in d["fractions"].values():
        assert v["ci95"][0] <= v["value"] <= v["ci95"][1]
    assert len(d["model"]["sha256"]) == 64
    assert d["pixel_size"]["calibrated"] is False and "scale" in d["pixel_size"]
    assert {"focus_laplacian_variance", "clipped_fraction", "noise_sigma", "fit_to_score"} <= set(
        d["quality"]
    )
    assert d["seed"] == 3 and "caution" in d and "version" in d
    assert Image.open(ov).format == "PNG"
    labels = np.asarray(Image.open(lab))
    assert labels.shape == img.shape and labels.max() <= 4


def test_classify_bad_input_exit_2(tmp_path, model_file, capsys):
    txt = tmp_path / "notes.png"
    txt.write_text("hello")
    assert main(["classify", str(txt), "--model", model_file]) == 2
    blank = _png(tmp_path / "blank.png", np.full((200, 200), 0.5))
    assert main(["classify", blank, "--model", model_file]) == 2
    sat = _png(tmp_path / "sat.png", np.ones((200, 200)))
    assert main(["classify", sat, "--model", model_file]) == 2
    tiny = _png(tmp_path / "tiny.png", np.random.default_rng(0).uniform(size=(20, 20)))
    assert main(["classify", tiny, "--model", model_file]) == 2
    field = _png(tmp_path / "f.png", texture(1, (200, 200), 30, np.random.default_rng(1)))
    bad_model = tmp_path / "bad.skops"
    bad_model.write_bytes(b"\x00" * 10)
    assert main(["classify", field, "--model", str(bad_model)]) == 2
    err = capsys.readouterr().err
    assert "Traceback" not in err
    assert all(line.startswith("fracto: ") for line in err.strip().splitlines())


def test_train_folders_leave_one_image_out(tmp_path, capsys):
    rng = np.random.default_rng(5)
    for mode, name in ((1, "intergranular"), (2, "transgranular"), (4, "fatigue")):
        d = tmp_path / "set" / name
        d.mkdir(parents=True)
        for k in range(2):
            a = texture(mode, (128, 128), 20 + 6 * k, rng)
            # real-world files: 8-bit JPEG and an RGBA screenshot
            if k == 0:
                Image.fromarray((a * 255).astype(np.uint8)).save(d / f"{k}.jpg", quality=85)
            else:
                rgba = np.dstack(
                    [(a * 255).astype(np.uint8)] * 3 + [np.full(a.shape, 255, np.uint8)]
                )
                Image.fromarray(rgba, "RGBA").save(d / f"{k}.png")
    out = tmp_path / "user.skops"
    rc = main(
        [
            "train",
            "--image-folders",
            str(tmp_path / "set"),
            "--out",
            str(out),
            "--leave-one-image-out",
            "--max-iter",
            "20",
            "--json",
        ]
    )
    assert rc == 0, capsys.readouterr().err
    card = json.loads(capsys.readouterr().out)
    assert card["cross_validation"]["scheme"] == "leave-one-image-out"
    assert card["cross_validation"]["n_splits"] == 6
    assert card["classes"] == ["intergranular", "transgranular", "fatigue"]
    cm = np.array(card["cross_validation"]["confusion_matrix"])
    assert cm.shape == (3, 3) and cm.sum() == card["cross_validation"]["n_regions_scored"]
    assert (tmp_path / "user.card.json").is_file()


def test_train_masks_with_own_class_and_bad_masks(tmp_path, capsys):
    rows = []
    for s in range(3):
        img, lab = mixed_field(160, 24, seed=400 + s, modes=(1, 2, 3))
        ip = _png(tmp_path / f"im{s}.png", img)
        mp = tmp_path / f"mask{s}.png"
        Image.fromarray(lab.astype(np.uint8)).save(mp)
        rows.append(f"{ip},{mp}")
    lst = tmp_path / "list.csv"
    lst.write_text("image,mask\n" + "\n".join(rows) + "\n")
    out = tmp_path / "qc.skops"
    rc = main(
        [
            "train",
            "--masks",
            str(lst),
            "--out",
            str(out),
            "--cv",
            "3",
            "--classes",
            "intergranular,transgranular,quasi-cleavage",
            "--max-iter",
            "20",
            "--json",
        ]
    )
    assert rc == 0, capsys.readouterr().err
    card = json.loads(capsys.readouterr().out)
    assert "quasi-cleavage" in card["classes"]
    # a mask of the wrong size
    Image.fromarray(np.ones((50, 50), np.uint8)).save(tmp_path / "mask0.png")
    assert main(["train", "--masks", str(lst), "--out", str(out)]) == 2
    # a mask with a label beyond the classes
    Image.fromarray(np.full((160, 160), 9, np.uint8)).save(tmp_path / "mask0.png")
    assert main(["train", "--masks", str(lst), "--out", str(out)]) == 2
    assert "outside" in capsys.readouterr().err


def test_classify_corrected_and_counted_fractions(tmp_path, model_file, capsys):
    img, _ = mixed_field(256, 30, seed=301)
    f = _png(tmp_path / "field.png", img)
    assert main(["classify", f, "--model", model_file, "--json", "--n-boot", "100"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["correction"]["applied"] is True
    assert d["fractions"]["unclassified"]["value"] == 0.0
    unc = d["fractions_uncorrected"]
    assert d["correction"]["unclassified_uncorrected"] == pytest.approx(
        unc["unclassified"]["value"]
    )
    assert sum(v["value"] for v in d["fractions"].values()) == pytest.approx(1.0)
    assert sum(v["value"] for v in unc.values()) == pytest.approx(1.0)
    for v in d["fractions"].values():
        assert v["ci95"][0] <= v["value"] <= v["ci95"][1]
    assert (
        main(
            ["classify", f, "--model", model_file, "--json", "--n-boot", "100", "--no-correction"]
        )
        == 0
    )
    off = json.loads(capsys.readouterr().out)
    assert off["correction"]["applied"] is False and "switched off" in off["correction"]["reason"]
    assert off["fractions"] == off["fractions_uncorrected"] == unc
    assert main(["classify", f, "--model", model_file, "--n-boot", "50"]) == 0
    assert "corrected" in capsys.readouterr().out


def test_explain_ranks_the_feature_that_decides():
    # Ground truth by construction: the class depends on feature 0 only, the other
    # columns are noise; setting feature 0 to its median must lower the predicted
    # class's probability most for nearly every region (the blocks on the seam between
    # the two halves average both classes and may go either way).
    from fracto.modes.explain import explain_regions
    from fracto.modes.model import ModeClassifier

    rng = np.random.default_rng(0)
    n = 600
    X = rng.normal(size=(n, 4)).astype(np.float32)
    y = np.where(X[:, 0] > 0, "ductile", "fatigue")
    groups = np.repeat(np.arange(6), n // 6)
    m = ModeClassifier(("ductile", "fatigue"), max_iter=15, n_importance_repeats=2).fit(
        X, y, groups, feature_names=["key", "n1", "n2", "n3"]
    )
    assert (
        max(
            dict(zip(m.feature_names_, m.feature_importance_, strict=True)).items(),
            key=lambda kv: kv[1],
        )[0]
        == "key"
    )
    Xt = rng.normal(size=(100, 4)).astype(np.float32)
    Xt[:, 0] = np.where(np.arange(100) % 10 < 5, 2.0, -2.0)  # left half one class
    e = explain_regions(m, Xt, (10, 10), np.zeros((11, 11), int), top=2, block_px=8)
    assert (e.features[..., 0] == 0).mean() > 0.9
    assert (e.drops[..., 0] >= e.drops[..., 1]).all()
    rec = e.records()
    assert len(rec) == 121 and rec[1]["x_px"] == 8.0
    assert set(rec[0]["top_features"][0]["training_percentiles"]) == {
        "p5",
        "p25",
        "p50",
        "p75",
        "p95",
    }


def test_classify_explain_files_and_confidence_overlay(tmp_path, model_file, capsys):
    import csv

    img, _ = mixed_field(192, 30, seed=302)
    f = _png(tmp_path / "field.png", img)
    ex_csv, ex_json, ov = tmp_path / "why.csv", tmp_path / "why.json", tmp_path / "ov.png"
    args = ["classify", f, "--model", model_file, "--n-boot", "50"]
    assert main([*args, "--explain", str(ex_csv), "--explain-top", "2"]) == 0
    rows = list(csv.DictReader(ex_csv.open()))
    assert rows and {r["rank"] for r in rows} == {"1", "2"}
    assert all(float(r["train_p5"]) <= float(r["train_p95"]) for r in rows)
    assert (
        main([*args, "--explain", str(ex_json), "--overlay", str(ov), "--overlay-confidence"]) == 0
    )
    d = json.loads(ex_json.read_text())
    assert len(d["regions"]) * 2 == len(rows) and len(d["regions"][0]["top_features"]) == 3
    assert Image.open(ov).format == "PNG"
    assert main([*args, "--explain", str(tmp_path / "why.txt")]) == 2
    assert main([*args, "--explain", str(ex_csv), "--explain-top", "0"]) == 2
    assert "Traceback" not in capsys.readouterr().err


def test_overlay_opacity_follows_confidence():
    # Where the model is sure the mode colour must be stronger than where it is at chance.
    from fracto.modes.overlay import overlay_png

    grey = np.full((400, 400), 0.5)
    lab = np.ones((400, 400), np.uint8)
    conf = np.where(np.arange(400)[None, :] < 200, 1.0, 0.25) * np.ones((400, 1))
    png = overlay_png(grey, lab, ("intergranular", "ductile"), confidence=conf)
    import io

    a = np.asarray(Image.open(io.BytesIO(png)).convert("RGB")).astype(float)
    # the 400 px image fills the left of the figure below a 40 px title band
    sure, unsure = a[240, 100], a[240, 300]
    assert np.ptp(sure) > np.ptp(unsure) + 20


def test_train_card_holds_the_held_out_contract(tmp_path, capsys):
    rows = []
    for s in range(3):
        img, lab = mixed_field(160, 24, seed=410 + s, modes=(1, 3))
        ip = _png(tmp_path / f"im{s}.png", img)
        mp = tmp_path / f"mask{s}.png"
        Image.fromarray(lab.astype(np.uint8)).save(mp)
        rows.append(f"{ip},{mp}")
    lst = tmp_path / "list.csv"
    lst.write_text("\n".join(rows) + "\n")
    out = tmp_path / "m.skops"
    args = ["train", "--masks", str(lst), "--out", str(out), "--cv", "3", "--max-iter", "10"]
    assert main(args) == 0
    assert "held-out area accuracy" in capsys.readouterr().out
    card = json.loads((tmp_path / "m.card.json").read_text())
    area = card["held_out_area_confusion"]
    cm = np.array(area["area_confusion"])
    assert cm.shape == (2, 2) and area["labels"] == ["intergranular", "ductile"]
    assert card["held_out_permutation_importance"]["top"]


def test_legend_shows_the_map_share_beside_the_corrected_fraction():
    # The painted map holds the counted labels; with a correction the legend names
    # both, so it never disagrees with the picture (percent rounding as Python's
    # format spec, no other source).
    from fracto.modes.overlay import legend_labels

    classes = ("intergranular", "transgranular")
    corrected = {"intergranular": 1.0, "transgranular": 0.0, "unclassified": 0.0}
    mapped = {"intergranular": 0.882, "transgranular": 0.007, "unclassified": 0.111}
    both = legend_labels(classes, corrected, mapped)
    assert both["intergranular"] == "intergranular 88% of map, 100% corrected"
    assert both["unclassified"] == "unclassified 11% of map, 0% corrected"
    assert legend_labels(classes, mapped)["transgranular"] == "transgranular 1%"
    assert legend_labels(classes)["intergranular"] == "intergranular"
