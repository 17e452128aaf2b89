"""Campaign plots for the HTML report, drawn with matplotlib's Agg canvas (PNG bytes).

Modes keep the colours of the overlays (Okabe-Ito, Okabe & Ito 2008, an open
colour-blind-safe recommendation) and each also has its own marker and a text
label beside its curve, so no plot relies on colour alone.

References
----------
.. [1] Okabe, M., Ito, K. (2008). Color Universal Design (CUD): how to make figures and
   presentations that are friendly to colorblind people. J*Fly, web document.
"""

from __future__ import annotations

import io
import math

import numpy as np

from fracto.campaign.values import cell_float as _f
from fracto.classes import MODES

#: Marker of each mode (shape as a second cue besides colour).
MARKERS: dict[str, str] = {
    "intergranular": "o",
    "transgranular": "s",
    "ductile": "^",
    "fatigue": "D",
}

_DPI = 100


def _specimen_series(
    specimens: list[dict], column: str
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Temperatures, values and standard deviations of `column` over the specimens,
    and the mask of specimens where both temperature and value are finite."""
    t = np.array([_f(s.get("temperature_C")) for s in specimens])
    y = np.array([_f(s.get(column)) for s in specimens])
    sd = np.array([_f(s.get(f"{column}_sd")) for s in specimens])
    return t, y, sd, np.isfinite(t) & np.isfinite(y)


def _figure(width_in: float, height_in: float):
    import matplotlib

    matplotlib.use("Agg", force=False)
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width_in, height_in), dpi=_DPI, layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _png(fig) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=_DPI)
    return buf.getvalue()


def _mark_transition(ax, transition: dict) -> None:
    t = transition.get("transition_temperature_C")
    if t is None:
        return
    label = "estimated" if transition.get("transition_estimated") else "given"
    ax.axvline(t, color="black", linestyle="--", linewidth=1)
    ci = transition.get("transition_temperature_ci95_C")
    if ci:
        ax.axvspan(ci[0], ci[1], color="0.85", zorder=0)
    ax.annotate(
        f"T_tr = {t:.0f} °C ({label})",
        xy=(t, 0.02),
        xycoords=("data", "axes fraction"),
        xytext=(3, 0),
        textcoords="offset points",
        ha="left",
        va="bottom",
        rotation=90,
        fontsize=7,
    )


def mode_fraction_plot(transition: dict) -> bytes | None:
    """Mode fraction against temperature: one panel per mode, specimen means ± sd,
    the chosen fit and its 95 % bootstrap band, the transition temperature marked.

    Returns ``None`` when no mode has specimen data.
    """
    from fracto.modes.overlay import class_colours

    specimens = transition.get("specimens") or []
    fits = transition.get("fits") or {}
    modes = [m for m in MODES if any(np.isfinite(_f(s.get(f"{m}_fraction"))) for s in specimens)]
    if not modes:
        return None
    cols = class_colours(MODES)
    ncol = 2 if len(modes) > 1 else 1
    nrow = math.ceil(len(modes) / ncol)
    fig = _figure(4.2 * ncol, 3.0 * nrow)
    axes = fig.subplots(nrow, ncol, squeeze=False, sharex=True)
    for i, ax in enumerate(axes.flat):
        if i >= len(modes):
            ax.set_visible(False)
            continue
        m = modes[i]
        q = f"{m}_fraction"
        t, y, sd, ok = _specimen_series(specimens, q)
        ax.errorbar(
            t[ok],
            y[ok],
            yerr=np.where(np.isfinite(sd[ok]), sd[ok], 0.0),
            fmt=MARKERS.get(m, "o"),
            color=cols[m],
            markeredgecolor="black",
            markeredgewidth=0.5,
            ecolor="0.3",
            capsize=2,
            linestyle="none",
            label=f"{m}: specimen mean ± sd",
        )
        fit = fits.get(m) or {}
        curve = fit.get("curve")
        if curve and fit.get("model"):
            g = np.array([_f(v) for v in curve["T_grid_C"]])
            lo = np.array([_f(v) for v in curve["band95_low"]])
            hi = np.array([_f(v) for v in curve["band95_high"]])
            if np.isfinite(lo).any():
                ax.fill_between(
                    g, lo, hi, color=cols[m], alpha=0.25, linewidth=0, label="95 % bootstrap band"
                )
            ax.plot(
                g,
                [_f(v) for v in curve["value"]],
                color=cols[m],
                linewidth=1.8,
                label=f"{fit['model']} fit (AICc)",
            )
        _mark_transition(ax, transition)
        desc = fit.get("model") or "not fitted"
        if fit.get("model") == "sigmoid":
            desc = f"sigmoid, 50 % at {fit['midpoint_temperature_C']:.0f} °C"
        elif fit.get("model") == "gaussian":
            desc = f"peak at {fit['peak_temperature_C']:.0f} °C"
        elif fit.get("model") == "constant":
            desc = "no trend" if fit.get("trend") is False else "too few specimens for a curve"
        ax.set_title(f"{m} ({desc})", fontsize=9)
        # direct label of the mode at the right end of its data
        if ok.any():
            j = int(np.nanargmax(np.where(ok, t, -np.inf)))
            ax.annotate(
                m,
                xy=(t[j], y[j]),
                xytext=(-4, 6),
                textcoords="offset points",
                ha="right",
                fontsize=8,
                color="black",
            )
        ax.set_ylim(-0.05, 1.05)
        ax.set_ylabel(f"{m} fraction")
        ax.grid(True, linewidth=0.3)
        ax.legend(fontsize=7, loc="best")
    for ax in axes[-1]:
        ax.set_xlabel("test temperature (°C)")
    return _png(fig)


def roughness_plot(specimens: list[dict], transition: dict) -> bytes | None:
    """Roughness against temperature: Sa (µm) and RS or Sdr (%) per specimen, mean ± sd.

    `specimens` are records with ``temperature_C`` and ``Sa_um``/``RS``/``Sdr_percent``
    (and ``<name>_sd``), as made by :func:`fracto.campaign.transition.aggregate_by_specimen`.
    Returns ``None`` when there is no roughness.
    """
    names = [
        c
        for c in ("Sa_um", "RS", "Sdr_percent")
        if any(np.isfinite(_f(s.get(c))) for s in specimens)
    ]
    if "Sa_um" in names and "RS" in names and "Sdr_percent" in names:
        names.remove("Sdr_percent")
    if not names:
        return None
    labels = {"Sa_um": "Sa (µm)", "RS": "RS (true / projected area)", "Sdr_percent": "Sdr (%)"}
    markers = {"Sa_um": "o", "RS": "s", "Sdr_percent": "^"}
    colours = {"Sa_um": "#0072B2", "RS": "#D55E00", "Sdr_percent": "#009E73"}
    fig = _figure(4.2 * len(names), 3.0)
    axes = fig.subplots(1, len(names), squeeze=False)[0]
    for ax, c in zip(axes, names, strict=True):
        t, y, sd, ok = _specimen_series(specimens, c)
        ax.errorbar(
            t[ok],
            y[ok],
            yerr=np.where(np.isfinite(sd[ok]), sd[ok], 0.0),
            fmt=markers[c],
            color=colours[c],
            markeredgecolor="black",
            markeredgewidth=0.5,
            ecolor="0.3",
            capsize=2,
            linestyle="none",
            label=f"{labels[c]}: specimen mean ± sd",
        )
        _mark_transition(ax, transition)
        ax.set_xlabel("test temperature (°C)")
        ax.set_ylabel(labels[c])
        ax.set_title(labels[c], fontsize=9)
        ax.grid(True, linewidth=0.3)
        ax.legend(fontsize=7, loc="best")
    return _png(fig)


def toughness_plot(transition: dict) -> bytes | None:
    """Toughness against intergranular fraction, one point per specimen, with Pearson r.

    Returns ``None`` when the campaign has no toughness or no intergranular fraction.
    """
    from fracto.modes.overlay import class_colours

    specimens = transition.get("specimens") or []
    corrs = [
        c for c in transition.get("correlations") or [] if c.get("x") == "intergranular_fraction"
    ]
    if not corrs:
        return None
    corr = corrs[0]
    tc = corr["y"]
    x = np.array([_f(s.get("intergranular_fraction")) for s in specimens])
    y = np.array([_f(s.get(tc)) for s in specimens])
    t = np.array([_f(s.get("temperature_C")) for s in specimens])
    ok = np.isfinite(x) & np.isfinite(y)
    if ok.sum() < 2:
        return None
    fig = _figure(5.2, 3.6)
    ax = fig.subplots()
    sc = ax.scatter(
        x[ok],
        y[ok],
        c=t[ok],
        cmap="cividis",
        marker="o",
        edgecolors="black",
        linewidths=0.5,
        label="specimen (colour: temperature)",
    )
    cb = fig.colorbar(sc, ax=ax)
    cb.set_label("test temperature (°C)")
    if corr.get("r") is not None:
        ci = corr["ci95"]
        ax.set_title(
            f"r = {corr['r']:.2f}, 95 % CI [{ci[0]:.2f}, {ci[1]:.2f}] (Fisher z), "
            f"n = {corr['n_specimens']} specimens",
            fontsize=8,
        )
    ax.set_xlabel("intergranular fraction (specimen mean)")
    unit = tc.removeprefix("toughness").strip("_").replace("_sqrt_m", "·√m")
    ax.set_ylabel(f"toughness ({unit})" if unit else "toughness")
    ax.grid(True, linewidth=0.3)
    ax.legend(fontsize=7, loc="best", labelcolor=class_colours(MODES)["intergranular"])
    return _png(fig)


def toughness_temperature_plot(transition: dict) -> bytes | None:
    """Toughness against temperature with its fit and band (when the campaign has toughness)."""
    specimens = transition.get("specimens") or []
    fits = transition.get("fits") or {}
    names = [k for k in fits if k.startswith("toughness")]
    if not names:
        return None
    name = names[0]
    fit = fits[name]
    t, y, sd, ok = _specimen_series(specimens, name)
    if not ok.any():
        return None
    fig = _figure(5.2, 3.4)
    ax = fig.subplots()
    ax.errorbar(
        t[ok],
        y[ok],
        yerr=np.where(np.isfinite(sd[ok]), sd[ok], 0.0),
        fmt="o",
        color="#56B4E9",
        markeredgecolor="black",
        markeredgewidth=0.5,
        ecolor="0.3",
        capsize=2,
        linestyle="none",
        label="specimen mean ± sd",
    )
    curve = fit.get("curve")
    if curve and fit.get("model"):
        g = np.array([_f(v) for v in curve["T_grid_C"]])
        lo = np.array([_f(v) for v in curve["band95_low"]])
        hi = np.array([_f(v) for v in curve["band95_high"]])
        if np.isfinite(lo).any():
            ax.fill_between(
                g, lo, hi, color="#56B4E9", alpha=0.3, linewidth=0, label="95 % bootstrap band"
            )
        ax.plot(
            g,
            [_f(v) for v in curve["value"]],
            color="black",
            linewidth=1.5,
            label=f"{fit['model']} fit (AICc)",
        )
    _mark_transition(ax, transition)
    unit = name.removeprefix("toughness").strip("_").replace("_sqrt_m", "·√m")
    ax.set_ylabel(f"toughness ({unit})" if unit else "toughness")
    ax.set_xlabel("test temperature (°C)")
    ax.grid(True, linewidth=0.3)
    ax.legend(fontsize=7, loc="best")
    return _png(fig)
