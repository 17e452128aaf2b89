"""Mode-map pictures: an overlay PNG with a legend, and an indexed label PNG.

Colours come from the Okabe-Ito qualitative set (Okabe & Ito 2008, an open
recommendation for colour-blind-safe figures), assigned in fracto's own order;
every colour is named in the legend, so the picture never relies on colour
alone. Unclassified regions are left grey and hatched in the legend.

References
----------
.. [1] Okabe, M., Ito, K. (2008). Color Universal Design (CUD): how to make figures and
   presentations that are friendly to colorblind people. J*Fly, web document.
"""

from __future__ import annotations

import io
import os
from collections.abc import Sequence

import numpy as np

from fracto.classes import UNCLASSIFIED
from fracto.io.safe import write_bytes_atomic

#: Okabe-Ito colours (hex) in the order fracto assigns them to classes.
PALETTE: tuple[str, ...] = (
    "#0072B2",  # blue
    "#E69F00",  # orange
    "#009E73",  # bluish green
    "#CC79A7",  # reddish purple
    "#56B4E9",  # sky blue
    "#D55E00",  # vermillion
    "#F0E442",  # yellow
)


def class_colours(classes: Sequence[str]) -> dict[str, str]:
    """Colour of each class name (fracto's modes always get the same colour)."""
    from fracto.classes import MODES

    out: dict[str, str] = {}
    extra = iter(PALETTE[len(MODES) :])
    for c in classes:
        if c in MODES:
            out[c] = PALETTE[MODES.index(c)]
        else:
            out[c] = next(extra, "#000000")
    return out


def overlay_png(
    image: np.ndarray,
    label_map: np.ndarray,
    classes: Sequence[str],
    *,
    fractions: dict[str, float] | None = None,
    alpha: float = 0.4,
    title: str | None = None,
    max_side_px: int = 1600,
    confidence: np.ndarray | None = None,
    fractions_note: str | None = None,
    map_fractions: dict[str, float] | None = None,
) -> bytes:
    """PNG bytes of the grey image with translucent mode colours and a legend.

    Parameters
    ----------
    image : ndarray
        Grey image (any range; shown by its robust range).
    label_map : ndarray of int
        0 = unclassified, ``i`` = ``classes[i - 1]``.
    classes : sequence of str
    fractions : dict, optional
        Area fraction per class name (and ``unclassified``) for the legend.
    alpha : float
        Opacity of the colours.
    title : str, optional
    max_side_px : int
        Longest side of the picture (the image is decimated for display only).
    confidence : ndarray, optional
        Probability of each pixel's label (image grid). The colour opacity then
        grows with it, from a faint tint at chance level to `alpha` + 0.3 at
        certainty, and the legend shows three levels.
    fractions_note : str, optional
        Legend subtitle for the fractions (e.g. "corrected fractions").
    map_fractions : dict, optional
        Share of the painted map in each class, shown beside `fractions` when
        those differ from it (corrected fractions), so the legend agrees with
        the picture; see :func:`legend_labels`.
    """
    import matplotlib

    matplotlib.use("Agg", force=False)
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.colors import to_rgb
    from matplotlib.figure import Figure
    from matplotlib.patches import Patch

    img = np.asarray(image, dtype=np.float64)
    lab = np.asarray(label_map)
    step = max(1, int(np.ceil(max(img.shape) / max_side_px)))
    img, lab = img[::step, ::step], lab[::step, ::step]
    k = max(1, len(classes))
    if confidence is not None:
        conf = np.asarray(confidence, dtype=np.float64)[::step, ::step]
        strength = np.clip((conf - 1.0 / k) / (1.0 - 1.0 / k), 0.0, 1.0)
        a_map = (0.08 + (alpha + 0.3 - 0.08) * strength)[..., None]
    else:
        a_map = None
    finite = np.isfinite(img)
    lo, hi = np.percentile(img[finite], [1, 99]) if finite.any() else (0.0, 1.0)
    grey = np.clip((img - lo) / max(hi - lo, 1e-12), 0, 1)
    rgb = np.repeat(grey[..., None], 3, axis=2)
    cols = class_colours(classes)
    for i, c in enumerate(classes, start=1):
        sel = lab == i
        if sel.any():
            a = alpha if a_map is None else a_map[sel]
            rgb[sel] = (1 - a) * rgb[sel] + a * np.asarray(to_rgb(cols[c]))
    ny, nx = grey.shape
    dpi = 100
    side = 2.6 if map_fractions is None else 3.6  # inches of legend column
    fig = Figure(figsize=(nx / dpi + side, max(ny / dpi, 2.0) + 0.4), dpi=dpi)
    FigureCanvasAgg(fig)
    ax = fig.add_axes((0.0, 0.0, nx / dpi / (nx / dpi + side), 1.0 - 0.4 / (ny / dpi + 0.4)))
    ax.imshow(rgb, interpolation="nearest")
    ax.set_axis_off()
    labels = legend_labels(classes, fractions, map_fractions)
    handles = [Patch(facecolor=cols[c], edgecolor="black", label=labels[c]) for c in classes]
    handles.append(
        Patch(facecolor="#bbbbbb", edgecolor="black", hatch="//", label=labels[UNCLASSIFIED])
    )
    if a_map is not None:
        grey = np.array([0.6, 0.6, 0.6])
        for level in (0.5, 0.75, 1.0):
            st = float(np.clip((level - 1.0 / k) / (1.0 - 1.0 / k), 0.0, 1.0))
            a = 0.08 + (alpha + 0.3 - 0.08) * st
            face = (1 - a) * grey + a * np.asarray(to_rgb(PALETTE[0]))
            handles.append(
                Patch(facecolor=face, edgecolor="black", label=f"confidence {level:.2f}")
            )
    legend_title = "mode" if not fractions_note else f"mode ({fractions_note})"
    fig.legend(handles=handles, loc="center right", frameon=False, fontsize=9, title=legend_title)
    if title:
        fig.suptitle(title, fontsize=9)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi)
    return buf.getvalue()


