"""Synthetic test campaigns: many specimens over a temperature range, with a manifest.

:func:`make_campaign` writes, for every specimen and field, an SEM image, a
height map and the true label image, plus ``campaign.csv`` (one row per file)
and ``truth.json`` (the transition temperature and the true fractions of every
file). :func:`make_demo` writes the fictional demonstration campaign shipped in
``demo_images/``; regenerate it with::

    python -m fracto.synth.campaign demo demo_images --force

The fictional toughness of a specimen is ``K = K_low + (K_up − K_low)·f_duc +
ε`` with ``f_duc`` the specimen's mean true ductile fraction and ε a seeded
normal scatter of 4 % of ``K_up − K_low`` — an invented relation for the demo,
not a materials model.
"""

from __future__ import annotations

import csv
import io
import os
import sys
from dataclasses import replace
from pathlib import Path

import numpy as np

from fracto import __version__
from fracto.classes import CLASSES, MODES
from fracto.errors import FractoInputError
from fracto.io.safe import write_bytes_atomic, write_json_atomic, write_text_atomic
from fracto.synth.mode_model import ModeModel
from fracto.synth.modes import FractureSettings
from fracto.synth.polycrystal import GrainSize
from fracto.synth.render import RenderSettings
from fracto.synth.surface import (
    GENERATOR_VERSION,
    _png_bytes,
    make_surface,
    prepare_output_folder,
    write_height_tif,
)

__all__ = ["DEMO", "demo_settings", "make_campaign", "make_demo"]

MANIFEST_COLUMNS = (
    "path",
    "kind",
    "specimen",
    "field",
    "temperature_C",
    "pixel_size_um",
    "toughness_MPa_sqrt_m",
    "material",
    "lot",
    "notes",
)


def make_campaign(
    outdir: str | os.PathLike,
    *,
    temperatures_C: list[float] | tuple[float, ...],
    specimens_per_temperature: int = 2,
    fields_per_specimen: int = 1,
    transition_C: float,
    seed: int = 0,
    size: int | tuple[int, int] = 512,
    pixel_size_um: float = 0.1,
    grain_size: GrainSize | None = None,
    mode_model: ModeModel | None = None,
    render: RenderSettings | None = None,
    fracture: FractureSettings | None = None,
    randomize_render: bool = False,
    material: str = "synthetic material",
    lot: str = "LOT-1",
    specimen_prefix: str = "S",
    toughness_MPa_sqrt_m: tuple[float, float] = (30.0, 150.0),
    write_labels: bool = True,
    force: bool = False,
    progress: bool = False,
) -> Path:
    """Write a synthetic campaign and return the path of its manifest CSV.

    Parameters
    ----------
    outdir : path
        Output folder (created; a non-empty folder is refused unless `force`).
    temperatures_C : sequence of float
        Test temperatures (°C).
    specimens_per_temperature, fields_per_specimen : int
        Specimens at each temperature; SEM fields per specimen.
    transition_C : float
        Transition temperature of the mode model (°C).
    seed : int
        Seed of the whole campaign (each field gets a child seed).
    size, pixel_size_um, grain_size, mode_model, render, fracture
        Passed to :func:`fracto.synth.make_surface`.
    randomize_render : bool
        Draw fresh :meth:`RenderSettings.random` settings for every field.
    material, lot, specimen_prefix : str
        Names written to the manifest.
    toughness_MPa_sqrt_m : (float, float)
        Lower and upper shelf of the fictional toughness (see the module docstring).
    write_labels : bool
        Also write the true label image of every field.
    force : bool
        Write into a non-empty folder.

    Returns
    -------
    Path
        ``outdir/campaign.csv``.
    """
    temps = [float(t) for t in temperatures_C]
    if not temps:
        raise FractoInputError("Give at least one test temperature for the campaign.")
    if specimens_per_temperature < 1 or fields_per_specimen < 1:
        raise FractoInputError("A campaign needs at least one specimen and one field each.")
    out = prepare_output_folder(outdir, force=force)
    mm = mode_model or ModeModel()
    root = np.random.SeedSequence(seed)
    n_spec = len(temps) * specimens_per_temperature
    spec_seeds = root.spawn(n_spec)
    rows: list[dict] = []
    files: dict[str, dict] = {}
    k_low, k_up = (float(v) for v in toughness_MPa_sqrt_m)
    number = 0
    for ti, t in enumerate(temps):
        for si in range(specimens_per_temperature):
            number += 1
            spec = f"{specimen_prefix}{number:02d}"
            sseq = spec_seeds[ti * specimens_per_temperature + si]
            field_seeds = sseq.spawn(fields_per_specimen + 1)
            srng = np.random.default_rng(field_seeds[-1])
            sdir = out / spec
            sdir.mkdir(exist_ok=True)
            spec_rows = []
            duc = []
            for fi in range(fields_per_specimen):
                fseed = int(field_seeds[fi].generate_state(1)[0])
                frng = np.random.default_rng(field_seeds[fi])
                rs = (
                    RenderSettings.random(frng)
                    if randomize_render
                    else (render or RenderSettings())
                )
                surf = make_surface(
                    size=size,
                    pixel_size_um=pixel_size_um,
                    grain_size=grain_size,
                    temperature_C=t,
                    transition_C=transition_C,
                    mode_model=mm,
                    render=rs,
                    fracture=fracture,
                    seed=fseed,
                )
                stem = f"{spec}/field{fi + 1}"
                sem_path = f"{stem}_sem.png"
                h_path = f"{stem}_height.tif"
                img = surf.sem
                if rs.bit_depth == 16:
                    q = np.round(np.clip(img, 0, 1) * 65535).astype(np.uint16)
                else:
                    q = np.round(np.clip(img, 0, 1) * 255).astype(np.uint8)
                write_bytes_atomic(out / sem_path, _png_bytes(q))
                write_height_tif(out / h_path, surf.height_um, pixel_size_um)
                fr = surf.truth["fractions"]
                duc.append(fr["ductile"])
                common = {
                    "specimen": spec,
                    "field": fi + 1,
                    "temperature_C": t,
                    "pixel_size_um": pixel_size_um,
                    "material": material,
                    "lot": lot,
                }
                entries = [(sem_path, "sem", "synthetic SE image"), (h_path, "height", "µm")]
                if write_labels:
                    l_path = f"{stem}_labels.png"
                    write_bytes_atomic(out / l_path, _png_bytes(surf.labels))
                    entries.append((l_path, "labels", "true mode per pixel"))
                for path, kind, note in entries:
                    spec_rows.append({"path": path, "kind": kind, "notes": note, **common})
                    files[path] = {
                        "kind": kind,
                        "specimen": spec,
                        "field": fi + 1,
                        "temperature_C": t,
                        "fractions": fr,
                        "seed": fseed,
                        "banner_rows": surf.truth["banner_rows"],
                        "grain_statistics": surf.truth["grain_statistics"],
                    }
            k = k_low + (k_up - k_low) * float(np.mean(duc))
            k += 0.04 * (k_up - k_low) * float(srng.standard_normal())
            for r in spec_rows:
                r["toughness_MPa_sqrt_m"] = round(max(k, 0.5 * k_low), 1)
            rows.extend(spec_rows)
            if progress:
                print(f"  {spec}  {t:g} °C  written", file=sys.stderr)
    buf = io.StringIO()
    wr = csv.DictWriter(buf, fieldnames=list(MANIFEST_COLUMNS), lineterminator="\n")
    wr.writeheader()
    for r in rows:
        wr.writerow({c: r.get(c, "") for c in MANIFEST_COLUMNS})
    manifest = out / "campaign.csv"
    write_text_atomic(manifest, buf.getvalue())
    write_json_atomic(
        out / "truth.json",
        {
            "synthetic": True,
            "generator": "fracto.synth",
            "version": __version__,
            "generator_version": GENERATOR_VERSION,
            "seed": int(seed),
            "transition_temperature_C": float(transition_C),
            "classes": list(CLASSES),
            "material": material,
            "lot": lot,
            "parameters": {
                "temperatures_C": temps,
                "specimens_per_temperature": specimens_per_temperature,
                "fields_per_specimen": fields_per_specimen,
                "size": size,
                "pixel_size_um": pixel_size_um,
                "grain_size": (grain_size or GrainSize()).to_dict(),
                "mode_model": mm.to_dict(),
                "fracture": (fracture or FractureSettings()).to_dict(),
                "render": None if randomize_render else (render or RenderSettings()).to_dict(),
                "randomize_render": randomize_render,
                "toughness_MPa_sqrt_m": [k_low, k_up],
            },
            "expected_fractions_by_temperature": {
                f"{t:g}": dict(
                    zip(
                        MODES,
                        (
                            float(v)
                            for v in mm.probabilities(
                                np.array([(grain_size or GrainSize()).nominal_um]),
                                t - transition_C,
                            )[0]
                        ),
                        strict=True,
                    )
                )
                for t in temps
            },
            "files": files,
        },
    )
    return manifest


