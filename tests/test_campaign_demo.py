"""The main job: ``fracto batch demo_images/campaign.csv --out DIR`` recovers the demo's
transition temperature (demo_images/truth.json, the generator's own scenario value)
within ±10 °C when it is estimated from the data. Slow (about a minute): the whole
demo campaign with the default model."""

from __future__ import annotations

import csv
import json
import re
from pathlib import Path

import pytest

from fracto.cli import main

DEMO = Path(__file__).resolve().parents[1] / "demo_images"


@pytest.fixture(scope="module")
def default_model():
    from fracto.errors import FractoInputError
    from fracto.modes.model import default_model_path, load_model

    try:
        p = default_model_path()
        load_model(p)
    except FractoInputError as exc:  # the default model is built separately
        pytest.skip(f"default model not usable here: {exc}")
    return p


def test_demo_campaign_recovers_transition_temperature(tmp_path, default_model, capsys):
    truth = json.loads((DEMO / "truth.json").read_text())["transition_temperature_C"]
    out = tmp_path / "out"
    rc = main(["batch", str(DEMO / "campaign.csv"), "--out", str(out), "--jobs", "2", "--quiet"])
    o = capsys.readouterr()
    assert rc == 0, o.err
    m = re.search(r"transition temperature: (-?[\d.]+) °C \(estimated from (\w+)", o.out)
    assert m, o.out
    t_line = float(m.group(1))
    tr = json.loads((out / "transition.json").read_text())
    assert tr["transition_estimated"] is True
    assert tr["transition_temperature_C"] == pytest.approx(t_line, abs=0.05)
    assert abs(tr["transition_temperature_C"] - truth) <= 10.0
    with open(out / "images.csv", newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    with open(DEMO / "campaign.csv", newline="", encoding="utf-8") as fh:
        manifest = list(csv.DictReader(fh))
    assert [r["path"] for r in rows] == [r["path"] for r in manifest]
    kinds = {r["kind"]: set() for r in rows}
    for r in rows:
        kinds[r["kind"]].add(r["status"])
    assert kinds == {"sem": {"ok"}, "height": {"ok"}, "labels": {"not scored"}}
    assert (out / "report.html").stat().st_size > 0
    assert "28 scored, 0 failed, 0 skipped (already done), 14 not scored" in o.out
