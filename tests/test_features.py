"""Tests of fracto.surface.features: Wolf pruning / dynamics and the feature parameters."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import ndimage as ndi
from skimage.morphology import h_maxima

from fracto.errors import FractoInputError
from fracto.surface import features
from fracto.surface.features import feature_parameters, peak_dynamics

EIGHT = np.ones((3, 3), dtype=bool)


def brute_force_dynamics(z: np.ndarray) -> dict[int, float]:
    """Slow, obviously correct dynamics of the strict regional maxima of a tie-free map.

    For a peak p the dynamic is z_p minus the highest level t at which the connected
    component of {z >= t} (8-connected, NaN excluded) holding p also holds a higher point
    (Grimaud 1992). Levels tried: every valid height below z_p, from the top.
    """
    valid = ~np.isnan(z)
    zz = np.where(valid, z, -np.inf)
    levels = np.unique(z[valid])[::-1]
    out = {}
    ny, nx = z.shape
    for i in range(ny):
        for j in range(nx):
            if not valid[i, j]:
                continue
            win = zz[max(0, i - 1) : i + 2, max(0, j - 1) : j + 2]
            if (win > zz[i, j]).any():
                continue
            zp = zz[i, j]
            dyn = np.inf
            for t in levels[levels < zp]:
                lab, _ = ndi.label(zz >= t, structure=EIGHT)
                comp = lab == lab[i, j]
                if (zz[comp] > zp).any():
                    dyn = zp - t
                    break
            out[i * nx + j] = dyn
    return out


@pytest.mark.parametrize("contract_only", [False, True])
@pytest.mark.parametrize("seed", range(6))
def test_dynamics_match_brute_force_on_small_random_maps(seed, contract_only, monkeypatch):
    # Reference: a direct level-set computation of the dynamics (brute_force_dynamics),
    # independent of the contraction algorithm; random floats have no ties.
    # contract_only: the contraction rounds run to the end (no sequential finish), so
    # both code paths are checked.
    if contract_only:
        monkeypatch.setattr(features, "_SEQUENTIAL_MIN", 0)
        monkeypatch.setattr(features, "_SEQUENTIAL_FRACTION", 10**12)
    rng = np.random.default_rng(seed)
    z = ndi.gaussian_filter(rng.standard_normal((22, 19)), 1.0) + 0.05 * rng.standard_normal(
        (22, 19)
    )
    if seed % 2:
        z[rng.random(z.shape) < 0.15] = np.nan
        z[5:9, 3:12] = np.nan
    idx, dyn = peak_dynamics(z)
    ref = brute_force_dynamics(z.astype(np.float32).astype(np.float64))
    assert sorted(ref) == sorted(idx.tolist())
    mine = dict(zip(idx.tolist(), dyn.tolist(), strict=True))
    for k, v in ref.items():
        if np.isinf(v):
            assert np.isinf(mine[k])
        else:
            assert mine[k] == pytest.approx(v, abs=1e-6)


@pytest.mark.parametrize("seed", range(4))
def test_surviving_peaks_match_skimage_h_maxima(seed):
    # Reference library: skimage.morphology.h_maxima (Vincent 1993 reconstruction) marks
    # the maxima of dynamic >= h; its connected components count the surviving peaks.
    rng = np.random.default_rng(100 + seed)
    z = ndi.gaussian_filter(rng.standard_normal((150, 130)), 2.0)
    z += 0.02 * rng.standard_normal(z.shape)
    z = z.astype(np.float32).astype(np.float64)
    _idx, dyn = peak_dynamics(z)
    for frac in (0.005, 0.02, 0.05, 0.1, 0.3):
        h = frac * (z.max() - z.min())
        # h_maxima on floats keeps dynamic > h (it subtracts a rounding margin); with
        # random floats no dynamic equals h, so >= and > agree
        ours = int(np.sum((dyn >= h) & (dyn > 0)))
        _, n_ref = ndi.label(h_maxima(z, h), structure=EIGHT)
        assert ours == n_ref, frac


def brute_force_plateau_dynamics(z: np.ndarray) -> dict[int, float]:
    """Slow dynamics of the regional maximum *plateaus* of a map with ties.

    A plateau (8-connected set of equal heights with no higher neighbour) is represented
    by its last pixel in raster order, r. Equal heights are ordered by raster index, as in
    Wolf pruning's merge of two equally high hills (one of them survives): the dynamic is
    z − the highest level t at which the component of {z >= t} holding the plateau holds a
    point that is higher, or equally high and later in raster order than r.
    """
    flat = z.ravel()
    order_idx = np.arange(flat.size)
    out = {}
    levels = np.unique(flat)[::-1]
    for v in levels:
        lab, n = ndi.label(z == v, structure=EIGHT)
        for k in range(1, n + 1):
            comp = lab == k
            ring = ndi.binary_dilation(comp, structure=EIGHT) & ~comp
            if (z[ring] > v).any():
                continue
            r = int(np.flatnonzero(comp.ravel()).max())
            dyn = np.inf
            for t in levels[levels < v]:
                cl, _ = ndi.label(z >= t, structure=EIGHT)
                c = (cl == cl.ravel()[r]).ravel()
                if ((flat > v) & c).any() or ((flat == v) & (order_idx > r) & c).any():
                    dyn = v - t
                    break
            out[r] = dyn
    return out


def test_plateaus_and_ties_match_brute_force():
    # Reference: brute_force_plateau_dynamics (direct level sets). Note that
    # skimage.morphology.h_maxima keeps two equally high peaks joined above z − h as two
    # (it breaks no ties); Wolf pruning merges them, so it is not the reference here.
    rng = np.random.default_rng(8)
    z = np.round(ndi.gaussian_filter(rng.standard_normal((40, 36)), 2.0) * 12).astype(float)
    idx, dyn = peak_dynamics(z)
    mine = {int(i): float(d) for i, d in zip(idx, dyn, strict=True) if d > 0}
    ref = brute_force_plateau_dynamics(z)
    ref = {k: v for k, v in ref.items() if v > 0}
    assert mine == ref


def bumps(shape, centres, heights, width):
    y, x = np.mgrid[0 : shape[0], 0 : shape[1]].astype(float)
    z = np.zeros(shape)
    for (cy, cx), h in zip(centres, heights, strict=True):
        z += h * np.exp(-((x - cx) ** 2 + (y - cy) ** 2) / (2 * width**2))
    return z


CENTRES = [(30 + 60 * i, 30 + 60 * j) for i in range(3) for j in range(4)]
HEIGHTS = [1.0, 1.3, 1.1, 1.8, 1.5, 1.25, 1.9, 1.6, 1.05, 1.7, 1.45, 1.15]


def test_gaussian_bumps_feature_parameters():
    # Analytic: z = h·exp(-r²/(2w²)) has ∂²z/∂x² = ∂²z/∂y² = −h/w² at its top, so ISO 25178-2
    # Spc = −(1/2n)Σ(zxx + zyy) = mean(h/w²) (sign: peaks positive). Twelve separated bumps:
    # Spd = 12 / area exactly; S5p = mean of the five highest tops above the mean plane.
    # The 3-point second difference at the top is (2e^(-δ²/2w²) − 2)/δ² ≈ −(1/w²)(1 − δ²/4w²):
    # −0.7 % at w = 6 samples, within the 1.5 % allowed.
    dx = 0.5  # µm
    w_px = 6.0
    z = bumps((180, 240), CENTRES, HEIGHTS, w_px)
    p = feature_parameters(z, dx, dx)
    area = z.size * dx * dx
    assert p["Spd"] == pytest.approx(len(CENTRES) / area, rel=1e-12)
    w = w_px * dx
    assert p["Spc"] == pytest.approx(np.mean(HEIGHTS) / w**2, rel=0.015)
    top5 = np.sort(HEIGHTS)[::-1][:5]
    assert p["S5p"] == pytest.approx(np.mean(top5) - z.mean(), rel=1e-6)
    assert p["S10z"] == pytest.approx(p["S5p"] + p["S5v"], rel=1e-12)
    # pits: the lowest points lie in the flat background, depth = mean plane − background
    assert p["S5v"] == pytest.approx(z.mean() - z.min(), rel=1e-6)


def test_wolf_pruning_removes_small_bumps_only():
    # ISO 25178-2 Wolf pruning at 5 % of Sz (ISO 25178-3 default, from memory): extra bumps
    # 2 % of Sz high do not change Spd; with pruning at 1 % they are counted (so the
    # check can fail).
    dx = 1.0
    z = bumps((180, 240), CENTRES, HEIGHTS, 6.0)
    rng = np.random.default_rng(5)
    small = [(60 + 60 * i, 60 + 60 * j) for i in range(2) for j in range(3)]  # between bumps
    sz0 = z.max() - z.min()
    z2 = z + bumps(z.shape, small, [0.02 * sz0] * len(small), 2.0)
    z2 += 1e-4 * rng.standard_normal(z.shape)  # tiny noise: many maxima of tiny dynamic
    area = z.size * dx * dx
    p = feature_parameters(z2, dx, dx)
    assert p["Spd"] * area == pytest.approx(len(CENTRES))
    p1 = feature_parameters(z2, dx, dx, pruning=0.01)
    assert p1["Spd"] * area == pytest.approx(len(CENTRES) + len(small))


def test_feature_parameters_nan_part_equals_valid_part():
    # Definition: missing points are not part of the surface; a map whose right part is NaN
    # gives the feature parameters of its left part (same peaks, same Sz, same valid area).
    rng = np.random.default_rng(12)
    z = ndi.gaussian_filter(rng.standard_normal((160, 200)), 3.0)
    holed = z.copy()
    holed[:, 120:] = np.nan
    a = feature_parameters(holed, 0.7, 0.7)
    b = feature_parameters(z[:, :120], 0.7, 0.7)
    for k in a:
        assert a[k] == pytest.approx(b[k], rel=1e-9), k


def test_feature_parameters_bad_input():
    with pytest.raises(FractoInputError):
        feature_parameters(np.zeros((5, 5)), 1.0, 1.0, pruning=5.0)
    with pytest.raises(FractoInputError):
        feature_parameters(np.zeros((5, 5)), -1.0, 1.0)


def test_two_workers_give_identical_results():
    # Determinism check: threading hills and dales must not change any number.
    rng = np.random.default_rng(21)
    z = ndi.gaussian_filter(rng.standard_normal((120, 100)), 2.0)
    z[rng.random(z.shape) < 0.02] = np.nan
    assert feature_parameters(z, 1.0, 1.0, workers=2) == feature_parameters(z, 1.0, 1.0)


@pytest.mark.parametrize("pool", [4096, 7])
@pytest.mark.parametrize("seed", range(5))
@pytest.mark.parametrize("frac", [0.01, 0.05, 0.2])
def test_top_down_pit_search_equals_full_dynamics(seed, frac, pool, monkeypatch):
    # Reference: the full dynamics of the inverted surface (peak_dynamics on −z, itself
    # checked against the brute-force level sets above): the k deepest surviving pits
    # found from the bottom must be exactly the k deepest of the full selection.
    # pool = 7 forces the growing candidate pool (the path large maps take).
    monkeypatch.setattr(features, "_POOL_MIN", pool)
    rng = np.random.default_rng(40 + seed)
    z = ndi.gaussian_filter(rng.standard_normal((90, 110)), 2.0)
    z += 0.03 * rng.standard_normal(z.shape)
    if seed == 3:
        z = np.round(z * 15)  # ties and plateaus
    if seed >= 2:
        z[rng.random(z.shape) < 0.05] = np.nan
        z[20:40, 30:35] = np.nan
    g = (-z).astype(np.float32)
    h = frac * float(np.nanmax(z) - np.nanmin(z))
    for k in (1, 5, 40):
        fast = features._top_surviving_peaks(g, h, k)
        full = features._select_all(g, h, k)
        assert fast.tolist() == full.tolist()
