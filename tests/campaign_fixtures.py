"""Small campaigns for the batch tests (tiny images, a tiny model; fast on 2 cores)."""

from __future__ import annotations

import csv
from pathlib import Path

import numpy as np

#: Sinusoid height map used in the campaigns: amplitude (µm), wavelength (px), pixel (µm).
SINE_A_UM, SINE_WAVE_PX, SINE_PX_UM, SINE_N = 0.3, 32, 0.5, 128


def png(path: Path, img: np.ndarray) -> Path:
    from PIL import Image

    a = np.clip(np.round(np.asarray(img) * 255), 0, 255).astype(np.uint8)
    Image.fromarray(a).save(path)
    return path


def sine_map() -> np.ndarray:
    """A cos(2π(x − c)/λ) with c the middle column: whole periods, even about the middle,
    so its mean and its least-squares tilt are exactly zero and plane removal leaves it
    unchanged."""
    x = np.arange(SINE_N) - (SINE_N - 1) / 2
    return SINE_A_UM * np.cos(2 * np.pi * x / SINE_WAVE_PX)[None, :] * np.ones((SINE_N, 1))


def write_manifest(path: Path, header: list[str], rows: list[list]) -> Path:
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(header)
        w.writerows(rows)
    return path


def make_small_campaign(root: Path, *, n_sem: int = 6, size: int = 128) -> Path:
    """SEM PNGs of two specimens per temperature (3 temperatures), one sine height map.

    Temperatures are given with units in a ``temperature`` column (``-40C``,
    ``0C``, ``313.15K``). Returns the manifest path.
    """
    from modes_textures import mixed_field

    root.mkdir(parents=True, exist_ok=True)
    temps = ["-40C", "0C", "313.15K"]
    rows = []
    for i in range(n_sem):
        img, _ = mixed_field(size, 20 + 2 * i, seed=100 + i)
        name = f"s{i:02d}.png"
        png(root / name, img)
        spec = f"SP-{i // 2 + 1}" if i < 6 else f"SP-x{i}"
        rows.append([name, "sem", spec, temps[(i // 2) % 3], "0.1um", f"{50 + 10 * i}", "note a"])
    np.save(root / "sine.npy", sine_map())
    rows.append(["sine.npy", "height", "SP-1", "-40C", f"{SINE_PX_UM}um", "50", "height"])
    return write_manifest(
        root / "campaign.csv",
        ["path", "kind", "specimen", "temperature", "pixel_size", "toughness_MPa_sqrt_m", "notes"],
        rows,
    )
