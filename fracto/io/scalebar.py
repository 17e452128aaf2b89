"""Scale bars in the information banner of SEM fractographs: find, measure, read.

Most fractographs carry no pixel size in their metadata but nearly all show a
scale bar with a label ("10 µm") in the banner. This module

1. finds the bar: the grey level of the banner background is its commonest
   level (a 64-bin mode); *marks* are pixels that differ from it by more than
   :data:`MARK_CONTRAST` (bright-on-dark and dark-on-bright are searched
   separately); the bar is the longest connected component of marks
   (OpenCV ``connectedComponentsWithStats``) that is a long thin horizontal
   run: at least :data:`MIN_BAR_PX` long, at least :data:`MIN_ASPECT` times
   longer than its thickness, whose core rows are marked over at least 90 %
   of its extent, with marks outside the core rows only near its two ends
   (end ticks), and not a separator line across the whole strip;
2. measures its length with sub-pixel precision: along each core row of the
   bar (rows marked over >= 80 % of the component's extent; end ticks, which
   stand above and below the bar, do not count as core rows) the
   contrast ``c = (g - bg) / (fg - bg)`` is summed over the bar's columns and
   two pixels either side. For a bar drawn with anti-aliased (area-coverage)
   ends the sum is the covered length exactly (the partial end pixels
   contribute their coverage); the median over core rows is the length.
   Convention: the length runs from the outer edge of one end to the outer
   edge of the other (end ticks included when they lie in the bar's rows);
3. reads the label with Tesseract OCR (through pytesseract) on a crop of the
   text line nearest to the bar, scaled so the text is 28 px high (then 40, 20),
   as black text on white; the text is parsed by :func:`parse_scale_label`,
   which accepts the usual OCR confusions of the micro sign and nothing
   else; a reading whose value is not a usual scale-bar value
   (:data:`USUAL_MANTISSAS` × 10^n) is refused as a probable misreading.

:func:`pixel_size_from_scale_bar` turns bar and label (or a length given by
the user, ``--scale-bar 10um``) into a :class:`~fracto.io.calibration.PixelSize`
with source ``"scale bar (OCR)"`` or ``"scale bar (given length)"``.

References
----------
.. [1] R. Smith, "An overview of the Tesseract OCR engine", Proc. ICDAR 2007,
   629-633 (the OCR engine).
.. [2] OpenCV ``connectedComponentsWithStats`` (connected-component labelling,
   Wu, Otoo & Suzuki 2009) for the bar candidates.
"""

from __future__ import annotations

import math
import re
import shutil
from dataclasses import asdict, dataclass

import numpy as np

from fracto.errors import FractoInputError
from fracto.io.calibration import PixelSize
from fracto.units import length_unit_factor, parse_length_um

__all__ = [
    "ScaleBar",
    "find_scale_bar",
    "ocr_available",
    "parse_scale_label",
    "pixel_size_from_scale_bar",
    "read_bar_label",
]

#: Marks differ from the banner background by more than this (grey levels in [0, 1]).
MARK_CONTRAST = 0.25
#: Shortest bar accepted, in pixels.
MIN_BAR_PX = 20
#: Smallest length / thickness of a bar.
MIN_ASPECT = 5.0
#: (text height in px, Tesseract page mode) tried in turn on the label crop.
OCR_ATTEMPTS = ((28, 7), (40, 7), (20, 7), (28, 8))
#: Accepted label range in µm (1 nm .. 10 mm): SEM scale bars lie well inside it.
LABEL_RANGE_UM = (1e-3, 1e4)

#: Characters Tesseract may return for a label (digits, decimal marks, unit letters).
OCR_WHITELIST = "0123456789.,umnpµμ"

SOURCE_OCR = "scale bar (OCR)"
SOURCE_GIVEN = "scale bar (given length)"


@dataclass(frozen=True)
class ScaleBar:
    """A scale bar found in a banner.

    Parameters
    ----------
    length_px : float
        Bar length in pixels, outer edge to outer edge (sub-pixel, see the
        module docstring).
    bbox : tuple of int
        ``(x0, y0, x1, y1)`` of the bar's component in the input array,
        end-exclusive.
    label_text : str or None
        The text OCR read next to the bar (None when not read).
    label_um : float or None
        The label parsed into µm (None when not read or not understood).
    ocr_confidence : float or None
        Tesseract's mean word confidence of the label, in 0..1.
    polarity : str
        ``"bright"`` (bar brighter than the background) or ``"dark"``.
    note : str
        Why the label is missing or how a doubtful unit was read.
    """

    length_px: float
    bbox: tuple[int, int, int, int]
    label_text: str | None
    label_um: float | None
    ocr_confidence: float | None
    polarity: str
    note: str = ""

    def to_dict(self) -> dict:
        """JSON-ready form."""
        d = asdict(self)
        d["bbox"] = list(self.bbox)
        d["length_unit"] = "px"
        d["label_unit"] = "um"
        return d


