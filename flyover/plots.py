"""Figures. Our look: a light warm-grey canvas, slate ink, amber for the array, a teal accent,
perceptually uniform colour maps that also read in greyscale (cividis for maps)."""

from __future__ import annotations

from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from .io.atomic import atomic_path  # noqa: E402

INK = "#2b3440"
ARRAY = "#d08a1f"
ACCENT = "#1f7a78"
CANVAS = "#faf8f4"
MAP_CMAP = "cividis"

plt.rcParams.update({
    "figure.facecolor": CANVAS, "axes.facecolor": "white", "axes.edgecolor": INK,
    "axes.labelcolor": INK, "xtick.color": INK, "ytick.color": INK, "text.color": INK,
    "font.size": 10, "axes.titlesize": 11, "axes.grid": True, "grid.color": "#e3ded5",
    "grid.linewidth": 0.6, "axes.spines.top": False, "axes.spines.right": False,
})


def save_figure(fig, path, dpi: int = 110) -> None:
    """Save a figure atomically as PNG and close it."""
    with atomic_path(path) as tmp:
        fig.savefig(tmp, dpi=dpi, format="png", bbox_inches="tight")
    plt.close(fig)


def track_figure(inputs, summary: dict, windows_s=None):
    """Plan view of the track over the array, and height and speed against time.

    Parameters
    ----------
    inputs : flyover.io.passdata.PassInputs
    summary : dict
        From :func:`flyover.stages.check.pass_summary`.
    windows_s : ndarray, optional
        Centre emission times of analysed windows, marked on the track.
    """
    track = inputs.track
    t = np.linspace(track.start_s, track.end_s, 1500)
    pos = track.position(t)
    c = inputs.layout.center_enu_m
    lo, hi = summary["covered_s"]
    fig, (ax_plan, ax_side) = plt.subplots(1, 2, figsize=(11, 4.4),
                                           gridspec_kw={"width_ratios": [1.25, 1]})
    ax_plan.plot(pos[:, 0], pos[:, 1], color="#9aa3ad", lw=1.0, label="track")
    rec = (t >= lo) & (t <= hi)
    ax_plan.plot(pos[rec, 0], pos[rec, 1], color=INK, lw=2.0, label="while recording")
    ax_plan.scatter(track.samples_enu_m[:, 0], track.samples_enu_m[:, 1], s=3, color=INK,
                    alpha=0.3, label="GNSS samples")
    mics = inputs.layout.enu_m
    used = inputs.weights > 0
    ax_plan.scatter(mics[used, 0], mics[used, 1], s=14, color=ARRAY, marker="o",
                    label="microphones", zorder=3)
    if np.any(~used):
        ax_plan.scatter(mics[~used, 0], mics[~used, 1], s=22, color="#b03a2e", marker="x",
                        label="excluded", zorder=3)
    k = len(t) // 2
    d = pos[k + 5] - pos[k]
    ax_plan.annotate("", xy=pos[k + 5, :2] + 6 * d[:2] / np.linalg.norm(d[:2]),
                     xytext=pos[k, :2], arrowprops={"arrowstyle": "-|>", "color": INK})
    if windows_s is not None and len(windows_s):
        w = track.position(np.asarray(windows_s))
        ax_plan.scatter(w[:, 0], w[:, 1], s=18, color=ACCENT, marker="|", zorder=4,
                        label="analysed windows")
    span = pos[rec] if np.any(rec) else pos
    pad = 0.15 * np.ptp(span[:, :2], axis=0).max() + 10.0
    ax_plan.set_xlim(min(span[:, 0].min(), mics[:, 0].min()) - pad,
                     max(span[:, 0].max(), mics[:, 0].max()) + pad)
    ax_plan.set_ylim(min(span[:, 1].min(), mics[:, 1].min()) - pad,
                     max(span[:, 1].max(), mics[:, 1].max()) + pad)
    ax_plan.set_aspect("equal", adjustable="datalim")
    ax_plan.set_xlabel("east (m)")
    ax_plan.set_ylabel("north (m)")
    ax_plan.set_title(f"{summary['pass']}: track over the array (site frame)")
    ax_plan.legend(loc="best", fontsize=8, frameon=False)
    ax_side.plot(t, pos[:, 2] - c[2], color=INK, lw=1.6)
    ax_side.set_xlabel("time after recording start (s)")
    ax_side.set_ylabel("height above array centre (m)", color=INK)
    ax_speed = ax_side.twinx()
    speed = np.linalg.norm(track.velocity(t), axis=1)
    ax_speed.plot(t, speed, color=ACCENT, lw=1.2)
    ax_speed.set_ylabel("speed (m/s)", color=ACCENT)
    ax_speed.grid(False)
    _at_least_span(ax_side, pos[:, 2] - c[2], 4.0)
    _at_least_span(ax_speed, speed, 4.0)
    ax_side.axvspan(lo, hi, color="#efe9dd", zorder=0)
    ax_side.axvline(summary["overhead_s"], color=ARRAY, lw=1.2, ls="--")
    ax_side.set_title(f"closest {summary['closest_distance_m']:.1f} m at "
                      f"t = {summary['overhead_s']:.2f} s")
    fig.tight_layout()
    return fig


def _at_least_span(ax, values, span: float) -> None:
    """Keep small wobbles from filling the axis: show at least ``span`` units."""
    lo, hi = float(np.min(values)), float(np.max(values))
    if hi - lo < span:
        mid = 0.5 * (lo + hi)
        ax.set_ylim(mid - span / 2, mid + span / 2)
