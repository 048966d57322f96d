"""Plots of the tone pair, drawn with matplotlib off screen (no display needed)."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .tone import TonePair

_CHANNEL_COLOURS = {"R": "#c0392b", "G": "#27ae60", "B": "#2e6fbf", "RGB": "#333333"}


def curve_data(pairs: tuple[TonePair, ...], samples: int = 257) -> dict:
    """The numbers a curve plot shows: per distinct channel pair, L, C and V on a grid.

    Channels whose pairs are identical are drawn once, labelled together.

    Returns
    -------
    dict
        ``x`` (list of float, linear input level) and ``channels``: a list of
        ``{"label", "mu", "curve", "slope", "degree", "blend", "headroom",
        "linear", "lift", "cut", "visibility"}``.
    """
    x = np.linspace(0.0, 1.0, samples)
    groups: list[tuple[str, TonePair]] = []
    for name, pair in zip("RGB", pairs, strict=False):
        for i, (label, seen) in enumerate(groups):
            if seen == pair:
                groups[i] = (label + name, seen)
                break
        else:
            groups.append((name, pair))
    channels = []
    for label, pair in groups:
        channels.append({
            "label": label, "mu": pair.mu, "curve": pair.curve, "slope": pair.slope,
            "degree": pair.degree, "blend": pair.blend, "headroom": pair.headroom, "linear": pair.linear,
            "lift": pair.lift(x).tolist(), "cut": pair.cut(x).tolist(),
            "visibility": pair.visibility(x).tolist(),
        })
    return {"x": x.tolist(), "channels": channels}


def _legend_name(ch: dict) -> str:
    if ch["linear"]:
        return f"{ch['curve']}, L = {ch['slope']:.2f} x within the headroom: never fades"
    if ch["curve"] in ("blend", "integer"):
        return f"{ch['curve']}, degree {ch['degree']}, t = {ch['blend']:.2f}, slope {ch['slope']:.2f}"
    if ch["curve"] == "exponent":
        return f"exponent {ch['slope']:.2f}"
    return ch["curve"]


def plot_curves(pairs: tuple[TonePair, ...], path: str | Path, *, title: str = "", write=None) -> dict:
    """Draw the lift and cut curves, the identity and the mask visibility; save a PNG.

    ``write(path, data)`` writes the PNG's bytes (by default
    :func:`crtfilter.files.write_atomic`, replacing; commands pass their
    :meth:`crtfilter.writes.WritePlan.write`).

    Returns
    -------
    dict
        The plotted data, as :func:`curve_data` returns it.
    """
    import matplotlib

    matplotlib.use("Agg", force=True)
    from matplotlib.figure import Figure

    data = curve_data(pairs)
    x = np.asarray(data["x"])
    fig = Figure(figsize=(8, 5.2), dpi=110)
    ax = fig.add_subplot()
    ax.plot(x, x, color="#999999", linestyle=":", linewidth=1.2, label="identity (no mask)")
    vis_ax = ax.twinx()
    for ch in data["channels"]:
        colour = _CHANNEL_COLOURS.get(ch["label"], "#333333")
        name = f"{ch['label']} (mask mean {ch['mu']:.3f})"
        ax.plot(x, ch["lift"], color=colour, linewidth=2,
                label=f"{name}: lift, open mask - {_legend_name(ch)}")
        ax.plot(x, ch["cut"], color=colour, linewidth=2, linestyle="--", label=f"{name}: cut, closed mask")
        vis_ax.plot(x, ch["visibility"], color=colour, linewidth=1, linestyle="-.", alpha=0.7,
                    label=f"{ch['label']}: mask visibility")
    headroom = max(pair.headroom for pair in pairs)
    if headroom > 1:
        ax.axhline(headroom, color="#d35400", linewidth=1.2, linestyle=(0, (6, 3)),
                   label=f"headroom h = peak / reference white = {headroom:.2f}")
        ax.axhline(1.0, color="#999999", linewidth=0.8)
    ax.set_xlim(0, 1)
    ax.set_ylim(0, headroom * 1.04 if headroom > 1 else 1.0)
    vis_ax.set_ylim(0, 1.0)
    ax.set_xlabel("input level (linear light, white = 1)")
    ax.set_ylabel("output level (linear light, input white = 1)")
    vis_ax.set_ylabel("mask visibility: Michelson contrast (L - C) / (L + C)")
    ax.grid(True, color="#e6e6e6")
    ax.set_title(title or "tone pair", fontsize=11)
    lines = ax.get_legend_handles_labels()
    vis_lines = vis_ax.get_legend_handles_labels()
    ax.legend(lines[0] + vis_lines[0], lines[1] + vis_lines[1], loc="lower right", fontsize=7,
              framealpha=0.9)
    fig.tight_layout()
    import io

    buffer = io.BytesIO()
    fig.savefig(buffer, format="png")
    if write is None:
        from .files import write_atomic as write
    write(path, buffer.getvalue())
    return data
