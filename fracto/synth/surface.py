"""Assembly of a synthetic fracture surface: polycrystal → grain modes → heights → SEM.

The nominal crack plane is z = 0; the actual crack wanders on a smooth surface
``b(x, y)`` (Gaussian-correlated, RMS ``crack_roughness`` grain sizes, correlation
length 4 grain sizes). A pixel belongs to the grain whose power cell contains
``(x, y, b(x, y))``; the grain's mode decides the height at the pixel (see
:mod:`fracto.synth.modes`). Labels are per grain: every pixel of a grain
carries its grain's mode, so label fractions are area fractions of whole
grains; ductile and fatigue grains are chosen as coherent patches (see
:mod:`fracto.synth.mode_model`) and their relief is a continuous field across
the grains of a patch.

Target fractions (``modes=``) are met by greedy assignment: grains are visited
in the order of a smooth random patch field (ductile, then fatigue; random
order for intergranular) and a grain is taken when it brings the running area
closer to the target; transgranular takes the rest. The error is at most
about half of one grain's area per mode.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, field
from pathlib import Path

import cv2
import numpy as np
from scipy import ndimage

from fracto import __version__
from fracto.classes import CLASSES, MODES
from fracto.errors import FractoInputError
from fracto.io.safe import write_bytes_atomic, write_json_atomic
from fracto.synth.fields import gaussian_correlated_field
from fracto.synth.fragments import fragment_sites, place_fragments
from fracto.synth.mode_model import ModeModel
from fracto.synth.modes import (
    FractureSettings,
    cleavage_normals,
    dimple_field,
    river_steps,
    striations,
)
from fracto.synth.polycrystal import (
    MEIJERING_INTERCEPT,
    GrainSize,
    column_extent,
    make_polycrystal,
    mean_lineal_intercept_px,
)
from fracto.synth.render import RenderSettings, banner_rows, render_sem

__all__ = ["GENERATOR_VERSION", "SyntheticSurface", "make_surface", "write_height_tif"]

#: Version of the generator's algorithms; changes when the same seed would give other images.
GENERATOR_VERSION = "2"


def write_height_tif(path: str | os.PathLike, height_um: np.ndarray, pixel_size_um: float) -> None:
    """Write a float32 TIFF height map (µm) with the pixel size in resolution tags and JSON.

    The convention: ``ImageDescription`` holds ``{"pixel_size_um": ..., "z_unit": "um"}``
    and the X/Y resolution tags hold pixels per centimetre.
    """
    try:
        from fracto.io import PixelSize, write_height_map
    except ImportError:  # the reader/writer package is not there: same convention here
        write_height_map = None
    if write_height_map is not None:
        write_height_map(
            path, np.asarray(height_um, np.float32), PixelSize.square(pixel_size_um, "synthetic")
        )
        return
    import io
    import json

    import tifffile

    buf = io.BytesIO()
    per_cm = 1e4 / float(pixel_size_um)
    tifffile.imwrite(
        buf,
        np.ascontiguousarray(height_um, dtype=np.float32),
        description=json.dumps({"pixel_size_um": float(pixel_size_um), "z_unit": "um"}),
        resolution=(per_cm, per_cm),
        resolutionunit="CENTIMETER",
        metadata=None,
        software="fracto",
    )
    write_bytes_atomic(path, buf.getvalue())


def _png_bytes(img: np.ndarray) -> bytes:
    ok, buf = cv2.imencode(".png", img, [cv2.IMWRITE_PNG_COMPRESSION, 6])
    if not ok:  # pragma: no cover
        raise RuntimeError("PNG encoding failed")
    return buf.tobytes()


def prepare_output_folder(outdir: str | os.PathLike, *, force: bool = False) -> Path:
    """Create `outdir` for output; refuse a file, or a non-empty folder unless `force`."""
    out = Path(outdir)
    if out.exists() and not out.is_dir():
        raise FractoInputError(f"The output path '{out}' exists and is not a folder.")
    if out.is_dir() and any(out.iterdir()) and not force:
        raise FractoInputError(
            f"The output folder '{out}' is not empty; choose another or use --force."
        )
    out.mkdir(parents=True, exist_ok=True)
    return out


@dataclass(frozen=True)
class SyntheticSurface:
    """A synthetic fracture surface with its true mode map.

    Attributes
    ----------
    height_um : ndarray float32 (ny, nx)
        Heights in µm.
    sem : ndarray float32 (ny + banner rows, nx)
        SE rendering in [0, 1]; an information banner, when rendered, is
        appended below the image (``truth["banner_rows"]`` rows).
    labels : ndarray uint8 (ny, nx)
        Mode per pixel, index into :data:`fracto.classes.CLASSES` (0 unused).
    grain_ids : ndarray int32 (ny, nx)
        Grain number per pixel (1..n_grains).
    pixel_size_um : float
    truth : dict
        ``classes``, ``fractions``, ``pixel_size_um``, grain statistics,
        every parameter, ``seed``, ``version``.
    """

    height_um: np.ndarray
    sem: np.ndarray
    labels: np.ndarray
    grain_ids: np.ndarray
    pixel_size_um: float
    truth: dict = field(default_factory=dict)

    def write(self, outdir: str | os.PathLike, *, force: bool = False) -> list[Path]:
        """Write height.tif, sem.png, labels.png, grains.tif and truth.json.

        Parameters
        ----------
        outdir : path
            Output folder; created when missing. A non-empty folder is refused
            unless `force`.
        force : bool
            Overwrite into a non-empty folder.

        Returns
        -------
        list of Path
            The files written.
        """
        out = prepare_output_folder(outdir, force=force)
        paths = [out / n for n in ("height.tif", "sem.png", "labels.png", "grains.tif")]
        write_height_tif(paths[0], self.height_um, self.pixel_size_um)
        bits = int(self.truth.get("render", {}).get("bit_depth", 8))
        if bits == 16:
            img = np.round(np.clip(self.sem, 0, 1) * 65535).astype(np.uint16)
        else:
            img = np.round(np.clip(self.sem, 0, 1) * 255).astype(np.uint8)
        write_bytes_atomic(paths[1], _png_bytes(img))
        write_bytes_atomic(paths[2], _png_bytes(self.labels.astype(np.uint8)))
        import io

        import tifffile

        buf = io.BytesIO()
        tifffile.imwrite(buf, self.grain_ids.astype(np.int32), software="fracto", metadata=None)
        write_bytes_atomic(paths[3], buf.getvalue())
        write_json_atomic(out / "truth.json", self.truth)
        return [*paths, out / "truth.json"]


def _shape(size: int | tuple[int, int]) -> tuple[int, int]:
    if isinstance(size, int | np.integer):
        ny = nx = int(size)
    else:
        try:
            ny, nx = (int(v) for v in size)
        except (TypeError, ValueError):
            raise FractoInputError("The size must be a whole number or (rows, columns).") from None
    if ny < 32 or nx < 32 or ny * nx > 4096 * 4096:
        raise FractoInputError("The image size must be between 32 and 4096 pixels a side.")
    return ny, nx


def _check_modes(modes: dict[str, float]) -> dict[str, float]:
    out = {}
    for k, v in modes.items():
        if k not in MODES:
            raise FractoInputError(f"Unknown fracture mode '{k}'; use {', '.join(MODES)}.")
        v = float(v)
        if not (math.isfinite(v) and 0 <= v <= 1):
            raise FractoInputError(f"The fraction of {k} must lie in 0..1, not {v}.")
        out[k] = v
    total = sum(out.values())
    if abs(total - 1.0) > 0.01:
        raise FractoInputError(f"The mode fractions must add up to 1, not {total:.3f}.")
    return {m: out.get(m, 0.0) / total for m in MODES}


def _assign_targets(
    areas: np.ndarray, targets: dict[str, float], patch: np.ndarray, rng: np.random.Generator
) -> np.ndarray:
    """Greedy assignment of whole grains to modes to match target area fractions."""
    n = len(areas)
    total = float(areas.sum())
    mode = np.full(n, -1, np.int64)
    orders = {
        "ductile": np.argsort(patch[:, 0] + 1e-9 * rng.standard_normal(n), kind="stable"),
        "fatigue": np.argsort(patch[:, 1] + 1e-9 * rng.standard_normal(n), kind="stable"),
        "intergranular": rng.permutation(n),
    }
    for name in ("ductile", "fatigue", "intergranular"):
        goal = targets[name] * total
        if goal <= 0:
            continue
        cum = 0.0
        k = MODES.index(name)
        for i in orders[name]:
            if mode[i] >= 0:
                continue
            a = float(areas[i])
            if abs(cum + a - goal) < abs(cum - goal):
                mode[i] = k
                cum += a
            if cum >= goal:
                break
    mode[mode < 0] = MODES.index("transgranular")
    if targets["transgranular"] <= 0 and np.any(mode == MODES.index("transgranular")):
        # nothing should be transgranular: give the leftovers to the largest other target
        k = MODES.index(max((m for m in MODES if m != "transgranular"), key=targets.get))
        mode[mode == MODES.index("transgranular")] = k
    return mode


def _smooth_noise(
    shape: tuple[int, int], px: float, corr_um: float, rng: np.random.Generator
) -> np.ndarray:
    """Unit-RMS smooth noise (Gaussian correlated) from a child seed."""
    corr = max(corr_um, 2.5 * px)
    return gaussian_correlated_field(
        shape, corr, px, px, rms_um=1.0, seed=int(rng.integers(2**31))
    )


def _section_distance(gid: np.ndarray) -> np.ndarray:
    """Distance (pixels) of every pixel to the outline of its grain section."""
    edge = np.zeros(gid.shape, bool)
    edge[:, 1:] |= gid[:, 1:] != gid[:, :-1]
    edge[:, :-1] |= gid[:, 1:] != gid[:, :-1]
    edge[1:] |= gid[1:] != gid[:-1]
    edge[:-1] |= gid[1:] != gid[:-1]
    return cv2.distanceTransform((~edge).astype(np.uint8), cv2.DIST_L2, 5).astype(np.float64)


def make_surface(
    *,
    size: int | tuple[int, int] = 1024,
    pixel_size_um: float = 0.1,
    modes: dict[str, float] | None = None,
    grain_size: GrainSize | None = None,
    temperature_C: float | None = None,
    transition_C: float | None = None,
    mode_model: ModeModel | None = None,
    render: RenderSettings | None = None,
    fracture: FractureSettings | None = None,
    seed: int = 0,
    profile: dict | None = None,
) -> SyntheticSurface:
    """Make a synthetic fracture surface with known mode fractions and its SEM view.

    Parameters
    ----------
    size : int or (int, int)
        Pixels a side, or (rows, columns).
    pixel_size_um : float
        Lateral sampling (µm).
    modes : dict, optional
        Target area fractions by mode name (must add up to 1). Without it the
        modes come from `mode_model` at `temperature_C`, and without a
        temperature the default is half intergranular, half transgranular.
    grain_size : GrainSize, optional
        Default: Poisson–Voronoi grains of 2 µm.
    temperature_C, transition_C : float, optional
        Test and transition temperature (°C) for the mode model.
    mode_model : ModeModel, optional
        Default :class:`ModeModel` (a steel-like tanh transition).
    render : RenderSettings, optional
        SEM rendering settings (default :class:`RenderSettings`).
    fracture : FractureSettings, optional
        Geometry of the modes (default :class:`FractureSettings`).
    seed : int
        Seed of every random step.
    profile : dict, optional
        When given, filled with the seconds spent in each stage (benchmarks).

    Returns
    -------
    SyntheticSurface

    References
    ----------
    .. [1] ASM Handbook Vol. 12, *Fractography*, 1987 (appearance of the modes).
    .. [2] J. L. Meijering, *Philips Res. Rep.* 8 (1953) 270 (Poisson–Voronoi grains).
    .. [3] L. Reimer, *Scanning Electron Microscopy*, 2nd ed., 1998 (SE contrast).
    """
    ny, nx = _shape(size)
    px = float(pixel_size_um)
    if not (math.isfinite(px) and px > 0):
        raise FractoInputError("The pixel size must be a positive length in µm.")
    gs = grain_size or GrainSize()
    fs = fracture or FractureSettings()
    rs = render or RenderSettings()
    mm = mode_model or ModeModel()
    if modes is not None:
        targets = _check_modes(modes)
    elif temperature_C is not None:
        if transition_C is None:
            raise FractoInputError("Give the transition temperature with the test temperature.")
        targets = None
    else:
        targets = {"intergranular": 0.5, "transgranular": 0.5, "ductile": 0.0, "fatigue": 0.0}
    if not (0.25 * px <= gs.mean_um or gs.kind == "bimodal"):
        raise FractoInputError("The grains are smaller than the pixels; use a larger grain size.")

    streams = [np.random.default_rng(s) for s in np.random.SeedSequence(seed).spawn(16)]
    d_nom = gs.nominal_um
    extent = (ny * px, nx * px)

    import time

    clock = [time.perf_counter()]

    def lap(name: str) -> None:
        now = time.perf_counter()
        if profile is not None:
            profile[name] = profile.get(name, 0.0) + now - clock[0]
        clock[0] = now

    # --- crack surface and polycrystal ------------------------------------------------------
    b_rms = fs.crack_roughness * d_nom
    crack = gaussian_correlated_field(
        (ny, nx), 4.0 * d_nom, px, px, rms_um=b_rms, seed=int(streams[0].integers(2**31))
    )
    slab = 1.1 * gs.largest_um

    def crack_at(xq: np.ndarray, yq: np.ndarray) -> np.ndarray:
        # the synthesised crack surface is periodic over the map: wrap outside it
        return ndimage.map_coordinates(
            crack, [yq / px - 0.5, xq / px - 0.5], order=1, mode="grid-wrap"
        )

    lap("crack surface")
    poly = make_polycrystal(
        extent, gs, seed=int(streams[1].integers(2**31)), slab_half_um=slab, crack_um=crack_at
    )
    lap("tessellation")
    yy, xx = np.mgrid[0:ny, 0:nx]
    x = ((xx + 0.5) * px).ravel()
    y = ((yy + 0.5) * px).ravel()
    owner = poly.owner(np.c_[x, y, crack.ravel()])
    present, compact = np.unique(owner, return_inverse=True)
    gid = (compact + 1).reshape(ny, nx).astype(np.int32)
    n_g = len(present)
    lap("grain map")
    z_top, z_bot, _f_top, _f_bot = column_extent(poly, owner, x, y, resolve=False)
    lap("grain faces")

    idx = np.arange(1, n_g + 1)
    areas = ndimage.sum_labels(np.ones_like(gid, np.float64), gid, idx)
    cy = ndimage.sum_labels(yy.astype(np.float64), gid, idx) / areas
    cx = ndimage.sum_labels(xx.astype(np.float64), gid, idx) / areas
    # section equivalent-circle diameter × 4/π ≈ sphere diameter (mean section of a
    # sphere has diameter π/4 of it: common stereology, random planes through spheres)
    ecd_um = np.sqrt(4.0 * areas / math.pi) * px
    size_um = ecd_um * 4.0 / math.pi

    # --- grain modes ------------------------------------------------------------------------
    patch_maps = [_smooth_noise((ny, nx), px, mm.patch_um, streams[2]) for _ in range(2)]
    ci = np.clip(np.round(cy).astype(int), 0, ny - 1)
    cj = np.clip(np.round(cx).astype(int), 0, nx - 1)
    patch = np.stack([pm[ci, cj] for pm in patch_maps], axis=1)
    if targets is not None:
        gmode = _assign_targets(areas, targets, patch, streams[3])
    else:
        gmode = mm.draw(size_um, float(temperature_C) - float(transition_C), patch, streams[3])
    pmode = gmode[compact]  # per pixel, 0-based into MODES
    labels = (pmode + 1).reshape(ny, nx).astype(np.uint8)

    lap("grain modes")
    # --- heights per mode -------------------------------------------------------------------
    h = crack.ravel().copy()
    g = compact
    seeds = poly.seeds_um[present]
    rng = streams[4]

    # intergranular: stay (top faces) or pulled out (bottom faces)
    bc = crack[ci, cj]
    rel = (seeds[:, 2] - bc) / np.maximum(size_um, px)
    p_stay = 1.0 / (1.0 + np.exp(fs.pullout_bias * 2.0 * rel))
    stays = rng.uniform(size=n_g) < p_stay
    sel = pmode == 0
    h[sel] = np.where(stays[g[sel]], z_top[sel], z_bot[sel])
    # Where the face crossed is shared with another intergranular grain of the section
    # that went the same way (both stay / both pulled out), the crack runs on along
    # that grain's faces: the boundary between them becomes an inclined facet
    # instead of a vertical cliff. A few passes follow chains of such grains.
    if sel.any():
        compact_of = np.full(len(poly.seeds_um), -1, np.int64)
        compact_of[present] = np.arange(n_g)
        pix = np.flatnonzero(sel)
        st = stays[g[pix]]
        sgn = np.where(st, 1.0, -1.0)
        zcur = h[pix]
        nb_all = np.where(st, _f_top[pix], _f_bot[pix])
        active = np.arange(pix.size)
        for _ in range(3):
            nb = nb_all[active]
            # faces whose far side is not stored (two-level tessellation): probe it
            unknown = (nb < 0) & (np.abs(zcur[active]) < poly.slab_half_um)
            if unknown.any():
                au = active[unknown]
                nb[unknown] = poly.owner(np.c_[x[pix[au]], y[pix[au]], zcur[au] + 1e-6 * sgn[au]])
            cn = np.where(nb >= 0, compact_of[np.maximum(nb, 0)], -1)
            ok = cn >= 0
            ok[ok] &= (gmode[cn[ok]] == 0) & (stays[cn[ok]] == st[active][ok])
            if not ok.any():
                break
            act = active[ok]
            zt2, zb2, ft2, fb2 = column_extent(
                poly, nb[ok], x[pix[act]], y[pix[act]], resolve=False
            )
            zcur[act] = np.where(st[act], zt2, zb2)
            nb_all[act] = np.where(st[act], ft2, fb2)
            active = act
        h[pix] = zcur
        # real boundary faces are not flat: each whole grain face set bends gently,
        # a cap bulging out, a socket hollowed in (a dome over the grain section,
        # zero at its outline, from the distance to the section boundary)
        dist = _section_distance(gid)
        dmax = np.asarray(ndimage.maximum(dist, gid, idx))
        t = dist.ravel()[pix] / np.maximum(dmax[g[pix]], 1.0)
        kappa = fs.boundary_curvature * rng.uniform(0.3, 1.7, n_g)
        h[pix] += (sgn * kappa[g[pix]] * size_um[g[pix]]) * t * (2.0 - t)

    # transgranular cleavage
    sel = pmode == 1
    if sel.any():
        normals = cleavage_normals(poly.rotations[present], fs.cleavage_family)
        gs_ = g[sel]
        nn = normals[gs_]
        xc = (cx[gs_] + 0.5) * px
        yc = (cy[gs_] + 0.5) * px
        travel = (
            math.radians(fs.crack_direction_deg)
            if fs.crack_direction_deg is not None
            else float(streams[5].uniform(0, 2 * math.pi))
        )
        ang = travel + np.radians(25.0) * rng.standard_normal(n_g)
        du, dv = x[sel] - xc, y[sel] - yc
        ca, sa = np.cos(ang)[gs_], np.sin(ang)[gs_]
        u = du * ca + dv * sa
        v = -du * sa + dv * ca
        umin_g = np.asarray(ndimage.minimum(u, gs_, np.arange(n_g)))
        umax_g = np.asarray(ndimage.maximum(u, gs_, np.arange(n_g)))
        umin = umin_g[gs_]
        umax = umax_g[gs_]
        un = (u - umin) / np.maximum(umax - umin, px)
        # the facet starts where the crack enters the grain: there it meets the
        # crack surface (continuity of the crack front), elsewhere it follows the plane
        ex = (cx + 0.5) * px + np.nan_to_num(umin_g) * np.cos(ang)
        ey = (cy + 0.5) * px + np.nan_to_num(umin_g) * np.sin(ang)
        ei = np.clip(np.round(ey / px - 0.5).astype(int), 0, ny - 1)
        ej = np.clip(np.round(ex / px - 0.5).astype(int), 0, nx - 1)
        slope_t = (normals[:, 0] * np.cos(ang) + normals[:, 1] * np.sin(ang)) / normals[:, 2]
        zc = crack[ei, ej] + np.nan_to_num(umin_g) * slope_t
        zc = zc + 0.04 * size_um * rng.standard_normal(n_g)
        plane = zc[gs_] - (nn[:, 0] * du + nn[:, 1] * dv) / nn[:, 2]
        wob = _smooth_noise((ny, nx), px, 1.2 * d_nom, streams[6]).ravel()[sel]
        # river lines: spacing grows as the square root of the grain size (coarse
        # facets carry many more lines than fine ones); step height 10 % of it
        spacing = np.maximum(fs.river_spacing * np.sqrt(size_um[gs_] * 1.0), 3.0 * px)
        # irregular line spacing: a field stretched along the mean travel direction
        streak = gaussian_correlated_field(
            (ny, nx),
            max(2.0 * d_nom, 4 * px),
            px,
            px,
            rms_um=1.0,
            seed=int(streams[11].integers(2**31)),
            anisotropy=0.08,
            angle_deg=math.degrees(travel),
        ).ravel()[sel]
        steps = river_steps(un, v, 0.3 * wob + 0.8 * streak, spacing, fs.river_merge)
        step_h = fs.river_step_um if fs.river_step_um is not None else 0.1 * spacing
        sign = np.where(rng.uniform(size=n_g) < 0.5, -1.0, 1.0)
        # not every facet shows rivers, and their strength varies from grain to grain
        shows = rng.uniform(size=n_g) < fs.river_fraction
        amp = (sign * shows * rng.uniform(0.5, 1.5, size=n_g))[gs_]
        relief = amp * step_h * (steps - steps.mean())
        # occasional larger cleavage steps along the travel direction
        big_h = fs.cleavage_step_um if fs.cleavage_step_um is not None else 0.06 * d_nom
        has_big = (rng.uniform(size=n_g) < 0.5)[gs_]
        off = rng.uniform(size=n_g)[gs_]
        big = np.floor(v / (0.45 * size_um[gs_]) + off + 0.3 * wob)
        relief += np.where(has_big, big_h * big, 0.0)
        # conchoidal bending of the facet: a random quadratic form per grain
        kappa = fs.cleavage_curvature * rng.standard_normal((n_g, 2))[gs_]
        half = 0.5 * np.maximum(size_um[gs_], px)
        bend = kappa[:, 0] * (u / half) ** 2 + kappa[:, 1] * (v / half) ** 2
        # faint conchoidal ripples: arcs about a point upstream of the entry edge
        rip_on = (rng.uniform(size=n_g) < fs.ripple_fraction)[gs_]
        rip_amp = fs.ripple_height * size_um[gs_] * rng.uniform(0.3, 1.0, n_g)[gs_]
        rip_len = np.maximum(0.22 * size_um[gs_], 4.0 * px)
        r_up = np.hypot(u - umin + half, v)
        ripple = np.where(rip_on, rip_amp * np.sin(2 * math.pi * r_up / rip_len + 2.0 * wob), 0)
        # chipped terraces: a staircase of small steps cutting off a side of the facet
        chip_on = (rng.uniform(size=n_g) < fs.terrace_fraction)[gs_]
        beta = rng.uniform(0, 2 * math.pi, n_g)
        w = (du * np.cos(beta)[gs_] + dv * np.sin(beta)[gs_]) / half
        w0 = rng.uniform(0.2, 0.7, n_g)[gs_]
        n_steps = np.floor(np.maximum(w - w0 + 0.15 * streak, 0.0) / 0.18) * chip_on
        terrace = -n_steps * (0.03 * size_um[gs_]) * rng.uniform(0.5, 1.5, n_g)[gs_]
        zz = plane + relief + bend * half + ripple + terrace
        h[sel] = np.clip(zz, z_bot[sel] + 0.01 * px, z_top[sel] - 0.01 * px)

    # ductile
    sel = pmode == 2
    if sel.any():
        dim = dimple_field((ny, nx), px, fs, streams[7], mask=sel.reshape(ny, nx)).ravel()
        h[sel] = crack.ravel()[sel] + dim[sel]

    # fatigue
    sel = pmode == 3
    if sel.any():
        gs_ = g[sel]
        travel = (
            math.radians(fs.crack_direction_deg)
            if fs.crack_direction_deg is not None
            else float(streams[5].uniform(0, 2 * math.pi))
        )
        # striations are arcs concentric about a distant crack origin behind the
        # field (the crack front's curvature): the phase is the distance from it,
        # so the spacing along the local growth direction is exactly the nominal one
        ca, sa = math.cos(travel), math.sin(travel)
        r0 = 4.0 * math.hypot(*extent)
        lateral = 0.05 * r0 * float(streams[12].uniform(-1.0, 1.0))
        ox = 0.5 * extent[1] - r0 * ca - lateral * sa
        oy = 0.5 * extent[0] - r0 * sa + lateral * ca
        along = np.hypot(x[sel] - ox, y[sel] - oy)
        # weak wobble: a tenth of a spacing, and a phase jump at each grain boundary
        wob = _smooth_noise((ny, nx), px, 1.5 * d_nom, streams[8]).ravel()[sel]
        jump = rng.uniform(size=n_g)[gs_]
        # plateaus tilted by at most 1° per grain
        tilt = np.radians(1.0) * rng.uniform(-1.0, 1.0, (n_g, 2)) / math.sqrt(2.0)
        plateau = np.tan(tilt[gs_, 0]) * (x[sel] - (cx[gs_] + 0.5) * px) + np.tan(tilt[gs_, 1]) * (
            y[sel] - (cy[gs_] + 0.5) * px
        )
        h[sel] = (
            crack.ravel()[sel]
            + plateau
            + striations(
                along,
                fs.striation_spacing_um * (0.1 * wob + jump),
                fs.striation_spacing_um,
                fs.striation_height_um,
            )
        )

    height = h.reshape(ny, nx)

    # secondary cracks along some intergranular boundaries
    if fs.secondary_crack_probability > 0 and np.any(labels == 1):
        ig = labels == 1
        pair_code = np.zeros((ny, nx), np.int64)
        right = gid[:, 1:] != gid[:, :-1]
        down = gid[1:] != gid[:-1]
        edge = np.zeros((ny, nx), bool)
        a = np.minimum(gid[:, 1:], gid[:, :-1]).astype(np.int64)
        bb = np.maximum(gid[:, 1:], gid[:, :-1]).astype(np.int64)
        pair_code[:, 1:][right] = (a * (n_g + 1) + bb)[right]
        edge[:, 1:] |= right
        a = np.minimum(gid[1:], gid[:-1]).astype(np.int64)
        bb = np.maximum(gid[1:], gid[:-1]).astype(np.int64)
        m = down & ~edge[1:]
        pair_code[1:][m] = (a * (n_g + 1) + bb)[m]
        edge[1:] |= down
        # a boundary opens with the given probability: hash of the grain pair
        hsh = (pair_code * 2654435761 + seed * 97) % 1000003
        opened = edge & ig & (hsh < fs.secondary_crack_probability * 1000003)
        opened = ndimage.binary_dilation(opened, iterations=1) & ig
        if opened.any():
            depth = 0.35 * d_nom
            height = np.where(opened, height - depth, height)

    if fs.debris_per_um2 > 0 or fs.fragment_clusters > 0:
        # loose fragments: isolated debris and clusters of small flakes
        drng = streams[10]
        frag_um = fs.fragment_um if fs.fragment_um is not None else 0.12 * d_nom
        sites, radii, clustered = fragment_sites(
            (ny, nx),
            drng,
            n_single=fs.debris_per_um2 * extent[0] * extent[1],
            n_clusters=fs.fragment_clusters * extent[0] * extent[1] / d_nom**2,
            per_cluster=fs.fragments_per_cluster,
            single_radius_px=0.5 * fs.debris_um / px,
            cluster_radius_px=0.6 * d_nom / px,
            fragment_radius_px=0.5 * frag_um / px,
        )
        # clusters of flakes come from brittle fracture: only on intergranular and
        # cleavage grains (isolated debris lies anywhere)
        si = np.clip(sites[:, 0].astype(int), 0, ny - 1)
        sj = np.clip(sites[:, 1].astype(int), 0, nx - 1)
        keep = ~clustered | (labels[si, sj] <= 2)
        height = place_fragments(height, px, sites[keep], radii[keep], drng)

    if fs.edge_rounding_um > 0:
        # at least one pixel, so steps along oblique boundaries do not alias into dots
        height = ndimage.gaussian_filter(height, max(fs.edge_rounding_um / px, 1.0))
    height32 = height.astype(np.float32)
    lap("mode relief")
    sem = render_sem(height32, px, rs, seed=int(streams[9].integers(2**31)))
    lap("SEM rendering")

    counts = np.bincount(labels.ravel(), minlength=len(CLASSES))
    total = float(labels.size)
    fractions = {name: float(counts[i] / total) for i, name in enumerate(CLASSES) if i > 0}
    L_px = mean_lineal_intercept_px(gid)
    stats = {
        "n_grains_in_view": int(n_g),
        "mean_lineal_intercept_um": float(L_px * px),
        "mean_section_ecd_um": float(np.mean(ecd_um)),
        "area_weighted_section_ecd_um": float(np.sum(ecd_um * areas) / np.sum(areas)),
        "seeds_per_um3": float(
            len(poly.seeds_um)
            / ((extent[0] + 3 * gs.largest_um) * (extent[1] + 3 * gs.largest_um) * 2 * slab)
        ),
        "poisson_voronoi_intercept_um": float(
            MEIJERING_INTERCEPT * (math.pi * gs.mean_um**3 / 6.0) ** (1 / 3)
        )
        if gs.kind == "lognormal" and gs.spread == 0
        else None,
    }
    if gs.kind == "bimodal":
        coarse_px = poly.population[present][compact]
        stats["coarse_area_fraction"] = float(np.mean(coarse_px == 1))
    truth = {
        "generator": "fracto.synth",
        "version": __version__,
        "generator_version": GENERATOR_VERSION,
        "seed": int(seed),
        "classes": list(CLASSES),
        "fractions": fractions,
        "pixel_size_um": px,
        "shape": [ny, nx],
        "banner_rows": banner_rows((ny, nx), rs),
        "grain_statistics": stats,
        "parameters": {
            "size": [ny, nx],
            "pixel_size_um": px,
            "modes": targets,
            "temperature_C": temperature_C,
            "transition_C": transition_C,
            "grain_size": gs.to_dict(),
            "mode_model": mm.to_dict() if targets is None else None,
            "fracture": fs.to_dict(),
        },
        "striation_spacing_um": fs.striation_spacing_um if fractions["fatigue"] > 0 else None,
        "render": rs.to_dict(),
    }
    return SyntheticSurface(
        height_um=height32,
        sem=sem,
        labels=labels,
        grain_ids=gid,
        pixel_size_um=px,
        truth=truth,
    )
