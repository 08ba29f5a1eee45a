"""Figures. Our look: a light warm-grey canvas, slate ink, amber for the array, a teal accent,
perceptually uniform colour maps that also read in greyscale (cividis for maps)."""

from __future__ import annotations

import functools

import numpy as np

from flyover.acoustics.uncertainty import Z90
from flyover.io.atomic import atomic_path
from flyover.model.constants import P0_PA

# matplotlib.pyplot, imported at the first figure (pyplot()): 0.3 s that Snakemake's reading of
# the workflow (which imports every step for its reads) and steps without figures do not need.
# The warm process imports it once for every step's fork.
plt = None


def pyplot():
    """matplotlib.pyplot on the Agg backend (no display), imported at the first call."""
    global plt
    if plt is None:
        import matplotlib
        matplotlib.use("Agg")
        import matplotlib.pyplot
        plt = matplotlib.pyplot
    return plt

INK = "#2b3440"
ARRAY = "#d08a1f"
ACCENT = "#1f7a78"
CANVAS = "#faf8f4"
MAP_CMAP = "cividis"

# Applied per figure (not at import), so importing flyover leaves matplotlib's settings alone.
_STYLE = {
    "figure.facecolor": CANVAS, "axes.facecolor": "white", "axes.edgecolor": INK,
    "axes.labelcolor": INK, "xtick.color": INK, "ytick.color": INK, "text.color": INK,
    "font.size": 10, "axes.titlesize": 11, "axes.grid": True, "grid.color": "#e3ded5",
    "grid.linewidth": 0.6, "axes.spines.top": False, "axes.spines.right": False,
    # Titles at a fixed height: none of our axes has decorations on top, and placing them
    # automatically measured every panel at every draw (a fifth of a map figure's time).
    "axes.titley": 1.0,
}


def _styled(make):
    """Draw a figure under flyover's style."""
    @functools.wraps(make)
    def wrapper(*args, **kwargs):
        with pyplot().rc_context(_STYLE):
            return make(*args, **kwargs)
    return wrapper


