"""read_sem_image takes the pixel size from the banner's scale bar when nothing else gives it.

The check value is exact by construction: the renderer draws a bar of a known number of
pixels for a known length, so the pixel size is that length over that count.
"""

import dataclasses
import shutil

import cv2
import numpy as np
import pytest

from fracto.io import read_sem_image
from fracto.synth import RenderSettings, make_surface


@pytest.fixture(scope="module")
def banner_png(tmp_path_factory):
    render = dataclasses.replace(RenderSettings(), banner=True)
    s = make_surface(size=384, pixel_size_um=0.1, render=render, seed=2)
    path = tmp_path_factory.mktemp("sb") / "field.png"
    cv2.imwrite(str(path), np.round(s.sem * 255).astype(np.uint8))
    return path


def test_given_bar_length_calibrates(banner_png):
    im = read_sem_image(banner_png, scale_bar="5um")
    assert im.pixel_size.source == "scale bar (given length)"
    bar_px = im.scale_bar["bar"]["length_px"]
    assert im.pixel_size.x_um == pytest.approx(5.0 / bar_px)
    # the renderer drew round(5 µm / 0.1 µm) = 50 px
    assert im.pixel_size.x_um == pytest.approx(0.1, rel=0.02)


def test_explicit_pixel_size_wins_over_scale_bar(banner_png):
    im = read_sem_image(banner_png, pixel_size="0.2um", scale_bar="5um")
    assert im.pixel_size.x_um == 0.2 and im.scale_bar is None


@pytest.mark.skipif(shutil.which("tesseract") is None, reason="Debian's tesseract-ocr is absent")
def test_ocr_label_calibrates(banner_png):
    im = read_sem_image(banner_png)
    assert im.pixel_size.source == "scale bar (OCR)"
    assert im.pixel_size.x_um == pytest.approx(0.1, rel=0.02)


def test_classify_command_takes_the_scale_bar(banner_png, tmp_path, capsys):
    # the pixel size reported by `fracto classify` is the bar's: 5 µm over the bar's pixels
    import json

    from fracto.cli import main
    from fracto.modes.model import default_model_path

    code = main(["classify", str(banner_png), "--scale-bar", "5um", "--n-boot", "50", "--json"])
    out = capsys.readouterr().out
    assert code == 0
    doc = json.loads(out)
    assert doc["pixel_size"]["source"] == "scale bar (given length)"
    assert doc["pixel_size"]["x"] == pytest.approx(0.1, rel=0.02)
    assert default_model_path().is_file()
