"""fracto suggest: which regions to label next, and the mask template round trip."""

import json

import numpy as np
import pytest
from modes_textures import mixed_field, small_model
from PIL import Image

from fracto.cli import main
from fracto.modes.features import region_features
from fracto.modes.model import save_model
from fracto.modes.suggest import pick_apart, suggest_regions, usefulness


def test_usefulness_margin_and_committee_distance_by_hand():
    # Margin sampling and query by committee (Settles 2012, sections 2.3 and 3.1),
    # values worked by hand: two members, two regions, three classes.
    p = np.array(
        [
            [[0.7, 0.2, 0.1], [0.4, 0.4, 0.2]],
            [[0.5, 0.4, 0.1], [0.4, 0.4, 0.2]],
        ]
    )
    score, margin, dis = usefulness(p, disagreement_weight=2.0)
    # mean of region 0 = (0.6, 0.3, 0.1): margin 0.3; each member is 0.1 + 0.1 away
    # in L1 from the mean, total variation = 0.1
    np.testing.assert_allclose(margin, [0.3, 0.0], atol=1e-12)
    np.testing.assert_allclose(dis, [0.1, 0.0], atol=1e-12)
    np.testing.assert_allclose(score, [0.7 + 0.2, 1.0], atol=1e-12)


def test_pick_apart_keeps_gap_and_order():
    rng = np.random.default_rng(4)
    score = rng.uniform(size=12 * 15)
    chosen = pick_apart(score, (12, 15), 30, gap=2)
    r, c = np.divmod(chosen, 15)
    for i in range(len(chosen)):
        for j in range(i):
            assert max(abs(r[i] - r[j]), abs(c[i] - c[j])) > 2
    assert chosen[0] == int(np.argmax(score))
    # greedy best-first: scores come out in falling order
    assert np.all(np.diff(score[chosen]) <= 0)
    # a 12 x 15 grid holds at most ceil(12/3) * ceil(15/3) = 20 cells 3 apart
    assert len(chosen) <= 20


def test_suggestions_are_less_certain_than_the_field():
    img, _ = mixed_field(256, 30, seed=301)
    model = small_model()
    feats = region_features(img)
    sug = suggest_regions(feats, model, n_regions=6, gap=1)
    assert len(sug) == 6
    p = model.predict_proba(feats.X)
    top2 = np.sort(p, axis=1)[:, -2:]
    all_margin = top2[:, 1] - top2[:, 0]
    # the proposed tiles are among the least certain of the field
    assert sug.margin.mean() < np.median(all_margin)
    y0, x0, y1, x1 = sug.boxes.T
    assert np.all((y1 > y0) & (x1 > x0)) and y1.max() <= 256 and x1.max() <= 256


@pytest.fixture(scope="module")
def model_file(tmp_path_factory):
    p = tmp_path_factory.mktemp("model") / "m.skops"
    save_model(small_model(), p)
    return str(p)


def test_suggest_cli_template_filled_and_trained(tmp_path, model_file, capsys):
    img, truth = mixed_field(256, 30, seed=302)
    f = tmp_path / "field.png"
    Image.fromarray(np.round(img * 255).astype(np.uint8)).save(f)
    out = tmp_path / "field.mask.png"
    rc = main(
        ["suggest", str(f), "--model", model_file, "--out", str(out), "--regions", "8", "--json"]
    )
    assert rc == 0
    d = json.loads(capsys.readouterr().out)
    assert d["n_regions"] >= 4 and d["to_label_value"] == 255
    assert d["settings"]["regions"] == 8 and len(d["model"]["sha256"]) == 64
    template = np.asarray(Image.open(out))
    assert template.shape == img.shape and set(np.unique(template)) <= {0, 255}
    assert (tmp_path / "field.mask.preview.png").is_file()
    rows = (tmp_path / "field.mask.regions.csv").read_text().splitlines()
    assert len(rows) == d["n_regions"] + 1

    # an unfilled template is refused: 255 is no class's mask value
    lst = tmp_path / "list.csv"
    lst.write_text(f"image,mask\n{f},{out}\n")
    assert main(["train", "--masks", str(lst), "--out", str(tmp_path / "new.skops")]) == 2
    assert "fracto:" in capsys.readouterr().err

    # filled with the truth, the mask trains a model
    filled = np.where(template == 255, truth, 0).astype(np.uint8)
    Image.fromarray(filled).save(out)
    other, other_truth = mixed_field(256, 26, seed=303)
    g = tmp_path / "other.png"
    Image.fromarray(np.round(other * 255).astype(np.uint8)).save(g)
    m2 = tmp_path / "other.mask.png"
    Image.fromarray(other_truth).save(m2)
    lst.write_text(f"image,mask\n{f},{out}\n{g},{m2}\n")
    rc = main(["train", "--masks", str(lst), "--out", str(tmp_path / "new.skops"), "--cv", "2"])
    assert rc == 0
    assert (tmp_path / "new.skops").is_file()


def test_suggest_bad_input_exit_2(tmp_path, model_file):
    img, _ = mixed_field(256, 30, seed=304)
    f = tmp_path / "field.png"
    Image.fromarray(np.round(img * 255).astype(np.uint8)).save(f)
    assert main(["suggest", str(f), "--model", model_file, "--out", str(tmp_path / "m.tif")]) == 2
    nowhere = tmp_path / "missing" / "m.png"
    assert main(["suggest", str(f), "--model", model_file, "--out", str(nowhere)]) == 2
    bad = ["--model", model_file, "--out", str(tmp_path / "m.png"), "--regions", "0"]
    assert main(["suggest", str(f), *bad]) == 2
    ex = tmp_path / "ex.png"
    Image.fromarray(np.zeros((100, 100), np.uint8)).save(ex)
    bad = ["--model", model_file, "--out", str(tmp_path / "m.png"), "--exclude", str(ex)]
    assert main(["suggest", str(f), *bad]) == 2
