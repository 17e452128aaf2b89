"""Benchmark of fracto.io: STL rasterisation, text and SDF reading, banner detection.

Run: /root/venv/bin/python bench/bench_io.py [--quick]

Prints measured times and rates; asserts nothing. The banner part draws
synthetic information strips (OpenCV text and rectangles) over generated
textures and counts exact detections, and counts crops on banner-free
textures (dark edges, clipped shadows, bright bands, low contrast).
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

import cv2
import numpy as np
from scipy.ndimage import gaussian_filter
from stl import Mode, mesh

from fracto.io import PixelSize, read_height_map, write_height_map
from fracto.io.sem import detect_banner
from fracto.io.stl import grid_to_triangles
from fracto.io.text import write_xyz


def _t(fn, *a, **k):
    t0 = time.perf_counter()
    out = fn(*a, **k)
    return out, time.perf_counter() - t0


def bench_stl(folder: Path, sides: list[int]) -> None:
    rng = np.random.default_rng(0)
    for n in sides:
        z = gaussian_filter(rng.normal(size=(n, n)), 3)
        tris = grid_to_triangles(z, 0.5)
        m = mesh.Mesh(np.zeros(len(tris), dtype=mesh.Mesh.dtype))
        m.vectors[:] = tris
        p = folder / f"g{n}.stl"
        m.save(str(p), mode=Mode.BINARY)
        hm, dt = _t(read_height_map, p)
        err = float(np.nanmax(np.abs(hm.z_um - z)))
        print(
            f"STL binary {len(tris):>9,d} triangles -> {hm.shape[0]}x{hm.shape[1]} raster: "
            f"{dt:6.2f} s ({len(tris) / dt / 1e6:.2f} M triangles/s), max |z - grid| {err:.1e} um"
        )


def bench_text_sdf(folder: Path, n: int) -> None:
    rng = np.random.default_rng(1)
    z = rng.normal(size=(n, n))
    ps = PixelSize.square(0.5, "bench")
    for name, writer in (
        ("text grid", lambda p: write_height_map(p, z, ps)),
        ("x,y,z csv", lambda p: write_xyz(p, z, ps)),
        ("SDF ascii", lambda p: write_height_map(p, z, ps, binary_sdf=False)),
        ("SDF binary", lambda p: write_height_map(p, z, ps, binary_sdf=True)),
    ):
        ext = {"text grid": "txt", "x,y,z csv": "csv"}.get(name, "sdf")
        p = folder / f"m_{name.replace(' ', '_').replace(',', '')}.{ext}"
        _, tw = _t(writer, p)
        hm, tr = _t(read_height_map, p)
        same = np.array_equal(hm.z_um, z)
        print(f"{name:10s} {n}x{n}: write {tw:5.2f} s, read {tr:5.2f} s, exact {same}")


def _texture(seed, h, w, sigma, contrast, noise, mean=0.45):
    rng = np.random.default_rng(seed)
    t = gaussian_filter(rng.normal(size=(h, w)), sigma)
    return np.clip(t / t.std() * contrast + mean + rng.normal(scale=noise, size=(h, w)), 0, 1)


def _banner(img, rows, side, bg, fg, font, line):
    _h, w = img.shape
    strip = np.full((rows, w), round(bg * 255), np.uint8)
    scale, th = rows / 45, max(1, rows // 30)
    text = "HV 15.0 kV  WD 9.8 mm  MAG 5000x  DET SE  |--| 5 um  DEMO-7"
    cv2.putText(strip, text, (8, int(rows * 0.65)), font, scale, round(fg * 255), th, cv2.LINE_AA)
    cv2.rectangle(
        strip,
        (int(w * 0.75), int(rows * 0.4)),
        (int(w * 0.92), int(rows * 0.5)),
        round(fg * 255),
        -1,
    )
    if line:
        strip[:2] = round(fg * 255)
    out = img.copy()
    s = strip / 255.0
    if side == "bottom":
        out[-rows:] = s
    else:
        out[:rows] = s[::-1]
    return out


def _jpeg(u8, q):
    _ok, b = cv2.imencode(".jpg", u8, [cv2.IMWRITE_JPEG_QUALITY, q])
    return cv2.imdecode(b, cv2.IMREAD_UNCHANGED)


def bench_banner(n_seeds: int) -> None:
    fonts = [
        cv2.FONT_HERSHEY_SIMPLEX,
        cv2.FONT_HERSHEY_PLAIN,
        cv2.FONT_HERSHEY_DUPLEX,
        cv2.FONT_HERSHEY_TRIPLEX,
        cv2.FONT_HERSHEY_COMPLEX_SMALL,
    ]
    shapes = [(480, 640), (960, 1280), (512, 512), (300, 400)]
    total = exact = within2 = 0
    t_total = 0.0
    for seed in range(n_seeds):
        h, w = shapes[seed % 4]
        base = _texture(seed, h, w, 1.5 + seed, 0.08 + 0.03 * seed, 0.01 + 0.004 * seed)
        for rows in (max(8, int(0.025 * h)), int(0.07 * h), int(0.15 * h)):
            for bg, fg in ((0, 1), (1, 0), (0.5, 1), (0.3, 0), (0.8, 0.2)):
                for font in fonts[::2]:
                    for side in ("bottom", "top"):
                        img = (
                            _banner(base, rows, side, bg, fg, font, seed % 3 == 0) * 255
                        ).round()
                        u8 = img.astype(np.uint8)
                        for q in (None, 75):
                            g = (u8 if q is None else _jpeg(u8, q)) / 255.0
                            r, dt = _t(detect_banner, g)
                            t_total += dt
                            total += 1
                            ok = r["detected"] and r["side"] == side
                            exact += ok and r["rows"] == rows
                            within2 += ok and abs(r["rows"] - rows) <= 2
    print(
        f"banner present: {total} frames, exact rows {exact / total:.3f}, "
        f"within 2 rows {within2 / total:.3f}, mean {1e3 * t_total / total:.1f} ms/frame"
    )
    fp = m = 0
    for seed in range(3 * n_seeds):
        h, w = shapes[seed % 3]
        base = _texture(200 + seed, h, w, 1 + 0.7 * seed, 0.04 + 0.03 * seed, 0.003 * seed,
                        0.2 + 0.05 * (seed % 12))  # fmt: skip
        y = np.arange(h)[:, None] / h
        variants = [
            base,
            np.clip(base + 0.6 * np.exp(-(1 - y) / 0.05), 0, 1),
            np.where((y > 0.9) & (np.arange(w)[None, :] < 0.6 * w), 0.0, base),
            base * np.clip((1 - y) / 0.15, 0.05, 1),
            np.clip(base - np.clip((y - 0.75) * 4, 0, None), 0, 1),
            np.clip(base + 0.3 * (y > 0.8), 0, 1),
            0.5 + (base - base.mean()) * 0.2,
        ]
        for v in variants:
            u8 = (np.clip(v, 0, 1) * 255).round().astype(np.uint8)
            for q in (None, 75):
                g = (u8 if q is None else _jpeg(u8, q)) / 255.0
                m += 1
                fp += detect_banner(g)["detected"]
    print(f"banner absent: {m} frames, cropped {fp} ({fp / m:.3f})")


def main() -> None:
    quick = "--quick" in sys.argv
    with tempfile.TemporaryDirectory() as d:
        folder = Path(d)
        bench_stl(folder, [230] if quick else [230, 710])
        bench_text_sdf(folder, 200 if quick else 1000)
    bench_banner(2 if quick else 8)


if __name__ == "__main__":
    main()
