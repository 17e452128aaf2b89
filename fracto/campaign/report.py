"""The campaign report: one self-contained HTML file (plots and thumbnails embedded).

Everything the page shows is inside the file: plots are PNG and thumbnails
PNG/JPEG data URIs (RFC 2397), the style sheet is inline, there is no script,
font or link to fetch. A thumbnail above :data:`MAX_EMBED_BYTES` is re-encoded as
JPEG (quality :data:`JPEG_QUALITY`, longest side ≤ :data:`THUMB_MAX_SIDE_PX`), so a
field costs at most about 150 kB of image (≈ 200 kB as base64) and typically
30-60 kB for a 400 px JPEG thumbnail; a report of 1000 fields then stays within
tens of megabytes (bench/bench_campaign_report.py prints the measured size).

References
----------
.. [1] Masinter, L. (1998). RFC 2397: The "data" URL scheme.
"""

from __future__ import annotations

import base64
import datetime as _dt
import html
import math
from pathlib import Path
from typing import Any

from fracto.campaign.values import cell_float as _f
from fracto.classes import MODES

#: Thumbnails larger than this (bytes) are re-encoded as JPEG before embedding.
MAX_EMBED_BYTES = 150_000
#: JPEG quality of re-encoded thumbnails.
JPEG_QUALITY = 80
#: Longest side of a re-encoded thumbnail (pixels).
THUMB_MAX_SIDE_PX = 400
#: All thumbnails of a large campaign together stay within about this many bytes
#: (before base64, which adds a third): 1000 fields get about 20 kB each.
TOTAL_THUMBNAIL_BUDGET_BYTES = 20_000_000

_CSS = """
body{font-family:sans-serif;margin:1.5em auto;max-width:72em;padding:0 1em;color:#111;
line-height:1.4}
h1{font-size:1.6em;margin-bottom:.2em}h2{font-size:1.25em;border-bottom:1px solid #999;
margin-top:1.6em}
.caution{border:3px solid #D55E00;background:#fff4e5;padding:.8em 1em;font-size:1.05em;
margin:1em 0}
table{border-collapse:collapse;font-size:.85em;margin:.5em 0}
th,td{border:1px solid #bbb;padding:.2em .45em;text-align:right;vertical-align:top}
th{background:#eee}td.l,th.l{text-align:left}
figure{margin:.6em 0}figure.plot img{max-width:100%;height:auto;border:1px solid #ddd}
figcaption{font-size:.85em;color:#333}
.thumbs{display:flex;flex-wrap:wrap;gap:.6em}
.thumbs figure{width:210px;margin:0;border:1px solid #ccc;padding:4px}
.thumbs img{width:200px;height:auto;display:block}
.warn{color:#8a3b00}.small{font-size:.8em;color:#444}
.wide{overflow-x:auto}
pre{font-size:.75em;background:#f6f6f6;padding:.5em;overflow-x:auto}
"""


# ---------------------------------------------------------------------- helpers


def _e(x: Any) -> str:
    return html.escape("" if x is None else str(x), quote=True)


def _fmt(v: Any, spec: str = ".3g") -> str:
    x = _f(v)
    return "–" if not math.isfinite(x) else format(x, spec)


def _ci(v: Any, spec: str = ".1f") -> str:
    if not v or v[0] is None or v[1] is None:
        return ""
    return f"[{format(v[0], spec)}, {format(v[1], spec)}]"


def _data_uri(data: bytes, mime: str) -> str:
    return f"data:{mime};base64,{base64.b64encode(data).decode('ascii')}"


def _mime_of(data: bytes) -> str | None:
    if data.startswith(b"\x89PNG\r\n\x1a\n"):
        return "image/png"
    if data.startswith(b"\xff\xd8\xff"):
        return "image/jpeg"
    return None


