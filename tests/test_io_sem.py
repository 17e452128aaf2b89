"""SEM image reader: formats, grey conversion, calibration, banner crop.

All images are synthetic: smoothed-noise textures generated here, with banners
drawn with OpenCV (cv2.putText, cv2.rectangle). The grey conversion is checked
against OpenCV's own cv2.cvtColor (ITU-R BT.601 luma weights), a
general-purpose reference.
"""

from __future__ import annotations

import json

import cv2
import numpy as np
import pytest
import tifffile
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from scipy.ndimage import gaussian_filter

from fracto.errors import FractoInputError
from fracto.io import PixelSize, SemImage, read_sem_image
from fracto.io.sem import detect_banner

FONTS = [
    cv2.FONT_HERSHEY_SIMPLEX,
    cv2.FONT_HERSHEY_PLAIN,
    cv2.FONT_HERSHEY_DUPLEX,
    cv2.FONT_HERSHEY_TRIPLEX,
    cv2.FONT_HERSHEY_COMPLEX_SMALL,
]


def texture(seed, h=320, w=400, sigma=3.0, contrast=0.15, noise=0.02, mean=0.45):
    """Smoothed Gaussian noise plus white noise, clipped to [0, 1]."""
    rng = np.random.default_rng(seed)
    t = gaussian_filter(rng.normal(size=(h, w)), sigma)
    t = t / t.std() * contrast + mean + rng.normal(scale=noise, size=(h, w))
    return np.clip(t, 0.0, 1.0)


def u8(img):
    return np.round(np.clip(img, 0, 1) * 255).astype(np.uint8)