# ----------------------------------------------------------------------------- labels

# Units an SEM scale bar uses, after the OCR confusions of the micro sign have been
# folded: µ (micro sign U+00B5) and μ (Greek mu U+03BC) are often read as u, p, y, j,
# q or µ; "m" is often read as "rn" (fixed before matching). A lone "m" is a dropped µ
# (no SEM scale bar is in metres) and is accepted with a note.
_MICRO_READS = "uµμpyjq"
_LABEL = re.compile(
    r"(?<![\d.])(\d+(?:[.,]\d+)?|[.,]\d+)\s*("
    + f"[{_MICRO_READS}]{{1,2}}m|nm|mm|m"
    + r")(?![a-z])",
)
_ONE_LIKE = re.compile(r"(?<![\w.])[lI|](?=\s*(?:[" + _MICRO_READS + r"]m|nm|mm)\b)")


def parse_scale_label(text: str | None) -> tuple[float | None, str]:
    """Parse a scale-bar label such as ``"10 µm"``, ``"500 nm"``, ``"2.5um"``, ``"1 mm"``.

    Parameters
    ----------
    text : str or None
        Text read by OCR (or typed).

    Returns
    -------
    (float or None, str)
        The length in µm (None when the text holds no understandable label)
        and a note on how the unit was read.

    Notes
    -----
    Accepted OCR confusions (common practice with Tesseract on SEM banners):
    the micro sign read as ``u``, ``p``, ``y``, ``j``, ``q`` or the Greek mu;
    ``m`` read as ``rn``; a decimal comma; a lone ``l``/``I``/``|`` before a
    unit read as the digit 1; a lone ``m`` (the µ dropped) read as µm. Exactly
    one label must be found, and its value must lie in 1 nm .. 10 mm.
    """
    if not text:
        return None, "no text"
    t = str(text).replace("\u00b5", "µ").replace("\u03bc", "µ")
    t = t.replace("rn", "m").replace("\n", " ")
    t = _ONE_LIKE.sub("1", t)
    t = t.replace("O", "0") if re.search(r"\dO|O\d|O\s*[µunm]m", t) else t
    found = [(m.group(1), m.group(2)) for m in _LABEL.finditer(t.lower())]
    if len(found) != 1:
        return None, f"no single length label in {text!r}" if not found else "several labels"
    num, unit = found[0]
    value = float(num.replace(",", "."))
    note = ""
    if unit in ("nm", "mm"):
        factor = length_unit_factor(unit)
    elif unit == "m":
        factor, note = 1.0, "unit read as 'm', taken as µm (the micro sign was dropped)"
    else:
        factor = 1.0
        if unit not in ("um", "µm"):
            note = f"unit read as '{unit}', taken as µm"
    um = value * factor
    if not (LABEL_RANGE_UM[0] <= um <= LABEL_RANGE_UM[1]):
        return None, f"label {num} {unit} lies outside 1 nm .. 10 mm"
    return um, note


# ----------------------------------------------------------------------------- OCR

#: Leading digits of the values scale bars show (1, 2, 2.5, 3, 5 x 10^n and a few more;
#: common practice of microscope software). An OCR reading outside them ("502 nm",
#: "2.55 µm") is a misreading far more often than a real label and is refused.
USUAL_MANTISSAS = (1.0, 1.5, 2.0, 2.5, 3.0, 4.0, 5.0, 6.0, 7.5, 8.0)


def _usual_value(um: float) -> bool:
    e = math.floor(math.log10(um) + 1e-9)
    m = um / 10.0**e
    return any(abs(m - v) <= 1e-6 * v for v in USUAL_MANTISSAS)


def ocr_available() -> tuple[bool, str]:
    """Whether Tesseract OCR can be used, and why not when it cannot."""
    try:
        import pytesseract  # noqa: F401
    except ImportError:
        return False, "the Python package pytesseract is not installed"
    if shutil.which("tesseract") is None:
        return (
            False,
            "the tesseract program is not installed (Debian: apt-get install tesseract-ocr)",
        )
    return True, ""


