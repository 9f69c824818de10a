"""Figures for planning: S/N against exposure time, altitude through the night.

Drawn with matplotlib's Agg canvas directly (no global backend change, no
display needed).  Each function writes one file and returns its path.
"""

from __future__ import annotations

import numpy as np

from . import ccd

__all__ = ["plot_snr_curves", "plot_night"]

#: more targets than this: names at the tracks instead of a legend
LEGEND_LIMIT = 10
#: track colours of our own (dark enough to read on the twilight shading)
TRACK_COLOURS = ("#1b6ca8", "#c8553d", "#2a9d8f", "#8d5a97", "#e09f3e", "#3d405b",
                 "#7a9e3c", "#b5838d", "#264653", "#9c6644")


def _save(fig, path, replace):
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    from ..safeio import save_figure

    FigureCanvasAgg(fig)
    return save_figure(fig, path, replace, dpi=120, bbox_inches="tight")


def plot_snr_curves(table, path, t_min=0.01, t_max=None, replace=False):
    """S/N against exposure time per filter, with the linear-limit exposure marked.

    Parameters
    ----------
    table : astropy.table.Table
        Output of `stelltemp.observing.plan.plan_target`.
    path : str
        Output image file (format from the extension).
    """
    from matplotlib.figure import Figure

    fig = Figure(figsize=(7, 4.5))
    ax = fig.add_subplot(111)
    limits = [float(r["nonlinear_after"]) for r in table if np.isfinite(r["nonlinear_after"])]
    t_hi = t_max or max([600.0] + [3 * v for v in limits if v < 1e5])
    t = np.logspace(np.log10(t_min), np.log10(t_hi), 200)
    for i, row in enumerate(table):
        if not np.isfinite(row["aperture_rate"]) or row["aperture_rate"] <= 0:
            continue
        s_n = ccd.snr(t, row["aperture_rate"], row["sky_rate"], row["dark_rate"], table.meta["read_noise_e"],
                      row["n_pix"], row["n_background"], table.meta["gain_e_per_adu"], ccd.SIGMA_F_ADU,
                      row["scintillation_1s"])
        line, = ax.loglog(t, s_n, label=str(row["filter"]), color=TRACK_COLOURS[i % len(TRACK_COLOURS)])
        lim = float(row["nonlinear_after"])
        if np.isfinite(lim) and t[0] < lim < t[-1]:
            ax.axvline(lim, color=line.get_color(), ls="--", lw=1)
            ax.plot(t[t > lim], s_n[t > lim], color=line.get_color(), lw=3, alpha=0.3)
    goal = table.meta.get("target_snr")
    if goal:
        ax.axhline(goal, color="k", lw=0.8, ls=":", label=f"target S/N {goal:g}")
    ax.set_xlabel("exposure time (s)")
    ax.set_ylabel("signal-to-noise ratio (dimensionless)")
    ax.set_title(f"{table['target'][0]}: S/N per filter (dashed: saturation/non-linear limit)")
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(fontsize="small")
    return _save(fig, path, replace)


def plot_night(tracks, path, min_alt_deg=30.0, replace=False):
    """Altitude (left axis) and airmass (right axis) through the night per target.

    Parameters
    ----------
    tracks : dict
        Output of `stelltemp.observing.plan.night_tracks`.
    path : str
        Output image file.
    """
    from matplotlib.figure import Figure

    times = tracks["times"]
    hours = (times.mjd - np.floor(times.mjd[0])) * 24.0
    fig = Figure(figsize=(8, 4.8))
    ax = fig.add_subplot(111)
    sun = tracks["sun_alt"]
    # twilight shading in greys, light enough that the tracks stay readable
    for level, shade in ((-0.833, 0.06), (-6.0, 0.08), (-12.0, 0.10), (-18.0, 0.12)):
        ax.fill_between(hours, 0, 90, where=sun < level, color="#20304a", alpha=shade, lw=0)
    names = list(tracks["names"])
    many = len(names) > LEGEND_LIMIT
    dark = sun < -18.0
    for i, (name, alt) in enumerate(zip(names, tracks["alt"])):
        colour = TRACK_COLOURS[i % len(TRACK_COLOURS)]
        ax.plot(hours, np.where(alt > 0, alt, np.nan), color=colour, lw=0.9 if many else 1.4, label=name)
        if many:
            # many targets: name each track at its highest point in dark time instead of a legend
            usable = np.where(dark & (alt > min_alt_deg), alt, -np.inf)
            k = int(np.argmax(usable))
            if np.isfinite(usable[k]):
                ax.annotate(name, (hours[k], alt[k]), fontsize=6, color=colour, ha="center",
                            va="bottom", xytext=(0, 1), textcoords="offset points")
    ax.axhline(min_alt_deg, color="k", ls=":", lw=0.8)
    ax.set_ylim(0, 90)
    night = np.nonzero(sun < 0)[0]
    if night.size:  # from an hour before sunset to an hour after sunrise
        ax.set_xlim(max(hours[0], hours[night[0]] - 1), min(hours[-1], hours[night[-1]] + 1))
    else:
        ax.set_xlim(hours[0], hours[-1])
    ax.set_xlabel(f"time (h UTC from {times[0].isot[:10]} 00:00)")
    ax.set_ylabel("altitude (deg)")
    ax2 = ax.twinx()
    ax2.set_ylim(0, 90)
    marks = np.array([1.0, 1.2, 1.5, 2.0, 3.0])
    ax2.set_yticks(90.0 - np.degrees(np.arccos(1.0 / marks)))
    ax2.set_yticklabels([f"{m:g}" for m in marks])
    ax2.set_ylabel("airmass sec z (dimensionless)")
    ax.set_title("Altitude through the night (grey: twilights; darkest band: Sun below -18 deg)")
    if names and not many:
        ax.legend(fontsize="small", loc="upper left", bbox_to_anchor=(1.08, 1.0))
    return _save(fig, path, replace)