def draw_banner(img, rows, side, bg, fg, font, *, line=False, scale=None):
    """Burn an information strip of `rows` rows into a copy of `img` (values in [0, 1])."""
    _h, w = img.shape
    strip = np.full((rows, w), round(bg * 255), np.uint8)
    scale = scale or rows / 50
    thick = max(1, rows // 30)
    cv2.putText(strip, "HV 15kV  WD 9.8mm  MAG 2500x", (6, int(rows * 0.6)), font, scale,
                round(fg * 255), thick, cv2.LINE_AA)  # fmt: skip
    cv2.rectangle(strip, (int(w * 0.72), int(rows * 0.35)), (int(w * 0.9), int(rows * 0.45)),
                  round(fg * 255), -1)  # fmt: skip
    cv2.putText(strip, "10 um", (int(w * 0.74), int(rows * 0.8)), font, scale * 0.7,
                round(fg * 255), thick, cv2.LINE_AA)  # fmt: skip
    if line:
        strip[:2] = round(fg * 255)
    out = img.copy()
    s = strip.astype(np.float64) / 255
    if side == "bottom":
        out[-rows:] = s
    else:
        out[:rows] = s[::-1]  # mirrored so the separator line faces the image
    return out


def jpeg_round_trip(img8, quality=80):
    ok, buf = cv2.imencode(".jpg", img8, [cv2.IMWRITE_JPEG_QUALITY, quality])
    assert ok
    return cv2.imdecode(buf, cv2.IMREAD_UNCHANGED)


# ----------------------------------------------------------------------------- banners

BANNER_CASES = [
    # (seed, rows, side, bg, fg, font, line, jpeg)
    (0, 24, "bottom", 0.0, 1.0, FONTS[0], False, False),  # black strip, white text
    (1, 40, "bottom", 1.0, 0.0, FONTS[1], True, False),  # white strip, black text
    (2, 32, "bottom", 0.5, 1.0, FONTS[2], False, True),  # grey strip, white text, JPEG
    (3, 48, "bottom", 0.5, 0.0, FONTS[3], True, True),  # grey strip, black text, JPEG
    (4, 28, "top", 0.0, 1.0, FONTS[4], True, False),  # top strip
    (5, 36, "top", 1.0, 0.1, FONTS[0], False, True),
    (6, 12, "bottom", 0.1, 0.9, FONTS[1], False, False),  # thin strip
    (7, 64, "bottom", 0.0, 0.85, FONTS[2], True, True),  # tall strip, JPEG
]


@pytest.mark.parametrize("case", BANNER_CASES)
def test_banner_detected(tmp_path, case):
    seed, rows, side, bg, fg, font, line, jpg = case
    base = texture(seed, sigma=2 + seed % 4, contrast=0.1 + 0.02 * seed, noise=0.01 + 0.003 * seed)
    img8 = u8(draw_banner(base, rows, side, bg, fg, font, line=line))
    if jpg:
        img8 = jpeg_round_trip(img8)
    p = tmp_path / ("f.jpg" if jpg else "f.png")
    cv2.imwrite(str(p), img8)
    sem = read_sem_image(p)
    assert sem.banner["detected"] and sem.banner["side"] == side
    assert abs(sem.banner["rows"] - rows) <= (2 if jpg else 0)
    assert sem.image.shape == (base.shape[0] - sem.banner["rows"], base.shape[1])
    assert sem.banner_image is not None and sem.banner_image.shape[0] == sem.banner["rows"]
    # What was kept is the fractograph: rows at the cut match the texture.
    keep = base[:-rows] if side == "bottom" else base[rows:]
    k = sem.image[:-4] if side == "top" else sem.image[4:]
    ref = keep[:-4] if side == "top" else keep[4:]
    n = min(len(k), len(ref))
    assert np.abs(k[:n] - ref[:n]).mean() < 0.03


def _negatives():
    out = []
    for seed in range(4):
        base = texture(100 + seed, sigma=1.5 + 2 * seed, contrast=0.08 + 0.05 * seed,
                       noise=0.005 + 0.01 * seed, mean=0.3 + 0.1 * seed)  # fmt: skip
        h, _w = base.shape
        y = np.arange(h)[:, None] / h
        rng = np.random.default_rng(seed)
        out += [
            ("plain", seed, base),
            # shadowed lower edge: the signal fades to near black towards the bottom
            (
                "dark_edge",
                seed,
                np.clip(
                    base * np.clip((1 - y) / 0.2, 0.03, 1) + rng.normal(0, 0.01, base.shape), 0, 1
                ),
            ),
            # shadow that clips to black over the bottom rows
            ("clipped_shadow", seed, np.clip(base - np.clip((y - 0.75) * 4, 0, None), 0, 1)),
            # a bright (partly saturated) band at the bottom and one across the middle
            ("bright_bottom", seed, np.clip(base + 0.5 * (y > 0.88), 0, 1)),
            ("bright_middle", seed, np.clip(base + 0.45 * ((y > 0.45) & (y < 0.6)), 0, 1)),
            ("low_contrast", seed, 0.5 + 0.2 * (base - base.mean())),
        ]
    # A black box over part of the lower edge (not a full-width strip), on a saturating
    # high-contrast texture and on a smooth low-contrast one.
    for seed, (contrast, noise, sigma) in enumerate(((0.6, 0.05, 13.0), (0.04, 0.0, 1.0))):
        base = texture(300 + seed, h=480, w=640, sigma=sigma, contrast=contrast, noise=noise,
                       mean=0.25)  # fmt: skip
        y = np.arange(480)[:, None] / 480
        box = (y > 0.9) & (np.arange(640)[None, :] < 0.6 * 640)
        out.append(("partial_box", seed, np.where(box, 0.0, base)))
    return out


@pytest.mark.parametrize(("kind", "seed", "img"), _negatives())
def test_no_banner_not_cropped(kind, seed, img):
    for im8 in (u8(img), jpeg_round_trip(u8(img), 75)):
        info = detect_banner(im8 / 255.0)
        assert not info["detected"], (kind, seed, info)


def test_banner_fonts_heights_polarities_sweep():
    # A broader sweep than the file-based cases: 5 fonts x 3 heights x 3 polarities.
    base = texture(42, h=400, w=520, sigma=3, contrast=0.15, noise=0.02)
    hits = 0
    total = 0
    for font in FONTS:
        for rows in (16, 40, 72):
            for bg, fg in ((0.0, 1.0), (1.0, 0.0), (0.45, 0.95)):
                info = detect_banner(u8(draw_banner(base, rows, "bottom", bg, fg, font)) / 255)
                total += 1
                hits += info["detected"] and info["side"] == "bottom" and info["rows"] == rows
    assert hits == total


def test_two_tone_banner_with_scale_bar():
    # Black strip with a grey data box on the right, two text lines and a ticked scale bar.
    base = texture(21, h=480, w=640, sigma=3, contrast=0.15, noise=0.02)
    img = u8(base)
    rows, w = 72, 640
    strip = np.zeros((rows, w), np.uint8)
    cv2.rectangle(strip, (w // 2, 4), (w - 5, rows - 5), 90, -1)
    for k, text in enumerate(("HV 5.00 kV  WD 8.1 mm", "MAG 1500x  DET SE")):
        cv2.putText(strip, text, (8, 26 + 28 * k), FONTS[0], 0.6, 255, 2, cv2.LINE_AA)
    cv2.line(strip, (w // 2 + 20, 40), (w // 2 + 180, 40), 255, 3)
    for x in (w // 2 + 20, w // 2 + 180):
        cv2.line(strip, (x, 32), (x, 48), 255, 2)
    img[-rows:] = strip
    for im8 in (img, jpeg_round_trip(img, 80)):
        info = detect_banner(im8 / 255.0)
        assert info["detected"] and info["side"] == "bottom" and abs(info["rows"] - rows) <= 2


def test_banner_manual_and_none(tmp_path):
    base = texture(9)
    img8 = u8(draw_banner(base, 30, "bottom", 0.0, 1.0, FONTS[0]))
    p = tmp_path / "m.png"
    cv2.imwrite(str(p), img8)
    assert read_sem_image(p, banner="none").image.shape == base.shape
    s = read_sem_image(p, banner="bottom:10")
    assert s.image.shape[0] == base.shape[0] - 10 and s.banner == {
        "side": "bottom", "rows": 10, "detected": False,
    }  # fmt: skip
    s = read_sem_image(p, banner="top:5")
    np.testing.assert_array_equal(s.image, img8[5:] / np.float32(255))
    for bad in ("left:4", "bottom:x", "bottom:1000", "sometimes"):
        with pytest.raises(FractoInputError):
            read_sem_image(p, banner=bad)


# ----------------------------------------------------------------------------- formats


def test_formats_and_16_bit_precision(tmp_path):
    rng = np.random.default_rng(0)
    img16 = rng.integers(0, 65536, size=(40, 50), dtype=np.uint16)
    p = tmp_path / "a.tif"
    tifffile.imwrite(p, img16)
    s = read_sem_image(p, banner="none")
    assert s.bit_depth == 16 and s.raw_dtype == "uint16" and s.image.dtype == np.float32
    np.testing.assert_allclose(s.image, img16 / 65535.0, atol=1e-7)
    q = tmp_path / "a.png"
    cv2.imwrite(str(q), img16)
    s = read_sem_image(q, banner="none")
    assert s.bit_depth == 16
    np.testing.assert_allclose(s.image, img16 / 65535.0, atol=1e-7)
    img8 = u8(texture(1, 40, 50))
    for ext in ("bmp", "png", "tif", "jpg"):
        r = tmp_path / f"b.{ext}"
        cv2.imwrite(str(r), img8)
        s = read_sem_image(r, banner="none")
        assert s.bit_depth == 8 and s.image.shape == (40, 50)
        assert 0.0 <= s.image.min() and s.image.max() <= 1.0
        if ext != "jpg":
            np.testing.assert_allclose(s.image, img8 / 255.0, atol=1e-7)


def test_colour_to_grey_matches_opencv(tmp_path):
    rng = np.random.default_rng(3)
    bgr = rng.integers(0, 256, size=(30, 40, 3), dtype=np.uint8)
    p = tmp_path / "c.png"
    cv2.imwrite(str(p), bgr)
    s = read_sem_image(p, banner="none")
    # OpenCV's BGR2GRAY uses the BT.601 weights 0.299, 0.587, 0.114 (rounded to 8 bits).
    ref = cv2.cvtColor(bgr, cv2.COLOR_BGR2GRAY) / 255.0
    assert np.abs(s.image - ref).max() <= 1.0 / 255 + 1e-6
    # RGBA TIFF (RGB order, alpha dropped) gives the same grey as the PNG.
    rgba = np.dstack([bgr[:, :, ::-1], np.full((30, 40), 17, np.uint8)])
    q = tmp_path / "c.tif"
    tifffile.imwrite(q, rgba, photometric="rgb", extrasamples=["unassalpha"])
    np.testing.assert_allclose(read_sem_image(q, banner="none").image, s.image, atol=1e-6)


def test_calibration_precedence(tmp_path):
    img8 = u8(texture(2, 40, 40))
    p = tmp_path / "cal.tif"
    tifffile.imwrite(p, img8, resolution=(1e4 / 0.05, 1e4 / 0.05), resolutionunit="CENTIMETER")
    s = read_sem_image(p, banner="none")
    assert s.pixel_size.source == "TIFF tags" and s.pixel_size.x_um == pytest.approx(0.05)
    (tmp_path / "cal.tif.json").write_text(json.dumps({"pixel_size_um": 0.3}))
    assert read_sem_image(p, banner="none").pixel_size.source == "TIFF tags"
    assert read_sem_image(p, banner="none", pixel_size="7nm").pixel_size.x_um == pytest.approx(
        0.007
    )
    q = tmp_path / "side.png"
    cv2.imwrite(str(q), img8)
    assert not read_sem_image(q, banner="none").pixel_size.calibrated
    (tmp_path / "side.json").write_text(json.dumps({"pixel_size": "0.08um"}))
    s = read_sem_image(q, banner="none", pixel_size=None)
    assert s.pixel_size.x_um == pytest.approx(0.08) and s.pixel_size.source == "sidecar JSON"
    s = read_sem_image(q, pixel_size=PixelSize.square(1.0, "mine"))
    assert s.pixel_size.source == "mine"
    d = s.to_dict()
    assert isinstance(s, SemImage) and json.dumps(d)
    assert d["pixel_size"]["x"] == 1.0 and "image" not in d


def test_bad_sem_inputs(tmp_path):
    with pytest.raises(FractoInputError, match="does not exist"):
        read_sem_image(tmp_path / "none.png")
    e = tmp_path / "empty.png"
    e.write_bytes(b"")
    with pytest.raises(FractoInputError, match="empty"):
        read_sem_image(e)
    t = tmp_path / "text.jpg"
    t.write_text("this is not an image")
    with pytest.raises(FractoInputError):
        read_sem_image(t)
    small = tmp_path / "small.png"
    cv2.imwrite(str(small), u8(texture(0, 8, 8)))
    with pytest.raises(FractoInputError, match="at least"):
        read_sem_image(small)
    blank = tmp_path / "blank.png"
    cv2.imwrite(str(blank), np.full((40, 40), 128, np.uint8))
    with pytest.raises(FractoInputError, match="blank"):
        read_sem_image(blank)
    full = tmp_path / "full.png"
    cv2.imwrite(str(full), u8(texture(0, 64, 64)))
    trunc = tmp_path / "trunc.png"
    trunc.write_bytes(full.read_bytes()[:100])
    with pytest.raises(FractoInputError):
        read_sem_image(trunc)
    ft = tmp_path / "float.tif"
    tifffile.imwrite(ft, texture(0, 32, 32).astype(np.float32))
    with pytest.raises(FractoInputError, match="height map"):
        read_sem_image(ft)


@settings(
    max_examples=30, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(
    blob=st.binary(max_size=400),
    prefix=st.sampled_from([b"", b"\x89PNG\r\n\x1a\n", b"\xff\xd8\xff", b"II*\x00", b"BM"]),
)
def test_property_garbage_only_input_errors(tmp_path, blob, prefix):
    p = tmp_path / "g.img"
    p.write_bytes(prefix + blob)
    try:
        read_sem_image(p)
    except FractoInputError:
        pass