def _panels(n: int, panel_w: float, panel_h: float, **subplots):
    """Small multiples: a figure of up to four columns, the ``n`` panels in reading order (the
    spare ones hidden), and the grid of axes (for a shared colour bar)."""
    cols = min(4, n)
    rows = int(np.ceil(n / cols))
    fig, axes = plt.subplots(rows, cols, figsize=(panel_w * cols, panel_h * rows + 0.6),
                             squeeze=False, **subplots)
    flat = [axes[k // cols][k % cols] for k in range(rows * cols)]
    for ax in flat:
        ax.grid(False)
    for ax in flat[n:]:
        ax.axis("off")
    return fig, axes, flat[:n], cols, rows


def save_figure(fig, path, dpi: int = 110) -> None:
    """Save a figure atomically as PNG and close it."""
    with atomic_path(path) as tmp:
        fig.savefig(tmp, dpi=dpi, format="png", bbox_inches="tight")
    pyplot().close(fig)


@_styled
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
    rotors = getattr(inputs, "rotors", ())
    fig, axes = plt.subplots(1, 3 if rotors else 2, figsize=(15.5 if rotors else 11, 4.4),
                             gridspec_kw={"width_ratios": [1.25, 1, 1][:3 if rotors else 2]})
    ax_plan, ax_side = axes[0], axes[1]
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
    ax_plan.set_aspect("equal", adjustable="box")
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
    if rotors:
        ax_rpm = axes[2]
        colours = [INK, ACCENT, ARRAY, "#7a4e9e", "#b03a2e", "#4a7a1f"]
        for k, r in enumerate(rotors):
            ax_rpm.plot(r.time_s, r.rpm, lw=1.2, color=colours[k % len(colours)],
                        label=f"{r.spec.name} (motor {r.spec.motor}, {r.spec.blades} blades)")
        ax_rpm.axvspan(lo, hi, color="#efe9dd", zorder=0)
        ax_rpm.set_xlim(ax_side.get_xlim())
        ax_rpm.set_xlabel("time after recording start (s)")
        ax_rpm.set_ylabel("rotor speed (rpm)")
        ax_rpm.set_title("rotor speeds from the flight log")
        ax_rpm.legend(fontsize=8, frameon=False)
    fig.tight_layout()
    return fig


def _at_least_span(ax, values, span: float) -> None:
    """Keep small wobbles from filling the axis: show at least ``span`` units."""
    lo, hi = float(np.min(values)), float(np.max(values))
    if hi - lo < span:
        mid = 0.5 * (lo + hi)
        ax.set_ylim(mid - span / 2, mid + span / 2)


@_styled
def map_figure(maps, campaign, bands, pass_name: str, window_row: dict,
               dynamic_range_db: float = 15.0, verdicts: dict | None = None):
    """Small multiples of one window's maps, one panel per band, dB re each panel's peak.

    Parameters
    ----------
    maps : ndarray, shape (n_grid, n_bands)
        Band power on the grid points (x varying slowest). Values at or below zero (possible
        after diagonal removal) and more than ``dynamic_range_db`` under the peak show as the
        floor colour.
    verdicts : dict of str -> RegionVerdict, optional
        Per region, whether its level is given in each band: a solid outline where it is, a
        dotted one where it is given as dominant but not resolved, and a dashed one with
        "no level" where it is not (region_power.csv's ``region_note`` says why). Without
        them every region is outlined dashed, as a region only.
    """
    from matplotlib.patches import Rectangle
    nx, ny = campaign.grid.shape
    x, y = campaign.grid.x_axis_m, campaign.grid.y_axis_m
    fig, axes, panels, cols, rows = _panels(len(bands), 3.1, 2.2, sharex=True, sharey=True)
    extent = [x[0] - campaign.grid.spacing_m / 2, x[-1] + campaign.grid.spacing_m / 2,
              y[-1] + campaign.grid.spacing_m / 2, y[0] - campaign.grid.spacing_m / 2]
    cmap = plt.get_cmap(MAP_CMAP).with_extremes(under="#ece6da", bad="#ece6da")
    image = None
    for b, ax in enumerate(panels):
        m = maps[:, b].reshape(nx, ny).T
        peak = np.max(m)
        with np.errstate(divide="ignore", invalid="ignore"):
            db = np.where(m > 0, 10 * np.log10(m / peak), -np.inf) if peak > 0 else \
                np.full_like(m, -np.inf)
        image = ax.imshow(db, extent=extent, cmap=cmap, vmin=-dynamic_range_db, vmax=0,
                          interpolation="nearest", aspect="equal")
        for name, region in campaign.regions.items():
            v = verdicts.get(name) if verdicts else None
            style = ("--" if v is None or not v.valid[b] else
                     ":" if v.dominant[b] and not v.resolved[b] else "-")
            ax.add_patch(Rectangle((region.x_m[0], region.y_m[0]), np.ptp(region.x_m),
                                   np.ptp(region.y_m), fill=False, ec="white", lw=1.0,
                                   ls=style))
            if v is not None and not v.valid[b]:
                ax.text(np.mean(region.x_m), np.mean(region.y_m), "no level", color="white",
                        fontsize=6, ha="center", va="center")
        if campaign.outline_m:
            poly = np.array(campaign.outline_m + (campaign.outline_m[0],))
            ax.plot(poly[:, 0], poly[:, 1], color=ARRAY, lw=0.9)
        label = f"{bands.nominal_hz[b]:g} Hz"
        ax.set_title(label if peak > 0 else f"{label} (below floor)", fontsize=9)
        if b % cols == 0:
            ax.set_ylabel("y starboard (m)")
        if b // cols == rows - 1:
            ax.set_xlabel("x forward (m)")
    fig.suptitle(f"{pass_name}  window {window_row['window']}  {window_row['time_utc'][:23]}Z  "
                 f"polar {window_row['polar_angle_deg']:.0f} deg  "
                 f"distance {window_row['distance_m']:.0f} m", fontsize=11)
    if image is not None:
        bar = fig.colorbar(image, ax=axes, shrink=0.8, extend="min", pad=0.02)
        bar.set_label(f"dB re panel peak ({dynamic_range_db:g} dB range)")
    if verdicts:
        fig.text(0.01, 0.005, "regions: solid, level given; dotted, given as dominant (not "
                 "resolved); dashed, no level (region_power.csv says why)", fontsize=7)
    return fig


def _band_axis(ax, bands_hz) -> None:
    ax.set_xscale("log")
    ax.set_xticks(bands_hz)
    ax.set_xticklabels([f"{b:g}" for b in bands_hz], rotation=60, fontsize=7)
    ax.minorticks_off()
    ax.set_xlabel("one-third-octave band (Hz)")


@_styled
def spectra_figure(spectra, pass_name: str):
    """Region spectra at the chosen polar angles (levels at the reference distance)."""
    regions = list(dict.fromkeys(spectra["region"])) if len(spectra) else []
    fig, axes = plt.subplots(1, max(1, len(regions)), figsize=(4.2 * max(1, len(regions)), 3.6),
                             squeeze=False, sharey=True)
    cmap = plt.get_cmap("viridis")
    targets = sorted(set(spectra["target_polar_deg"])) if len(spectra) else []
    for ax, region in zip(axes[0], regions):
        sel = spectra[spectra["region"] == region]
        for i, target in enumerate(targets):
            s = sel[sel["target_polar_deg"] == target]
            ax.plot(s["band_hz"], s["level_db"], marker="o", ms=3, lw=1.4,
                    color=cmap(i / max(1, len(targets) - 1)),
                    label=f"{s['polar_angle_deg'].iloc[0]:.0f} deg" if len(s) else None)
        _band_axis(ax, sorted(set(sel["band_hz"])))
        ax.set_title(region)
        ax.legend(fontsize=7, frameon=False, title="polar angle", title_fontsize=7)
    axes[0][0].set_ylabel("band level at reference distance (dB)")
    if not regions:
        axes[0][0].text(0.5, 0.5, "no analysed windows", ha="center",
                        transform=axes[0][0].transAxes)
    fig.suptitle(f"{pass_name}: region spectra", fontsize=11)
    fig.tight_layout()
    return fig


@_styled
def directivity_figure(levels, pass_name: str, max_bands: int = 6):
    """Level against polar angle per region, for a spread of bands: each window's level with
    its 90 % interval, and a trend that does not follow the window-to-window scatter
    (:func:`angle_trend_db`)."""
    regions = list(dict.fromkeys(levels["region"])) if len(levels) else []
    fig, axes = plt.subplots(1, max(1, len(regions)), figsize=(4.2 * max(1, len(regions)), 3.6),
                             squeeze=False, sharey=True)
    bands = sorted(set(levels["band_hz"])) if len(levels) else []
    spread = np.linspace(0, len(bands) - 1, min(max_bands, len(bands)))
    pick = [bands[int(round(i))] for i in spread]
    cmap = plt.get_cmap("cividis")
    for ax, region in zip(axes[0], regions):
        sel = levels[levels["region"] == region]
        for i, band in enumerate(pick):
            s = sel[sel["band_hz"] == band].sort_values("polar_angle_deg")
            s = s[np.isfinite(s["level_db"])]
            colour = cmap(i / max(1, len(pick) - 1))
            half = Z90 * s["uncertainty_db"].to_numpy(float) if "uncertainty_db" in s else None
            ax.errorbar(s["polar_angle_deg"], s["level_db"], yerr=half, fmt=".", ms=4,
                        elinewidth=0.8, capsize=1.5, color=colour, label=f"{band:g} Hz")
            theta, trend = angle_trend_db(s["polar_angle_deg"], s["level_db"], half)
            ax.plot(theta, trend, lw=1.2, color=colour, alpha=0.8)
        ax.set_xlabel("polar emission angle (deg, 90 = overhead)")
        ax.set_title(region)
        ax.legend(fontsize=7, frameon=False)
    axes[0][0].set_ylabel("band level at reference distance (dB)")
    fig.suptitle(f"{pass_name}: directivity (points: windows with 90 % intervals; lines: "
                 f"trend over {TREND_WIDTH_DEG:g} deg)", fontsize=10)
    fig.tight_layout()
    return fig


TREND_WIDTH_DEG = 20.0   # the trend's Gaussian kernel, full width at half height


def angle_trend_db(polar_deg, level_db, half_width_db=None, *, step_deg: float = 2.0):
    """A trend of levels against polar angle that window-to-window scatter does not drive: the
    mean of the levels under a Gaussian kernel in angle (``TREND_WIDTH_DEG`` at half height),
    weighted by 1 / interval^2 where intervals are given. Drawn only over the measured angles
    and only where a window lies within half the width.

    Returns
    -------
    theta_deg, trend_db : ndarray, shape (n,)
        Empty with fewer than three levels.
    """
    theta = np.asarray(polar_deg, float)
    level = np.asarray(level_db, float)
    if len(theta) < 3:
        return np.array([]), np.array([])
    w = np.ones_like(level)
    if half_width_db is not None:
        u = np.asarray(half_width_db, float)
        w = np.where(np.isfinite(u) & (u > 0), 1.0 / np.maximum(u, 0.05) ** 2, 1.0)
    grid = np.arange(theta.min(), theta.max() + step_deg / 2, step_deg)
    sigma = TREND_WIDTH_DEG / (2.0 * np.sqrt(2.0 * np.log(2.0)))
    k = w[None, :] * np.exp(-0.5 * ((grid[:, None] - theta[None, :]) / sigma) ** 2)
    trend = (k @ level) / k.sum(axis=1)
    near = np.min(np.abs(grid[:, None] - theta[None, :]), axis=1) <= TREND_WIDTH_DEG / 2
    return grid[near], trend[near]


@_styled
def spectrogram_figure(raw, dedopplerized, pass_name: str, raw_label: str, f_max_hz: float,
                       region_name: str = ""):
    """Two spectrograms side by side: a microphone as received, and the de-Dopplerized region.

    ``raw`` and ``dedopplerized`` are (f, t, Sxx) triples from
    :func:`flyover.acoustics.spectral.spectrogram_density`, or None.
    """
    fig, axes = plt.subplots(1, 2, figsize=(11, 3.8), sharey=True)
    for ax, data, title in ((axes[0], raw, raw_label),
                            (axes[1], dedopplerized, f"region '{region_name}' de-Dopplerized")):
        ax.grid(False)
        if data is None:
            ax.text(0.5, 0.5, "no analysed windows", ha="center", transform=ax.transAxes)
            continue
        f, t, s = data
        db = 10 * np.log10(np.maximum(s, 1e-30) / P0_PA ** 2)
        top = np.percentile(db[f <= f_max_hz], 99.5)
        mesh = ax.pcolormesh(t, f, db, shading="auto", cmap=MAP_CMAP, vmin=top - 50, vmax=top)
        ax.set_ylim(0, f_max_hz)
        ax.set_xlabel("time (s)" if ax is axes[0] else "emission time (s)")
        ax.set_title(title)
    axes[0].set_ylabel("frequency (Hz)")
    if raw is not None:
        bar = fig.colorbar(mesh, ax=axes, shrink=0.9, pad=0.02)
        bar.set_label("spectral level (dB re 20 uPa^2/Hz, 50 dB per panel)")
    fig.suptitle(f"{pass_name}: Doppler shift as received, removed in source time", fontsize=11)
    return fig


@_styled
def campaign_figure(overall, quantity: str = "A-weighted"):
    """Mean level over passes against polar angle, with its 90 % interval, per label and region.

    ``overall`` is the campaign_overall table (columns label, region, quantity, polar_bin_deg,
    mean_db, ci_half_width_db, n_passes).
    """
    sel = overall[overall["quantity"] == quantity] if len(overall) else overall
    labels = list(dict.fromkeys(sel["label"])) if len(sel) else []
    fig, axes = plt.subplots(1, max(1, len(labels)), figsize=(5.2 * max(1, len(labels)), 3.8),
                             squeeze=False, sharey=True)
    colours = [INK, ACCENT, ARRAY, "#7a4e9e", "#b03a2e"]
    for ax, label in zip(axes[0], labels):
        part = sel[sel["label"] == label]
        for i, region in enumerate(dict.fromkeys(part["region"])):
            s = part[part["region"] == region].sort_values("polar_bin_deg")
            err = np.nan_to_num(s["ci_half_width_db"].to_numpy(), nan=0.0)
            ranges = ", ".join(str(v) for v in dict.fromkeys(s["band_range_hz"]) if str(v))
            ax.errorbar(s["polar_bin_deg"], s["mean_db"], yerr=err, marker="o", ms=3.5,
                        capsize=2.5, lw=1.3, color=colours[i % len(colours)],
                        label=f"{region} ({ranges} Hz)" if ranges else region)
        n = int(part["n_passes"].max()) if len(part) else 0
        column = part["passes_flagged"] if "passes_flagged" in part else []
        flagged = sorted({p for v in column if isinstance(v, str) for p in v.split()})
        ax.set_title(f"{label} ({n} pass{'es' if n != 1 else ''}"
                     + (f"; flagged: {', '.join(flagged)}" if flagged else "") + ")",
                     **({"color": ACCENT} if flagged else {}))
        ax.set_xlabel("polar emission angle (deg, 90 = overhead)")
        ax.legend(fontsize=8, frameon=False)
    axes[0][0].set_ylabel(f"{quantity} level at reference distance (dB)")
    if not labels:
        axes[0][0].text(0.5, 0.5, "no levels", ha="center", transform=axes[0][0].transAxes)
    fig.suptitle("Campaign: mean over passes with its 90 % interval (pass-to-pass scatter and "
                 "stated uncertainties)", fontsize=11)
    fig.text(0.5, -0.02, "Each region sums one band range per label (in brackets): a window "
             "missing a band of it has no overall.", ha="center", fontsize=8, color="#6b7380")
    fig.tight_layout()
    return fig


@_styled
def comparison_figure(overall, name_a: str, name_b: str):
    """B minus A against polar angle, per region (columns): the overall and the A-weighted
    difference with their 90 % intervals, filled where the interval excludes zero.

    ``overall`` is a comparison's overall table (columns region, quantity, band_range_hz,
    polar_bin_deg, difference_db, ci90_low_db, ci90_high_db, differs).
    """
    regions = list(dict.fromkeys(overall["region"])) if len(overall) else []
    fig, axes = plt.subplots(1, max(1, len(regions)), figsize=(4.6 * max(1, len(regions)), 3.6),
                             squeeze=False, sharey=True)
    for ax, region in zip(axes[0], regions):
        part = overall[overall["region"] == region]
        for quantity, colour in (("A-weighted", INK), ("overall", ACCENT)):
            q = part[part["quantity"] == quantity].sort_values("polar_bin_deg")
            if not len(q):
                continue
            d = q["difference_db"].to_numpy(float)
            low = np.nan_to_num(d - q["ci90_low_db"].to_numpy(float), nan=0.0)
            high = np.nan_to_num(q["ci90_high_db"].to_numpy(float) - d, nan=0.0)
            ax.errorbar(q["polar_bin_deg"], d, yerr=[low, high], fmt="none", ecolor=colour,
                        capsize=2.5, lw=1.1)
            differs = q["differs"].astype(bool).to_numpy()
            label = f"{quantity} ({q['band_range_hz'].iloc[0]} Hz)"
            ax.plot(q["polar_bin_deg"][differs], d[differs], "o", color=colour, ms=5,
                    label=label if differs.any() else None)
            ax.plot(q["polar_bin_deg"][~differs], d[~differs], "o", mfc="white", color=colour,
                    ms=5, label=None if differs.any() else label)
        ax.axhline(0.0, color="#6b7380", lw=0.8)
        ax.set_title(region)
        ax.set_xlabel("polar emission angle (deg, 90 = overhead)")
        ax.legend(fontsize=8, frameon=False)
    axes[0][0].set_ylabel(f"{name_b} minus {name_a} (dB)")
    if not regions:
        axes[0][0].text(0.5, 0.5, "nothing to compare", ha="center",
                        transform=axes[0][0].transAxes)
    fig.suptitle(f"{name_b} against {name_a}: difference of the means with its 90 % interval "
                 "(filled: the interval excludes zero)", fontsize=11)
    if len(overall) and overall["ci90_low_db"].isna().any():
        fig.text(0.5, -0.02, "Points without a bar have no interval: a label with fewer than "
                 "two passes there has no pass-to-pass scatter to judge by.", ha="center",
                 fontsize=8, color="#6b7380")
    fig.tight_layout()
    return fig


@_styled
def level_history_figure(history, bands, metrics_row: dict, pass_name: str):
    """The A-weighted F and S levels against time with LAFmax, LASmax and the 10 dB-down
    interval marked, above the one-third-octave band levels every 0.5 s.

    ``history`` is the level_history table, ``bands`` the band_history table.
    """
    fig, axes = plt.subplots(2, 1, figsize=(9, 6.2), sharex=True,
                             gridspec_kw={"height_ratios": [1.0, 1.1]})
    ax = axes[0]
    t = history["time_s"].to_numpy()
    ax.plot(t, history["laf_db"], color=ACCENT, lw=1.0, label="L_AF (F, 125 ms)")
    ax.plot(t, history["las_db"], color=INK, lw=1.6, label="L_AS (S, 1 s)")
    lo, hi = metrics_row["ten_db_down_start_s"], metrics_row["ten_db_down_end_s"]
    ax.axvspan(lo, hi, color=ARRAY, alpha=0.15,
               label=f"10 dB down: {hi - lo:.2f} s, LAE {metrics_row['lae_db']:.1f} dB")
    ax.axhline(metrics_row["lasmax_db"], color=INK, lw=0.6, ls=":")
    ax.set_ylabel("A-weighted level (dB)")
    top = max(metrics_row["lafmax_db"], metrics_row["lasmax_db"])
    ax.set_ylim(top - 40, top + 3)
    ax.legend(loc="lower center", fontsize=8)
    ax.set_title(f"LAFmax {metrics_row['lafmax_db']:.1f} dB, LASmax "
                 f"{metrics_row['lasmax_db']:.1f} dB at channel {metrics_row['channel']} "
                 "(as received)")
    ax = axes[1]
    ax.grid(False)
    wide = bands.pivot_table(index="band_hz", columns="time_s", values="level_db")
    if wide.size:
        peak = float(np.nanmax(wide.to_numpy()))
        mesh = ax.pcolormesh(wide.columns, np.arange(len(wide.index)), wide.to_numpy(),
                             shading="nearest", cmap=MAP_CMAP, vmin=peak - 50, vmax=peak)
        step = max(1, len(wide.index) // 8)
        ax.set_yticks(np.arange(len(wide.index))[::step])
        ax.set_yticklabels([f"{b:g}" for b in wide.index[::step]])
        bar = fig.colorbar(mesh, ax=axes, shrink=0.5, pad=0.02)
        bar.set_label("band level (dB re 20 uPa)")
    ax.set_ylabel("one-third-octave band (Hz)")
    ax.set_xlabel("time as received (s after the pass epoch)")
    fig.suptitle(f"{pass_name}: single-event levels", fontsize=11)
    return fig


def _hemisphere_axes(ax, polar_deg, azimuth_deg) -> None:
    """Polar across (nose left, tail right), azimuth down (port horizon at the top)."""
    ax.grid(False)
    ax.set_xlim(polar_deg[0] - 5, polar_deg[-1] + 5)
    ax.set_ylim(azimuth_deg[-1] + 5, azimuth_deg[0] - 5)
    ax.set_xticks(np.arange(0, 181, 30))
    ax.set_yticks(np.arange(-90, 91, 30))
    ax.set_xlabel("polar angle from the nose (deg)")
    ax.set_ylabel("azimuth (deg, + starboard)")


def _grid_values(cells, polar_deg, azimuth_deg, value: str) -> np.ndarray:
    """A (n_azimuth, n_polar) array of a cell column, NaN where no cell is given."""
    out = np.full((len(azimuth_deg), len(polar_deg)), np.nan)
    i = np.searchsorted(azimuth_deg, cells["azimuth_deg"].to_numpy(float))
    j = np.searchsorted(polar_deg, cells["polar_deg"].to_numpy(float))
    out[i, j] = cells[value].to_numpy(float)
    return out


@_styled
def hemisphere_figure(panels, polar_deg, azimuth_deg, label: str):
    """Maps of the lower hemisphere, one row per region and band range.

    ``panels`` is a list of (title, cells, fit_cells) with cells a table of ``polar_deg``,
    ``azimuth_deg`` and ``level_db``; fit_cells the same for the smooth fit or None. Each row
    shows the data, then the fit and its residual where there is one; empty cells stay white.
    """
    def fitted(fit):
        return fit is not None and bool(np.isfinite(fit["fit_db"].to_numpy(float)).any())

    n_cols = 3 if any(fitted(f) for _, _, f in panels) else 1
    fig, axes = plt.subplots(max(1, len(panels)), n_cols, squeeze=False,
                             figsize=(4.6 * n_cols, 2.9 * max(1, len(panels))))
    for row, (title, cells, fit) in zip(axes, panels):
        data = _grid_values(cells, polar_deg, azimuth_deg, "level_db")
        peak = float(np.nanmax(data)) if np.isfinite(data).any() else 0.0
        mesh = row[0].pcolormesh(polar_deg, azimuth_deg, data, shading="nearest",
                                 cmap=MAP_CMAP, vmin=peak - 15, vmax=peak)
        fig.colorbar(mesh, ax=row[0], pad=0.02).set_label("dB re 20 uPa at 1 m")
        row[0].set_title(f"{title}: measured", fontsize=9)
        if fitted(fit):
            fitted_db = _grid_values(fit, polar_deg, azimuth_deg, "fit_db")
            mesh = row[1].pcolormesh(polar_deg, azimuth_deg, fitted_db, shading="nearest",
                                     cmap=MAP_CMAP, vmin=peak - 15, vmax=peak)
            fig.colorbar(mesh, ax=row[1], pad=0.02).set_label("dB (fit)")
            rms = float(np.sqrt(np.nanmean(fit["fit_residual_db"].to_numpy(float) ** 2)))
            row[1].set_title("FIT (spherical harmonics), covered cells only", fontsize=9)
            resid = _grid_values(fit, polar_deg, azimuth_deg, "fit_residual_db")
            mesh = row[2].pcolormesh(polar_deg, azimuth_deg, resid, shading="nearest",
                                     cmap="PuOr", vmin=-3, vmax=3)
            fig.colorbar(mesh, ax=row[2], pad=0.02).set_label("measured - fit (dB)")
            row[2].set_title(f"residual, rms {rms:.2f} dB", fontsize=9)
        elif n_cols > 1:
            for ax in row[1:]:
                ax.axis("off")
            row[1].text(0.5, 0.5, "no fit: too few covered cells for its degree",
                        ha="center", transform=row[1].transAxes)
        for ax in row[:n_cols if fitted(fit) else 1]:
            _hemisphere_axes(ax, polar_deg, azimuth_deg)
    if not panels:
        axes[0][0].text(0.5, 0.5, "no covered cell", ha="center", transform=axes[0][0].transAxes)
    fig.suptitle(f"{label}: directivity hemispheres (body axes; white cells: no window)",
                 fontsize=11)
    fig.tight_layout()
    return fig


@_styled
def coverage_figure(counts, traces, polar_deg, azimuth_deg, label: str):
    """Which cells of the lower hemisphere a label's passes cover.

    ``counts`` is a table of ``polar_deg``, ``azimuth_deg``, ``n_windows``; ``traces`` maps each
    pass to its windows' (polar, azimuth) arrays, drawn as lines over the cells.
    """
    fig, ax = plt.subplots(figsize=(7.5, 4.6))
    grid = _grid_values(counts, polar_deg, azimuth_deg, "n_windows")
    mesh = ax.pcolormesh(polar_deg, azimuth_deg, grid, shading="nearest", cmap="Greys",
                         vmin=0, vmax=max(1.0, float(np.nanmax(grid)) if np.isfinite(grid).any()
                                          else 1.0), alpha=0.6)
    fig.colorbar(mesh, ax=ax, pad=0.02).set_label("windows in the cell")
    colours = [ACCENT, ARRAY, INK, "#7a4e9e", "#b03a2e", "#4a7a1f"]
    for k, (name, (polar, azimuth)) in enumerate(traces.items()):
        ax.plot(polar, azimuth, marker="o", ms=3, lw=1.2, color=colours[k % len(colours)],
                label=name)
    _hemisphere_axes(ax, polar_deg, azimuth_deg)
    ax.legend(fontsize=8, frameon=False, loc="upper right")
    ax.set_title(f"{label}: covered cells ({int(np.isfinite(grid).sum())} of {grid.size}); "
                 "fly other offsets to fill the rest", fontsize=10)
    fig.tight_layout()
    return fig


@_styled
def narrowband_figure(table, tones, pass_name: str):
    """The narrowband density of each region in the window nearest overhead (one panel a
    region), the rotors' blade-passing harmonics of that window marked (``tones``:
    rotor_tones.csv, possibly empty)."""
    regions = list(dict.fromkeys(table["region"])) if len(table) else []
    fig, axes = plt.subplots(len(regions) or 1, 1, figsize=(9.0, 2.4 * max(1, len(regions))),
                             squeeze=False, sharex=True)
    if regions:
        window = int(table.loc[(table["polar_angle_deg"] - 90.0).abs().idxmin(), "window"])
        here = table[table["window"] == window]
        marks = tones[tones["window"] == window] if len(tones) else tones
        for ax, region in zip(axes[:, 0], regions):
            r = here[here["region"] == region]
            ax.plot(r["frequency_hz"], r["psd_full_db"], color="#b8bec7", lw=0.8,
                    label="every term")
            ax.plot(r["frequency_hz"], r["psd_db"], color=INK, lw=1.0,
                    label="diagonal removed")
            rotors = list(dict.fromkeys(marks["rotor"])) if len(marks) else []
            for rotor, colour in zip(rotors, [ACCENT, ARRAY, "#7a4e9e", "#b03a2e"] * 4):
                for k, f in enumerate(marks.loc[marks["rotor"] == rotor, "frequency_hz"]):
                    ax.axvline(f, color=colour, lw=0.7, ls=":",
                               label=f"{rotor}: blade-passing harmonics" if k == 0 else None)
            ax.set_ylabel("dB re (20 uPa)^2/Hz")
            ax.set_title(region, fontsize=10, loc="left")
            ax.legend(fontsize=7, frameon=False, loc="upper right")
        angle = float(here["polar_angle_deg"].iloc[0])
        resolution = float(here["resolution_hz"].iloc[0])
        fig.suptitle(f"{pass_name}: narrowband spectra at 1 m in source time, window {window} "
                     f"({angle:.0f} deg), {resolution:g} Hz lines", fontsize=11)
    else:
        axes[0, 0].text(0.5, 0.5, "no window analysed", ha="center",
                        transform=axes[0, 0].transAxes)
    axes[-1, 0].set_xlabel("frequency in source time (Hz)")
    fig.tight_layout()
    return fig


@_styled
def rotor_tones_figure(tones, pass_name: str, note: str = ""):
    """Each rotor's blade-passing harmonics at 1 m against polar angle (one panel a rotor)."""
    rotors = list(dict.fromkeys(tones["rotor"])) if len(tones) else []
    fig, axes = plt.subplots(1, max(1, len(rotors)), figsize=(4.8 * max(1, len(rotors)), 3.8),
                             squeeze=False, sharey=True)
    colours = [INK, ACCENT, ARRAY, "#7a4e9e", "#b03a2e", "#4a7a1f"]
    for ax, rotor in zip(axes[0], rotors):
        part = tones[tones["rotor"] == rotor]
        for i, (k, g) in enumerate(part.groupby("harmonic")):
            g = g.sort_values("polar_angle_deg")
            half = (Z90 * g["uncertainty_db"].to_numpy(float) if "uncertainty_db" in g
                    else None)
            ax.errorbar(g["polar_angle_deg"], g["level_1m_db"], yerr=half, marker="o", ms=3,
                        lw=1.0, elinewidth=0.8, capsize=1.5, color=colours[i % len(colours)],
                        label=f"k = {k} ({g['frequency_hz'].mean():.0f} Hz)")
        ax.set_title(rotor)
        ax.set_xlabel("polar emission angle (deg, 90 = overhead)")
        ax.legend(fontsize=8, frameon=False)
    axes[0][0].set_ylabel("harmonic level at 1 m (dB re 20 uPa)")
    if not rotors:
        axes[0][0].text(0.5, 0.5, note or "no rotor tones", ha="center", wrap=True,
                        transform=axes[0][0].transAxes)
    fig.suptitle(f"{pass_name}: blade-passing harmonics per rotor with 90 % intervals, from "
                 "each rotor's own shaft speed (gaps: no level, rotor_tones.csv says why)",
                 fontsize=10)
    fig.tight_layout()
    return fig


@_styled
def planning_figure(patterns, half_widths_m, rows, title: str, points_xy=None,
                    dynamic_range_db: float = 20.0):
    """The point-spread of a source over the array centre, one panel per band: ``patterns``
    (n_bands, n, n) beam patterns, each on a square of +-``half_widths_m[k]`` (east across,
    north up), ``rows`` the bands' BandResolution, ``points_xy`` two points to mark."""
    fig, axes, panels, cols, _ = _panels(len(rows), 3.0, 3.1)
    fig.subplots_adjust(hspace=0.45)
    image = None
    for b, ax in enumerate(panels):
        r = rows[b]
        h = half_widths_m[b]
        extent = [-h, h, -h, h]
        with np.errstate(divide="ignore"):
            db = 10 * np.log10(np.maximum(patterns[b], 1e-12))
        image = ax.imshow(db.T, extent=extent, origin="lower", cmap=MAP_CMAP,
                          vmin=-dynamic_range_db, vmax=0, interpolation="bilinear")
        if points_xy is not None:
            p = np.asarray(points_xy)
            ax.plot(p[:, 0], p[:, 1], "o", mfc="none", mec=ARRAY, ms=6)
        mark = "" if r.separable is None else (", points apart" if r.separable else "")
        ax.set_title(f"{r.band_hz:g} Hz{mark}\n-3 dB {r.width_m:.2f} m, side lobe "
                     f"{r.max_side_lobe_db:.0f} dB", fontsize=8)
        if b % cols == 0:
            ax.set_ylabel("north (m)")
        ax.set_xlabel("east (m)", fontsize=8)
    fig.suptitle(title, fontsize=11)
    if image is not None:
        bar = fig.colorbar(image, ax=axes, shrink=0.8, extend="min", pad=0.02)
        bar.set_label("dB re the source")
    return fig
