"""The self-contained HTML campaign report.

Checks against outside references:
- the HTML is parsed with the standard library's html.parser;
- every embedded image is a data URI (RFC 2397) that OpenCV's decoder (cv2.imdecode)
  reads as a PNG or JPEG;
- headless Chromium (Debian's ``chromium``, driven by Playwright with the system
  browser) loads the file: every image has naturalWidth > 0, every plot is present, and
  the page asks for nothing over the network.
"""

from __future__ import annotations

import base64
import html
import math
from html.parser import HTMLParser
from pathlib import Path

import cv2
import numpy as np
import pytest

from fracto import CAUTION
from fracto.campaign.report import (
    THUMB_MAX_SIDE_PX,
    embed_thumbnail,
    thumbnail_budget_bytes,
    write_report,
)
from fracto.campaign.transition import analyse_campaign

CHROMIUM = Path("/usr/bin/chromium")
PLOT_IDS = (
    "plot-mode-fractions",
    "plot-roughness",
    "plot-toughness-temperature",
    "plot-toughness-intergranular",
)


def _fabricated_campaign(folder: Path):
    """An invented campaign (specimens 'Kestrel-…'): ductile fraction rising as a tanh
    around -40 °C, intergranular falling with temperature, toughness following ductility."""
    rng = np.random.default_rng(5)
    rows, overlays = [], {}
    temps = [-100.0, -80.0, -60.0, -45.0, -35.0, -20.0, 0.0, 20.0]
    for t in temps:
        for s in range(2):
            spec = f"Kestrel-{t:+.0f}-{s}"
            d_true = 0.45 + 0.45 * math.tanh((t + 40.0) / 15.0)
            for f in range(2):
                d = float(np.clip(d_true + rng.normal(0, 0.03), 0, 1))
                ig = float(np.clip(0.25 - 0.002 * (t + 100) + rng.normal(0, 0.02), 0, 1))
                path = f"{spec}/field{f}_sem.png"
                rows.append(
                    {
                        "path": path,
                        "specimen": spec,
                        "temperature_C": t,
                        "kind": "sem",
                        "status": "ok",
                        "error": "",
                        "fit_to_score": True,
                        "quality_notes": "",
                        "intergranular_fraction": ig,
                        "transgranular_fraction": max(0.0, 1 - d - ig),
                        "ductile_fraction": d,
                        "fatigue_fraction": 0.0,
                        "unclassified_fraction": 0.0,
                        "Sa_um": 0.8 + 0.6 * d_true + rng.normal(0, 0.05),
                        "RS": 1.4 + 0.3 * d_true,
                        "Sdr_percent": 30 + 20 * d_true,
                        "toughness_MPa_sqrt_m": 35 + 110 * d_true + rng.normal(0, 4),
                    }
                )
                # small invented thumbnail: grey ramp with coloured blocks
                img = np.zeros((96, 128, 3), np.uint8)
                img[:] = np.linspace(40, 200, 128, dtype=np.uint8)[None, :, None]
                img[10:40, 10:50] = (178, 114, 0)
                thumb = folder / f"thumb_{len(rows)}.png"
                cv2.imwrite(str(thumb), img)
                overlays[path] = thumb
    rows[0]["fit_to_score"] = False
    rows[0]["quality_notes"] = "The image is out of focus."
    # one large thumbnail (noise PNG, far above 150 kB): must be re-encoded as JPEG
    big = folder / "thumb_big.png"
    cv2.imwrite(str(big), rng.integers(0, 256, (900, 1200, 3), dtype=np.uint8))
    assert big.stat().st_size > 150_000
    overlays[rows[1]["path"]] = big
    rows.append(
        {
            "path": "Kestrel-x/field0_labels.png",
            "specimen": "Kestrel-x",
            "temperature_C": 0.0,
            "status": "not scored",
            "error": "Ground-truth label image; not scored.",
        }
    )
    rows.append(
        {
            "path": "Kestrel-x/field0_sem.png",
            "specimen": "Kestrel-x",
            "temperature_C": 0.0,
            "status": "error",
            "error": "The file cannot be read as an image.",
        }
    )
    return rows, overlays


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    folder = tmp_path_factory.mktemp("report")
    rows, overlays = _fabricated_campaign(folder)
    tr = analyse_campaign(rows, transition_temperature_C=-40.0, n_boot=100, seed=0)
    provenance = {
        "version": "test",
        "model": {"sha256": "0" * 64},
        "seed": 3,
        "settings": {"jobs": 1},
        "created_utc": "2026-12-01T00:00:00Z",
    }
    path = write_report(
        folder,
        images=rows,
        specimens=[],
        transition=tr,
        provenance=provenance,
        overlays=overlays,
    )
    return path, rows, overlays, tr