def _ocr_line(crop_dark_on_white: np.ndarray, psm: int = 7) -> tuple[str, float]:
    """Tesseract on one text line (uint8, dark text on white). Returns (text, conf 0..1)."""
    import pytesseract

    data = pytesseract.image_to_data(
        crop_dark_on_white,
        config=f"--psm {psm} -c tessedit_char_whitelist={OCR_WHITELIST}",
        output_type=pytesseract.Output.DICT,
    )
    words, confs = [], []
    for w, c in zip(data["text"], data["conf"], strict=True):
        if str(w).strip():
            words.append(str(w).strip())
            confs.append(float(c))
    text = " ".join(words)
    conf = float(np.mean(confs)) / 100.0 if confs else 0.0
    return text, max(0.0, conf)


def read_bar_label(
    banner: np.ndarray, bar_bbox: tuple[int, int, int, int], polarity: str
) -> tuple[str | None, float | None, float | None, str]:
    """Read the label next to a scale bar with Tesseract.

    Parameters
    ----------
    banner : ndarray
        Grey banner in [0, 1].
    bar_bbox : tuple of int
        ``(x0, y0, x1, y1)`` of the bar.
    polarity : str
        ``"bright"`` or ``"dark"`` marks.

    Returns
    -------
    (text, label_um, confidence, note)
        text / label / confidence are None when OCR is unavailable or finds
        nothing; note says why.
    """
    ok, why = ocr_available()
    if not ok:
        return None, None, None, f"label not read: {why}"
    import cv2

    g = np.asarray(banner, dtype=np.float32)
    bg = _background(g)
    marks = (g > bg + MARK_CONTRAST) if polarity == "bright" else (g < bg - MARK_CONTRAST)
    x0, y0, x1, y1 = bar_bbox
    w = x1 - x0
    ny, nx = g.shape
    marks[y0:y1, x0:x1] = False  # the bar itself is not text
    margin = max(int(0.75 * w), 3 * (y1 - y0), ny)
    wx0, wx1 = max(0, x0 - margin), min(nx, x1 + margin)
    n, _lab, stats, _ = cv2.connectedComponentsWithStats(
        marks[:, wx0:wx1].astype(np.uint8), connectivity=8
    )
    comps = []
    for i in range(1, n):
        cx, cy, cw, ch, area = stats[i]
        if area < 2 or ch < 3:
            continue
        comps.append((cx + wx0, cy, cw, ch))
    if not comps:
        return None, None, None, "no text found next to the scale bar"
    bar_cx = 0.5 * (x0 + x1)

    def dist(c: tuple[int, int, int, int]) -> float:
        cx, cy, cw, ch = c
        dy = max(0, y0 - (cy + ch), cy - y1)  # vertical gap to the bar
        dx = max(0, x0 - (cx + cw), cx - x1)  # horizontal gap to the bar
        return dy + dx + 0.01 * abs(cx + 0.5 * cw - bar_cx)

    seed = min(comps, key=dist)
    sy0, sy1 = seed[1], seed[1] + seed[3]
    # the text line: components overlapping the seed's rows, chained horizontally by
    # gaps of at most two text heights
    line = [c for c in comps if c[1] < sy1 and c[1] + c[3] > sy0]
    h_txt = max(c[3] for c in line)
    line.sort(key=lambda c: c[0])
    k = line.index(seed)
    lo, hi = k, k
    while lo > 0 and seed[0] - (line[lo - 1][0] + line[lo - 1][2]) <= 2 * h_txt:
        lo -= 1
        seed = (line[lo][0], seed[1], seed[0] + seed[2] - line[lo][0], seed[3])
    right = line[k][0] + line[k][2]
    while hi < len(line) - 1 and line[hi + 1][0] - right <= 2 * h_txt:
        hi += 1
        right = max(right, line[hi][0] + line[hi][2])
    sel = line[lo : hi + 1]
    cx0 = min(c[0] for c in sel)
    cx1 = max(c[0] + c[2] for c in sel)
    cy0 = min(c[1] for c in sel)
    cy1 = max(c[1] + c[3] for c in sel)
    pad = max(2, h_txt // 3)
    ya, yb = max(0, cy0 - pad), min(ny, cy1 + pad)
    xa, xb = max(0, cx0 - pad), min(nx, cx1 + pad)
    crop = g[ya:yb, xa:xb].copy()
    # hide the bar if it intrudes into the crop
    bx0, bx1 = max(x0, xa) - xa, min(x1, xb) - xa
    by0, by1 = max(y0, ya) - ya, min(y1, yb) - ya
    if bx1 > bx0 and by1 > by0:
        crop[by0:by1, bx0:bx1] = bg
    fg = float(np.percentile(crop, 99.5 if polarity == "bright" else 0.5))
    c = np.clip((crop - bg) / (fg - bg if fg != bg else 1.0), 0.0, 1.0)
    img = np.round(255.0 * (1.0 - c)).astype(np.uint8)  # dark text on white
    # Tesseract is sensitive to text size: try a few heights and page modes, keep the
    # first reading that parses as a label
    first = None
    for text_px, psm in OCR_ATTEMPTS:
        scale = text_px / max(h_txt, 1)
        im = img
        if abs(scale - 1.0) > 0.05:
            im = cv2.resize(
                img,
                (max(1, round(img.shape[1] * scale)), max(1, round(img.shape[0] * scale))),
                interpolation=cv2.INTER_CUBIC if scale > 1 else cv2.INTER_AREA,
            )
        im = cv2.copyMakeBorder(im, 20, 20, 20, 20, cv2.BORDER_CONSTANT, value=255)
        try:
            text, conf = _ocr_line(im, psm)
        except Exception as exc:
            return None, None, None, f"label not read: OCR failed ({type(exc).__name__})"
        if not text:
            continue
        um, note = parse_scale_label(text)
        if um is not None and not _usual_value(um):
            um, note = None, f"unusual value {um:g} µm for a scale bar, probably misread"
        if um is not None:
            return text, um, conf, note
        first = first or (text, conf, note)
    if first is None:
        return None, None, None, "OCR read no text next to the scale bar"
    text, conf, note = first
    return text, None, conf, f"label {text!r} not understood ({note})"


# ----------------------------------------------------------------------------- bar


def _background(g: np.ndarray) -> float:
    bins = np.clip((g * 64).astype(np.int64), 0, 63)
    top = int(np.argmax(np.bincount(bins.ravel(), minlength=64)))
    return float(np.median(g[bins == top]))


def _as_grey(a: np.ndarray) -> np.ndarray:
    arr = np.asarray(a)
    if arr.ndim == 3:
        arr = arr[..., :3].mean(axis=2)
    if arr.ndim != 2 or min(arr.shape) < 4:
        raise FractoInputError("The scale-bar search needs a 2-D grey banner or frame.")
    if arr.dtype == np.uint8:
        return arr.astype(np.float32) / 255.0
    if arr.dtype == np.uint16:
        return arr.astype(np.float32) / 65535.0
    g = arr.astype(np.float32)
    return np.nan_to_num(g, nan=float(np.nanmedian(g)))


def _bar_candidates(g: np.ndarray, bg: float, polarity: str) -> list[dict]:
    import cv2

    _ny, nx = g.shape
    marks = (g > bg + MARK_CONTRAST) if polarity == "bright" else (g < bg - MARK_CONTRAST)
    n, lab, stats, _ = cv2.connectedComponentsWithStats(marks.astype(np.uint8), connectivity=8)
    out = []
    for i in range(1, n):
        x, y, w, h, _area = (int(v) for v in stats[i])
        if w < MIN_BAR_PX or w > 0.95 * nx:
            continue
        comp = lab[y : y + h, x : x + w] == i
        rows = comp.sum(axis=1)
        core = np.flatnonzero(rows >= 0.8 * w)
        if core.size == 0 or rows.max() < 0.9 * w:
            continue
        # the core must be one run of rows, thin against the length
        if core[-1] - core[0] + 1 != core.size or w < MIN_ASPECT * core.size:
            continue
        # outside its core rows a bar has marks only at its ends (end ticks); a letter
        # such as T or E has them in the middle as well
        rest = comp.copy()
        rest[core] = False
        colmarks = rest.any(axis=0)
        end = max(2, int(np.ceil(0.1 * w)))
        if colmarks[end:-end].any():
            continue
        out.append({"x": x, "y": y, "w": w, "h": h, "core": core + y, "polarity": polarity})
    return out


def _bar_length(g: np.ndarray, bg: float, cand: dict) -> float:
    x, w, core = cand["x"], cand["w"], cand["core"]
    ny, nx = g.shape
    # local background: unmarked pixels in a frame around the bar
    pad = max(4, len(core))
    ya, yb = max(0, core[0] - pad), min(ny, core[-1] + 1 + pad)
    win = g[ya:yb, max(0, x - pad) : min(nx, x + w + pad)]
    far = np.abs(win - bg) <= MARK_CONTRAST
    if far.sum() >= 16:
        bg = float(np.median(win[far]))
    inner = g[core[0] : core[-1] + 1, x + 2 : x + w - 2] if w > 6 else g[core, x : x + w]
    fg = float(np.median(inner))
    if abs(fg - bg) < 1e-6:
        return float(w)
    xa, xb = max(0, x - 2), min(nx, x + w + 2)
    c = (g[core[0] : core[-1] + 1, xa:xb] - bg) / (fg - bg)
    c = np.clip(c, -0.25, 1.25)
    return float(np.median(c.sum(axis=1)))


def find_scale_bar(
    banner_image_or_frame: np.ndarray, *, read_label: bool = True
) -> ScaleBar | None:
    """Find the scale bar in a banner (or a whole frame), measure it and read its label.

    Parameters
    ----------
    banner_image_or_frame : ndarray
        The banner strip (``SemImage.banner_image``) or a whole frame: grey
        float in [0, 1], uint8 or uint16 (colour is averaged). A frame whose
        banner :func:`fracto.io.sem.detect_banner` finds is searched only in
        its banner.
    read_label : bool
        Read the label with OCR (set False when the length is given).

    Returns
    -------
    ScaleBar or None
        None when no bar-like mark is found.

    References
    ----------
    See the module docstring.
    """
    g = _as_grey(banner_image_or_frame)
    off = 0
    if g.shape[0] > 0.3 * g.shape[1] and g.shape[0] >= 32:
        from fracto.io.sem import detect_banner

        info = detect_banner(g)
        if info["detected"]:
            k = info["rows"]
            if info["side"] == "bottom":
                off = g.shape[0] - k
                g = g[off:]
            else:
                g = g[:k]
    bg = _background(g)
    cands = _bar_candidates(g, bg, "bright") + _bar_candidates(g, bg, "dark")
    if not cands:
        return None
    best = max(cands, key=lambda c: (c["w"], -len(c["core"])))
    length = _bar_length(g, bg, best)
    bbox = (best["x"], best["y"], best["x"] + best["w"], best["y"] + best["h"])
    text = um = conf = None
    note = "label not read (not asked for)"
    if read_label:
        text, um, conf, note = read_bar_label(g, bbox, best["polarity"])
    return ScaleBar(
        length_px=length,
        bbox=(bbox[0], bbox[1] + off, bbox[2], bbox[3] + off),
        label_text=text,
        label_um=um,
        ocr_confidence=conf,
        polarity=best["polarity"],
        note=note,
    )


def pixel_size_from_scale_bar(
    sem_image_or_banner: object, *, scale_bar: str | None = None
) -> tuple[PixelSize | None, dict]:
    """Pixel size from the scale bar of an SEM image.

    Parameters
    ----------
    sem_image_or_banner : SemImage or ndarray
        A :class:`~fracto.io.sem.SemImage` (its ``banner_image`` is searched;
        without one, the image itself) or a banner / frame array.
    scale_bar : str, optional
        The bar's length as the user gives it (``"10um"``); then the label is
        not read.

    Returns
    -------
    (PixelSize or None, dict)
        Square pixels of ``label / length_px`` µm with source
        ``"scale bar (given length)"`` or ``"scale bar (OCR)"``; None when no
        bar or no label was found, the caller then falls back to the
        scale-free path. The dict says what was found and why not
        (``"found"``, ``"bar"``, ``"source"``, ``"reason"``).

    Raises
    ------
    FractoInputError
        If `scale_bar` is not a length with a unit.
    """
    given_um = None
    if scale_bar is not None:
        given_um = parse_length_um(scale_bar, what="scale-bar length")
    arr = getattr(sem_image_or_banner, "banner_image", None)
    if arr is None:
        arr = getattr(sem_image_or_banner, "image", sem_image_or_banner)
    if not isinstance(arr, np.ndarray):
        raise FractoInputError("The scale-bar search needs an SEM image or a banner array.")
    bar = find_scale_bar(arr, read_label=given_um is None)
    info: dict = {"found": bar is not None, "bar": bar.to_dict() if bar else None}
    if bar is None:
        info.update(source=None, reason="no scale bar found in the banner; scale-free analysis")
        return None, info
    if bar.length_px < MIN_BAR_PX:
        info.update(source=None, reason="the scale bar is too short to measure")
        return None, info
    if given_um is not None:
        px = given_um / bar.length_px
        info.update(source=SOURCE_GIVEN, label_um=given_um, reason="")
        return PixelSize.square(px, SOURCE_GIVEN), info
    if bar.label_um is None:
        info.update(
            source=None,
            reason=f"{bar.note}; give the bar's length with --scale-bar (scale-free analysis)",
        )
        return None, info
    px = bar.label_um / bar.length_px
    if not (math.isfinite(px) and px > 0):
        info.update(source=None, reason="the scale bar gave no usable pixel size")
        return None, info
    info.update(source=SOURCE_OCR, label_um=bar.label_um, reason=bar.note)
    return PixelSize.square(px, SOURCE_OCR), info