def thumbnail_budget_bytes(n_thumbnails: int) -> int:
    """Largest embedded size of one thumbnail in a report of `n_thumbnails` fields.

    :data:`MAX_EMBED_BYTES` for small campaigns; for large ones the share of
    :data:`TOTAL_THUMBNAIL_BUDGET_BYTES` per field, but never below 15 kB.
    """
    if n_thumbnails <= 0:
        return MAX_EMBED_BYTES
    return int(min(MAX_EMBED_BYTES, max(15_000, TOTAL_THUMBNAIL_BUDGET_BYTES // n_thumbnails)))


#: Re-encoding steps (longest side px, JPEG quality), tried in turn until one fits.
_REENCODE_STEPS = ((THUMB_MAX_SIDE_PX, JPEG_QUALITY), (320, 80), (256, 75), (200, 70))


def embed_thumbnail(path: Path, max_bytes: int = MAX_EMBED_BYTES) -> tuple[str, int] | None:
    """Data URI of a thumbnail file and its size in bytes (before base64).

    PNG or JPEG files up to `max_bytes` are embedded as they are; larger files or other
    formats are decoded with OpenCV, reduced to at most :data:`THUMB_MAX_SIDE_PX` on the
    longest side (area averaging) and re-encoded as JPEG at quality
    :data:`JPEG_QUALITY`; if that is still above `max_bytes`, smaller sides and
    qualities follow (320 px q80, 256 px q75, 200 px q70, the last one kept whatever
    its size). Returns ``None`` when the file cannot be read.
    """
    try:
        data = Path(path).read_bytes()
    except OSError:
        return None
    mime = _mime_of(data)
    if mime is not None and len(data) <= max_bytes:
        return _data_uri(data, mime), len(data)
    import cv2
    import numpy as np

    img = cv2.imdecode(np.frombuffer(data, dtype=np.uint8), cv2.IMREAD_COLOR)
    if img is None:
        return None
    h, w = img.shape[:2]
    out = b""
    for side, quality in _REENCODE_STEPS:
        s = side / max(h, w)
        small = img
        if s < 1:
            small = cv2.resize(
                img, (max(1, round(w * s)), max(1, round(h * s))), interpolation=cv2.INTER_AREA
            )
        ok, buf = cv2.imencode(".jpg", small, [cv2.IMWRITE_JPEG_QUALITY, quality])
        if not ok:
            return None
        out = buf.tobytes()
        if len(out) <= max_bytes:
            break
    return _data_uri(out, "image/jpeg"), len(out)


def _is_false(v: Any) -> bool:
    if isinstance(v, bool):
        return not v
    if isinstance(v, str):
        return v.strip().lower() in ("false", "0", "no")
    if isinstance(v, int | float):
        return v == 0
    return False


def _status_ok(row: dict) -> bool:
    st = row.get("status", "ok")
    return st is None or str(st).strip().lower() in ("ok", "")


#: Statuses of rows left out on purpose (e.g. ground-truth label images): not failures.
_NOT_SCORED = ("not scored", "skipped")


def _not_scored(row: dict) -> bool:
    return str(row.get("status") or "").strip().lower() in _NOT_SCORED


def _failed(row: dict) -> bool:
    return not _status_ok(row) and not _not_scored(row)


# ---------------------------------------------------------------------- sections


def _summary(images: list[dict], specimens: list[dict], transition: dict) -> str:
    n = len(images)
    n_ok = sum(_status_ok(r) for r in images)
    n_failed = sum(_failed(r) for r in images)
    n_skipped = sum(_not_scored(r) for r in images)
    names = {str(r.get("specimen")) for r in images if r.get("specimen") not in (None, "")}
    n_spec = len(names) or len(specimens)
    temps = sorted({_f(r.get("temperature_C")) for r in images} - {math.nan})
    temps = [t for t in temps if math.isfinite(t)]
    t = transition.get("transition_temperature_C")
    if t is None:
        why = transition.get("transition_note") or transition.get("note")
        ttext = "not available" + (f" ({_e(why)})" if why else "")
    elif transition.get("transition_estimated"):
        b = transition.get("transition_basis") or {}
        ttext = (
            f"{t:.1f} °C {_ci(transition.get('transition_temperature_ci95_C'))} — "
            f"<strong>estimated</strong> from the {_e(b.get('model'))} fit of the "
            f"{_e(b.get('mode'))} fraction"
        )
    else:
        ttext = f"{t:.1f} °C (given)"
    trange = f"{temps[0]:g} to {temps[-1]:g} °C" if temps else "–"
    return (
        '<section id="summary"><h2>Campaign</h2><table>'
        f'<tr><th class="l">fields</th><td>{n}</td></tr>'
        f'<tr><th class="l">fields scored</th><td>{n_ok}</td></tr>'
        f'<tr><th class="l">fields failed</th><td>{n_failed}</td></tr>'
        + (
            f'<tr><th class="l">rows not scored (by design)</th><td>{n_skipped}</td></tr>'
            if n_skipped
            else ""
        )
        + f'<tr><th class="l">specimens</th><td>{n_spec}</td></tr>'
        f'<tr><th class="l">test temperatures</th><td>{len(temps)} ({trange})</td></tr>'
        f'<tr><th class="l">transition temperature</th><td class="l">{ttext}</td></tr>'
        "</table></section>"
    )


def _fits_table(transition: dict) -> str:
    fits = transition.get("fits") or {}
    rows = []
    for name, f in fits.items():
        model = f.get("model")
        if model == "sigmoid":
            char = (
                f"50 % of span: {_fmt(f.get('midpoint_temperature_C'), '.1f')} °C "
                f"{_ci(f.get('midpoint_temperature_ci95_C'))}"
            )
            off = f.get("midpoint_offset_C")
            extra = f"C = {_fmt(f.get('half_width_C'), '.1f')} °C ({_e(f.get('direction'))})"
        elif model == "gaussian":
            char = (
                f"peak: {_fmt(f.get('peak_temperature_C'), '.1f')} °C "
                f"{_ci(f.get('peak_temperature_ci95_C'))}"
            )
            off = f.get("peak_offset_C")
            extra = (
                f"σ = {_fmt(f.get('width_C'), '.1f')} °C {_ci(f.get('width_ci95_C'))}, "
                f"FWHM = {_fmt(f.get('fwhm_C'), '.1f')} °C"
            )
        elif model == "constant":
            char = "no trend" if f.get("trend") is False else "curve models not assessed"
            off, extra = None, f"mean {_fmt(f.get('mean_value'))}"
        else:
            char, off, extra = "not fitted", None, ""
        aic = f.get("aicc") or {}
        aics = ", ".join(
            f"{m} {_fmt(aic.get(m), '.1f')}" for m in ("constant", "sigmoid", "gaussian")
        )
        boot = f.get("bootstrap") or {}
        note = f.get("note") or ""
        rows.append(
            f'<tr><td class="l">{_e(name)}</td><td class="l">{_e(model or "–")}</td>'
            f'<td class="l">{char}</td><td>{_fmt(off, "+.1f")}</td><td class="l">{extra}</td>'
            f"<td>{_e(f.get('n_specimens'))}</td>"
            f"<td>{_e(boot.get('n_converged', '–'))}/{_e(boot.get('n_boot', '–'))}</td>"
            f'<td class="l small">{_e(aics)}</td><td class="l small">{_e(note)}</td></tr>'
        )
    corr = []
    for c in transition.get("correlations") or []:
        if c.get("r") is None:
            corr.append(f"<li>{_e(c['x'])} vs {_e(c['y'])}: {_e(c.get('note', 'n/a'))}</li>")
        else:
            corr.append(
                f"<li>Pearson r between {_e(c['x'])} and {_e(c['y'])} (specimen means, "
                f"n = {c['n_specimens']}): <strong>{c['r']:.2f}</strong>, 95 % CI "
                f"{_ci(c.get('ci95'), '.2f')} (Fisher z); bootstrap by specimen "
                f"{_ci(c.get('bootstrap_ci95'), '.2f')}</li>"
            )
    ref = (
        "transition temperature" if transition.get("transition_temperature_C") is not None else ""
    )
    return (
        '<section id="transition"><h2>Transition fits</h2>'
        '<p class="small">Specimen means fitted with a constant, a sigmoid '
        "y = A + B·tanh((T − T0)/C) (Oldfield 1975) and a peaked Gaussian "
        "y = A + B·exp(−((T − T0)/W)²/2), chosen by AICc (Burnham &amp; Anderson 2002); "
        "intervals: 95 % percentile bootstrap resampling specimens. Width σ = W "
        f"(standard deviation); offsets are from the {ref}.</p>"
        "<table><tr><th class='l'>quantity</th><th class='l'>model</th>"
        "<th class='l'>characteristic temperature (95 % CI)</th><th>offset °C</th>"
        "<th class='l'>shape</th><th>specimens</th><th>bootstrap converged</th>"
        "<th class='l'>AICc</th><th class='l'>note</th></tr>"
        + "".join(rows)
        + "</table>"
        + (f"<ul>{''.join(corr)}</ul>" if corr else "")
        + "</section>"
    )


def _quality(images: list[dict]) -> str:
    rows = []
    skipped = [r for r in images if _not_scored(r)]
    for r in images:
        reasons = []
        if _failed(r):
            reasons.append(f"status {r.get('status')}: {r.get('error') or 'no reason given'}")
        if _is_false(r.get("fit_to_score")):
            reasons.append(
                "not fit to score: "
                + (str(r.get("quality_notes") or "").strip() or "no reason given")
            )
        if reasons:
            rows.append(
                f'<tr><td class="l">{_e(r.get("path"))}</td><td class="l">{_e(r.get("specimen"))}'
                f'</td><td class="l warn">{_e("; ".join(reasons))}</td></tr>'
            )
    if not rows:
        body = "<p>No field failed or was flagged by the quality checks.</p>"
    else:
        body = (
            f"<p class='warn'>{len(rows)} field(s) failed or were flagged; flagged fields "
            "are still in the results, failed ones are not.</p><table>"
            "<tr><th class='l'>field</th><th class='l'>specimen</th><th class='l'>reason</th></tr>"
            + "".join(rows)
            + "</table>"
        )
    if skipped:
        items = "".join(
            f"<li>{_e(r.get('path'))}: {_e(r.get('error') or r.get('status'))}</li>"
            for r in skipped
        )
        body += (
            f"<details><summary>{len(skipped)} row(s) not scored by design</summary>"
            f"<ul class='small'>{items}</ul></details>"
        )
    return f'<section id="quality"><h2>Quality warnings</h2>{body}</section>'


def _spec_value(row: dict, metric: str) -> tuple[float, float]:
    if f"{metric}_mean" in row:
        return _f(row.get(f"{metric}_mean")), _f(row.get(f"{metric}_sd"))
    return _f(row.get(metric)), _f(row.get(f"{metric}_sd"))


def _specimen_table(specimens: list[dict], transition: dict) -> str:
    rows = specimens or transition.get("specimens") or []
    if not rows:
        return '<section id="specimens"><h2>Specimens</h2><p>No specimen rows.</p></section>'
    keys: set[str] = set()
    for r in rows:
        keys |= set(r)
    stat_suffixes = ("_mean", "_sd", "_n", "_ci95_low", "_ci95_high")
    names = {k.removesuffix("_mean") for k in keys if k.endswith("_mean")}
    names |= {k for k in keys if not k.endswith(stat_suffixes)}
    metrics = [f"{m}_fraction" for m in (*MODES, "unclassified") if f"{m}_fraction" in names]
    tough = sorted(k for k in names if k.startswith("toughness"))
    rough = [c for c in ("Sa_um", "RS", "Sdr_percent") if c in names]
    cols = metrics + tough + rough
    head = "".join(f"<th>{_e(c)}<br><span class='small'>mean ± sd</span></th>" for c in cols)
    body = []
    for r in sorted(rows, key=lambda d: (_f(d.get("temperature_C")), str(d.get("specimen")))):
        n = _fmt(r.get("n", r.get("n_fields")), ".0f")
        cells = []
        for c in cols:
            m, s = _spec_value(r, c)
            sd = f" ± {_fmt(s, '.2g')}" if math.isfinite(s) else ""
            cells.append(f"<td>{_fmt(m)}{sd}</td>")
        t = _fmt(r.get("temperature_C"), "g")
        body.append(
            f'<tr><td class="l">{_e(r.get("specimen"))}</td><td>{t}</td><td>{_e(n)}</td>'
            f"{''.join(cells)}</tr>"
        )
    return (
        '<section id="specimens"><h2>Specimens</h2>'
        "<div class='wide'><table><tr><th class='l'>specimen</th><th>temperature °C</th>"
        "<th>fields</th>" + head + "</tr>" + "".join(body) + "</table></div></section>"
    )


def _plot_figure(ident: str, png: bytes, alt: str, caption: str) -> str:
    return (
        f'<figure class="plot" id="{ident}"><img class="plot" src="{_data_uri(png, "image/png")}"'
        f' alt="{_e(alt)}"><figcaption>{_e(caption)}</figcaption></figure>'
    )


def _plots(images: list[dict], transition: dict) -> tuple[str, list[str]]:
    from fracto.campaign import plots
    from fracto.campaign.transition import aggregate_by_specimen

    parts, ids = [], []
    png = plots.mode_fraction_plot(transition)
    if png:
        ids.append("plot-mode-fractions")
        parts.append(
            _plot_figure(
                "plot-mode-fractions",
                png,
                "Mode fraction against test temperature, one panel per mode: specimen means with "
                "standard deviations, the chosen fit with its 95 % bootstrap band, and the "
                "transition temperature as a dashed line.",
                "Mode fractions against temperature (each panel names its mode; markers: "
                "intergranular circle, transgranular square, ductile triangle, fatigue diamond).",
            )
        )
    ok = [r for r in images if _status_ok(r) and math.isfinite(_f(r.get("temperature_C")))]
    rough, _ = aggregate_by_specimen(ok, ["Sa_um", "RS", "Sdr_percent"])
    png = plots.roughness_plot(rough, transition)
    if png:
        ids.append("plot-roughness")
        parts.append(
            _plot_figure(
                "plot-roughness",
                png,
                "Roughness (Sa and RS or Sdr) against test temperature, specimen means with "
                "standard deviations.",
                "Roughness of the height maps against temperature (ISO 25178-2 Sa, Sdr; "
                "surface area ratio RS).",
            )
        )
    png = plots.toughness_temperature_plot(transition)
    if png:
        ids.append("plot-toughness-temperature")
        parts.append(
            _plot_figure(
                "plot-toughness-temperature",
                png,
                "Toughness against test temperature, specimen means, with the chosen fit and "
                "its band.",
                "Toughness against temperature.",
            )
        )
    png = plots.toughness_plot(transition)
    if png:
        ids.append("plot-toughness-intergranular")
        parts.append(
            _plot_figure(
                "plot-toughness-intergranular",
                png,
                "Toughness against intergranular fraction, one point per specimen, shaded by "
                "temperature, with Pearson r and its interval in the title.",
                "Toughness against intergranular fraction (specimen means).",
            )
        )
    if not parts:
        parts.append("<p>No data to plot.</p>")
    return '<section id="plots"><h2>Plots</h2>' + "".join(parts) + "</section>", ids


def _fraction_text(r: dict) -> str:
    bits = []
    for m in (*MODES, "unclassified"):
        v = _f(r.get(f"{m}_fraction"))
        if math.isfinite(v):
            bits.append(f"{m} {v:.0%}")
    return ", ".join(bits)


#: Plain names of the Okabe-Ito colours (Okabe & Ito 2008) used for the modes.
_COLOUR_NAMES = {
    "#0072B2": "blue",
    "#E69F00": "orange",
    "#009E73": "bluish green",
    "#CC79A7": "reddish purple",
    "#56B4E9": "sky blue",
    "#D55E00": "vermillion",
    "#F0E442": "yellow",
}


def _colour_key() -> str:
    """Colour key of the overlays: a swatch, the colour's name and the mode's name."""
    from fracto.modes.overlay import class_colours

    items = []
    for m, c in class_colours(MODES).items():
        items.append(
            f'<li><span style="display:inline-block;width:1.4em;height:.9em;'
            f'background:{c};border:1px solid #000;vertical-align:middle"></span> '
            f"{_e(m)} ({_e(_COLOUR_NAMES.get(c.upper(), c))})</li>"
        )
    items.append("<li>unclassified: no tint (grey image)</li>")
    return (
        "<p class='small'>Mode overlays: each field's image with a translucent colour per "
        "mode; the fractions are written under each thumbnail.</p>"
        f"<ul class='small' id='colour-key'>{''.join(items)}</ul>"
    )


def _thumbnails(images: list[dict], overlays: dict[str, Path], out_dir: Path) -> tuple[str, dict]:
    figs = []
    sizes = []
    missing = 0
    budget = thumbnail_budget_bytes(sum(r.get("path") in overlays for r in images))
    for r in images:
        p = r.get("path")
        th = overlays.get(p) if p is not None else None
        if th is None:
            continue
        th = Path(th)
        if not th.is_absolute() and not th.exists():
            th = out_dir / th
        emb = embed_thumbnail(th, budget)
        frac = _fraction_text(r)
        label = f"{p} — specimen {r.get('specimen')}, {_fmt(r.get('temperature_C'), 'g')} °C"
        if emb is None:
            missing += 1
            figs.append(
                f"<figure><p class='warn'>overlay unreadable</p><figcaption>{_e(label)}"
                "</figcaption></figure>"
            )
            continue
        uri, nbytes = emb
        sizes.append(nbytes)
        alt = (
            f"Mode overlay of {p} (specimen {r.get('specimen')}, "
            f"{_fmt(r.get('temperature_C'), 'g')} °C){': ' + frac if frac else ''}"
        )
        figs.append(
            f'<figure><img class="thumb" src="{uri}" alt="{_e(alt)}">'
            f"<figcaption>{_e(label)}<br><span class='small'>{_e(frac)}</span></figcaption>"
            "</figure>"
        )
    stats = {
        "n": len(sizes),
        "missing": missing,
        "mean_bytes": (sum(sizes) / len(sizes)) if sizes else None,
    }
    if not figs:
        body = "<p>No overlays were made for this campaign.</p>"
    else:
        body = _colour_key() + "<div class='thumbs'>" + "".join(figs) + "</div>"
    return f'<section id="fields"><h2>Fields</h2>{body}</section>', stats


def _provenance(provenance: dict, transition: dict, thumb_stats: dict) -> str:
    from fracto import __version__
    from fracto.io.safe import dumps_json

    model = provenance.get("model") or {}
    sha = model.get("sha256") if isinstance(model, dict) else None
    sha = sha or provenance.get("model_sha256")
    date = provenance.get("created_utc") or provenance.get("date")
    now = _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ")
    items = [
        ("fracto version", provenance.get("version", __version__)),
        ("model sha256", sha or "–"),
        ("batch seed", provenance.get("seed", "–")),
        ("settings hash", provenance.get("settings_hash", "–")),
        ("batch date (UTC)", date or "–"),
        (
            "transition analysis",
            f"seed {transition.get('seed')}, "
            f"{(transition.get('settings') or {}).get('n_boot')} bootstrap replicates, "
            f"version {transition.get('version')}",
        ),
        ("report written (UTC)", now),
        (
            "embedded thumbnails",
            f"{thumb_stats['n']}, mean "
            f"{_fmt((thumb_stats['mean_bytes'] or 0) / 1000, '.0f')} kB each",
        ),
    ]
    rows = "".join(
        f'<tr><th class="l">{_e(k)}</th><td class="l">{_e(v)}</td></tr>' for k, v in items
    )
    return (
        '<footer id="provenance"><h2>Provenance</h2><table>' + rows + "</table>"
        "<details><summary>settings and provenance record</summary><pre>"
        + _e(dumps_json(provenance))
        + "</pre></details></footer>"
    )


# ------------------------------------------------------------------------- entry


def write_report(
    out_dir: Path,
    *,
    images: list[dict],
    specimens: list[dict],
    transition: dict,
    provenance: dict,
    overlays: dict[str, Path],
) -> Path:
    """Write ``out_dir/report.html``, one self-contained file, atomically.

    Parameters
    ----------
    out_dir : Path
        Output folder (created if missing).
    images : list of dict
        images.csv rows (``path``, ``specimen``, ``temperature_C``, ``status``, ``error``,
        ``fit_to_score``, ``quality_notes``, mode fractions, roughness ...).
    specimens : list of dict
        specimens.csv rows (``<metric>_mean``, ``<metric>_sd`` ...).
    transition : dict
        The result of :func:`fracto.campaign.transition.analyse_campaign`.
    provenance : dict
        provenance.json (version, model, settings, seed, date).
    overlays : dict
        images.csv ``path`` -> thumbnail file of its mode overlay.

    Returns
    -------
    Path
        The report's path.

    References
    ----------
    RFC 2397 (data URIs).
    """
    from fracto import CAUTION
    from fracto.io.safe import write_text_atomic

    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    caution = transition.get("caution") or CAUTION
    if CAUTION not in caution:
        caution = CAUTION
    plots_html, _ = _plots(images, transition)
    thumbs_html, stats = _thumbnails(images, overlays, out_dir)
    title = "fracto campaign report"
    material = provenance.get("material") if isinstance(provenance, dict) else None
    doc = (
        "<!DOCTYPE html>\n<html lang='en'><head><meta charset='utf-8'>"
        f"<title>{_e(title)}</title><style>{_CSS}</style></head><body>"
        f"<h1>{_e(title)}</h1>"
        + (f"<p>{_e(material)}</p>" if material else "")
        + f'<div class="caution" id="caution" role="note"><strong>Caution.</strong> {_e(caution)}'
        "</div>"
        + _summary(images, specimens, transition)
        + _quality(images)
        + _fits_table(transition)
        + plots_html
        + _specimen_table(specimens, transition)
        + thumbs_html
        + _provenance(provenance or {}, transition, stats)
        + "</body></html>\n"
    )
    path = out_dir / "report.html"
    write_text_atomic(path, doc)
    return path