class _Collect(HTMLParser):
    def __init__(self):
        super().__init__()
        self.imgs, self.tags, self.ids, self.attrs, self.text = [], [], set(), [], []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        self.tags.append(tag)
        self.attrs += [v or "" for _, v in attrs]
        if "id" in a:
            self.ids.add(a["id"])
        if tag == "img":
            self.imgs.append(a)

    def handle_data(self, data):
        self.text.append(data)


def _decode(src: str) -> tuple[str, np.ndarray | None]:
    head, b64 = src.split(",", 1)
    mime = head.removeprefix("data:").removesuffix(";base64")
    arr = cv2.imdecode(np.frombuffer(base64.b64decode(b64), np.uint8), cv2.IMREAD_UNCHANGED)
    return mime, arr


def test_report_is_self_contained_html(report):
    path, rows, overlays, _ = report
    text = path.read_text(encoding="utf-8")
    assert not list(path.parent.glob(".report.html.*")), "temporary file left behind"
    p = _Collect()
    p.feed(text)
    # every image: a data URI that OpenCV decodes as PNG or JPEG, with alt text
    assert p.imgs
    for img in p.imgs:
        src = img.get("src", "")
        assert src.startswith(("data:image/png;base64,", "data:image/jpeg;base64,")), src[:40]
        mime, arr = _decode(src)
        assert arr is not None and arr.size > 0, mime
        assert img.get("alt", "").strip()
    # every plot present, as an image inside its figure
    for pid in PLOT_IDS:
        assert pid in p.ids, pid
    plots = [i for i in p.imgs if i.get("class") == "plot"]
    assert len(plots) == len(PLOT_IDS)
    # one thumbnail per field with an overlay; the large one re-encoded as a small JPEG
    thumbs = [i for i in p.imgs if i.get("class") == "thumb"]
    assert len(thumbs) == len(overlays)
    big_path = rows[1]["path"]
    (big,) = [i for i in thumbs if big_path in i["alt"]]
    mime, arr = _decode(big["src"])
    assert mime == "image/jpeg" and max(arr.shape[:2]) <= THUMB_MAX_SIDE_PX
    # nothing to fetch: no http(s) in any attribute, no scripts, links or CSS imports
    assert not any(a.strip().lower().startswith(("http:", "https:", "//")) for a in p.attrs)
    assert not {"script", "link", "iframe", "object"} & set(p.tags)
    assert "@import" not in text and "url(" not in text
    # the caution, verbatim, and the quality warnings with their reasons
    body = html.unescape(" ".join(p.text))
    assert CAUTION in " ".join(body.split())
    assert "caution" in p.ids
    assert "The image is out of focus." in body
    assert "The file cannot be read as an image." in body
    # every mode named in text (never colour alone), the per-specimen table, provenance
    for mode in ("intergranular", "transgranular", "ductile", "fatigue"):
        assert mode in body
    for spec in {r["specimen"] for r in rows if r["status"] == "ok"}:
        assert spec in body
    assert "0" * 64 in body and "provenance" in p.ids
    assert "-40.0 °C (given)" in body
    # a row not scored by design is listed, but neither as a failure nor as a warning
    assert "2 field(s) failed or were flagged" in body
    assert "1 row(s) not scored by design" in body
    # the colour key names every mode beside its swatch
    assert "colour-key" in p.ids
    for mode, colour in (("intergranular", "blue"), ("ductile", "bluish green")):
        assert f"{mode} ({colour})" in body


def test_report_plots_are_pngs_of_sensible_size(report):
    path, *_ = report
    p = _Collect()
    p.feed(path.read_text(encoding="utf-8"))
    for img in p.imgs:
        if img.get("class") != "plot":
            continue
        mime, arr = _decode(img["src"])
        assert mime == "image/png"
        h, w = arr.shape[:2]
        assert 200 <= w <= 2000 and 200 <= h <= 2000