#: The fictional demonstration campaign of ``demo_images/``.
DEMO = {
    "material": "Corvane HX-7 ferritic weld metal (fictional)",
    "lot": "CV-2291",
    "specimen_prefix": "HX7-",
    "temperatures_C": [-110.0, -85.0, -65.0, -50.0, -35.0, -15.0, 10.0],
    "transition_C": -50.0,
    "specimens_per_temperature": 2,
    "fields_per_specimen": 1,
    "size": 512,
    "pixel_size_um": 0.12,
    "seed": 20261201,
    "toughness_MPa_sqrt_m": (35.0, 180.0),
}


def demo_settings() -> dict:
    """Keyword arguments of :func:`make_campaign` that make the demo campaign."""
    d = dict(DEMO)
    d.update(
        grain_size=GrainSize("lognormal", 4.5, 0.25),
        mode_model=ModeModel.steel(
            width_C=20.0, ig_base=0.12, spatial_correlation=0.4, patch_um=6.0
        ),
        fracture=FractureSettings(dimple_um=1.8, dimple_depth_ratio=0.9),
        render=replace(RenderSettings(), banner=False),
    )
    return d


def make_demo(outdir: str | os.PathLike, *, force: bool = False, progress: bool = True) -> Path:
    """Write the fictional demo campaign (fixed seeds) into `outdir`; return its manifest."""
    return make_campaign(outdir, force=force, progress=progress, **demo_settings())


def _main(argv: list[str]) -> int:
    if len(argv) < 2 or argv[0] != "demo":
        print("usage: python -m fracto.synth.campaign demo OUTDIR [--force]", file=sys.stderr)
        return 2
    try:
        path = make_demo(argv[1], force="--force" in argv[2:])
    except FractoInputError as exc:
        print(f"fracto: {exc}", file=sys.stderr)
        return 2
    print(f"wrote {path}")
    return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(_main(sys.argv[1:]))