def legend_labels(
    classes: Sequence[str],
    fractions: dict[str, float] | None = None,
    map_fractions: dict[str, float] | None = None,
) -> dict[str, str]:
    """Legend text of each class and of ``unclassified``.

    ``"name 40%"`` with `fractions` alone; with `map_fractions` too,
    ``"name 35% of map, 40% corrected"``.
    """
    out = {}
    for c in (*classes, UNCLASSIFIED):
        if fractions and c in fractions:
            if map_fractions is not None:
                share = f" {map_fractions.get(c, 0.0):.0%} of map, {fractions[c]:.0%} corrected"
            else:
                share = f" {fractions[c]:.0%}"
        else:
            share = ""
        out[c] = f"{c}{share}"
    return out


def write_overlay(path: str | os.PathLike, *args, **kwargs) -> None:
    """Write :func:`overlay_png` to `path` atomically."""
    write_bytes_atomic(path, overlay_png(*args, **kwargs))


def label_png(label_map: np.ndarray, classes: Sequence[str]) -> bytes:
    """Indexed PNG of a label map (0 = unclassified, i = classes[i-1]) with the palette."""
    from matplotlib.colors import to_rgb
    from PIL import Image

    lab = np.asarray(label_map).astype(np.uint8)
    im = Image.frombytes("P", (lab.shape[1], lab.shape[0]), np.ascontiguousarray(lab).tobytes())
    pal = [187, 187, 187]
    for c in classes:
        pal += [round(255 * v) for v in to_rgb(class_colours(classes)[c])]
    pal += [0, 0, 0] * (256 - len(pal) // 3)
    im.putpalette(pal)
    buf = io.BytesIO()
    im.save(buf, format="PNG")
    return buf.getvalue()


def write_labels(path: str | os.PathLike, label_map: np.ndarray, classes: Sequence[str]) -> None:
    """Write the indexed label PNG atomically."""
    write_bytes_atomic(path, label_png(label_map, classes))