@pytest.mark.skipif(
    not CHROMIUM.exists(), reason="Debian's chromium (/usr/bin/chromium) is not installed"
)
def test_report_loads_in_headless_chromium(report):
    try:
        from playwright.sync_api import sync_playwright
    except ImportError:  # the browser is there, its driver must be too
        pytest.fail("the Python package 'playwright' is needed to drive /usr/bin/chromium")
    path, _, overlays, _ = report
    requests = []
    with sync_playwright() as pw:
        browser = pw.chromium.launch(
            executable_path=str(CHROMIUM),
            args=[
                "--headless",
                "--no-sandbox",
                "--disable-gpu",
                "--disable-quic",
                "--no-first-run",
                "--disable-background-networking",
                "--disable-component-update",
                "--disable-sync",
            ],
        )
        try:
            page = browser.new_page(viewport={"width": 1200, "height": 900})
            page.on("request", lambda r: requests.append(r.url))
            page.goto(path.resolve().as_uri(), wait_until="load")
            info = page.evaluate(
                """() => Array.from(document.images).map(i => ({
                    ok: i.complete && i.naturalWidth > 0, w: i.naturalWidth,
                    cls: i.className, fig: i.closest('figure') ? i.closest('figure').id : ''}))"""
            )
            present = {
                pid: page.evaluate(
                    "(id) => { const e = document.querySelector('#' + id + ' img');"
                    " if (!e) return 0; const r = e.getBoundingClientRect();"
                    " return e.naturalWidth > 0 ? r.width * r.height : 0; }",
                    pid,
                )
                for pid in PLOT_IDS
            }
            caution = page.inner_text("#caution")
        finally:
            browser.close()
    assert info and all(i["ok"] for i in info), [i for i in info if not i["ok"]]
    assert sum(i["cls"] == "thumb" for i in info) == len(overlays)
    assert all(area > 0 for area in present.values()), present
    assert CAUTION in " ".join(caution.split())
    external = [u for u in requests if not u.startswith(("file:", "data:"))]
    assert not external, external


def test_report_without_transition_fits(tmp_path):
    # the batch's stand-in when the analysis could not run (too few temperatures)
    rows, _ = _fabricated_campaign(tmp_path)
    rows = rows[:6]
    tr = {
        "transition_temperature_C": None,
        "transition_estimated": False,
        "transition_basis": None,
        "fits": {},
        "available": False,
        "note": "The campaign has 2 distinct test temperatures.",
    }
    path = write_report(
        tmp_path / "out", images=rows, specimens=[], transition=tr, provenance={}, overlays={}
    )
    p = _Collect()
    p.feed(path.read_text(encoding="utf-8"))
    body = html.unescape(" ".join(p.text))
    assert "not available" in body and "2 distinct test temperatures" in body
    assert CAUTION in " ".join(body.split())
    assert "plot-roughness" in p.ids  # roughness needs no fit
    for img in p.imgs:
        assert _decode(img["src"])[1] is not None


def test_thumbnail_budget_for_large_campaigns(tmp_path):
    # 1000 fields share a 20 MB budget: 20 kB each; small campaigns keep 150 kB each
    assert thumbnail_budget_bytes(10) == 150_000
    assert thumbnail_budget_bytes(1000) == 20_000
    assert thumbnail_budget_bytes(10**6) == 15_000
    rng = np.random.default_rng(2)
    img = cv2.GaussianBlur(rng.normal(128, 60, (512, 512)), (0, 0), 2).clip(0, 255)
    f = tmp_path / "t.jpg"
    cv2.imwrite(str(f), img.astype(np.uint8), [cv2.IMWRITE_JPEG_QUALITY, 95])
    size = f.stat().st_size
    uri, n = embed_thumbnail(f, max_bytes=size)  # within budget: embedded unchanged
    assert n == size and base64.b64decode(uri.split(",", 1)[1]) == f.read_bytes()
    uri, n = embed_thumbnail(f, max_bytes=20_000)
    mime, arr = _decode(uri)
    assert mime == "image/jpeg" and n <= 20_000 and max(arr.shape[:2]) <= THUMB_MAX_SIDE_PX
    assert embed_thumbnail(tmp_path / "missing.jpg") is None
