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
