"""Figures for planning: S/N against exposure time, and what to observe when in a night.

Drawn on matplotlib's Agg canvas with the style and palette of
:mod:`stelltemp.plots` (no global backend change, no display needed).  Each
``plot_*`` function writes one file and returns its path; its ``*_figure``
twin returns the Figure.  Artists that carry meaning have a ``gid``
(``"window:<name>"``, ``"altitude:<name>"``, ``"moon"``, ``"altitude-limit"``,
``"snr:<filter>"``, ``"goal:<filter>"``, ``"nonlinear:<filter>"``) so tests
can find them.

Times are drawn as clock times: UTC on the lower axis, local civil time
(the site's offset, `stelltemp.observing.instrument.Site.utc_offset`) on the
upper one.  Airmass is the Kasten & Young (1989) airmass the plan table
uses.
"""

from __future__ import annotations

import math

import numpy as np

from ..plots import PALETTE, SERIES, _colour, _new_figure, _save, _styled
from . import ccd

__all__ = ["plot_snr_curves", "snr_figure", "plot_night", "night_figure", "clock_label", "altitude_at_airmass"]

#: at most this many altitude curves are drawn; more targets are shown by their windows only
CURVE_LIMIT = 8
#: line styles cycled with the palette colours, so no two curves look alike
LINE_STYLES = ("-", "-.", (0, (1, 1.3)), (0, (6, 2, 1, 2, 1, 2)))
#: markers cycled with them (drawn every few points)
MARKERS = ("o", "s", "^", "D", "v", "P", "X", "*")
#: airmass values marked on the right-hand axis
AIRMASS_TICKS = (1.0, 1.1, 1.2, 1.5, 2.0, 3.0)


def clock_label(hours):
    """Clock time ``HH:MM`` of hours counted from a midnight (wrapping at 24 h).

    Examples
    --------
    >>> clock_label(18.5), clock_label(25.25), clock_label(-0.5)
    ('18:30', '01:15', '23:30')
    """
    minutes = int(round(float(hours) * 60.0)) % (24 * 60)
    return f"{minutes // 60:02d}:{minutes % 60:02d}"


def altitude_at_airmass(x):
    """Altitude (deg) where the Kasten & Young (1989) airmass equals ``x`` (≥ 1).

    Examples
    --------
    >>> round(altitude_at_airmass(2.0), 2)
    29.9
    """
    from scipy.optimize import brentq

    from .airmass import airmass_kasten_young

    if x <= 1.0:
        return 90.0
    return float(brentq(lambda a: float(airmass_kasten_young(a)) - x, 0.0, 90.0, xtol=1e-8))


def _series_style(i):
    """(colour, line style, marker) of series i: colours and styles both change."""
    names = [c for c in SERIES if c not in ("ink", "slate")]  # ink: references; slate: the Moon
    return _colour(names[i % len(names)]), LINE_STYLES[i % len(LINE_STYLES)], MARKERS[i % len(MARKERS)]


def _clock_axis(axis, lo, hi, offset=0.0):
    """Ticks at whole hours (every 1 or 2 h) labelled as clock times shifted by ``offset`` hours."""
    from matplotlib.ticker import FixedLocator, FuncFormatter

    step = 1 if hi - lo <= 9 else 2
    first = math.ceil((lo + offset) / step) * step
    ticks = [t - offset for t in np.arange(first, hi + offset + 1e-9, step)]
    axis.set_major_locator(FixedLocator(ticks))
    axis.set_major_formatter(FuncFormatter(lambda v, _: clock_label(v + offset)))


# ------------------------------------------------------------------ S/N
def snr_figure(table, t_min=0.01, t_max=None):
    """S/N against exposure time per filter for one star.

    Parameters
    ----------
    table : astropy.table.Table
        Output of `stelltemp.observing.plan.plan_target` (one row per filter;
        ``meta`` with the read noise, gain, the S/N goal and the instrument).
    t_min, t_max : float
        Exposure range, s (default up to 3 × the longest linear exposure, at
        least 600 s).

    Returns
    -------
    matplotlib.figure.Figure
        One curve per filter, each with its own colour, line style and
        marker; a filled marker where the curve reaches the S/N goal
        (``exposure_for_snr``); a dashed vertical line where the star's peak
        pixel leaves the linear range (``nonlinear_after``), the curve drawn
        thick beyond it.
    """
    from matplotlib.lines import Line2D

    limits = [float(r["nonlinear_after"]) for r in table if np.isfinite(r["nonlinear_after"])]
    t_hi = t_max or max([600.0] + [3 * v for v in limits if v < 1e5])
    t = np.logspace(np.log10(t_min), np.log10(t_hi), 240)
    goal = table.meta.get("target_snr")
    star = str(table["target"][0]) if "target" in table.colnames and len(table) else "star"
    airmass = sorted({round(float(x), 2) for x in table["airmass"]}) if "airmass" in table.colnames else []
    instrument = str(table.meta.get("instrument", "") or "instrument")

    fig = _new_figure(8.0, 5.4)
    with _styled():
        ax = fig.add_subplot(111)
        handles, drawn_limit = [], False
        for i, row in enumerate(table):
            if not np.isfinite(row["aperture_rate"]) or row["aperture_rate"] <= 0:
                continue
            colour, ls, marker = _series_style(i)
            s_n = ccd.snr(t, row["aperture_rate"], row["sky_rate"], row["dark_rate"], table.meta["read_noise_e"],
                          row["n_pix"], row["n_background"], table.meta["gain_e_per_adu"], ccd.SIGMA_F_ADU,
                          row["scintillation_1s"])
            f = str(row["filter"])
            ax.plot(t, s_n, color=colour, ls=ls, lw=1.7, marker=marker, markevery=(i * 6, 30), ms=5,
                    mfc="white", gid=f"snr:{f}")
            label = f
            lim = float(row["nonlinear_after"])
            if np.isfinite(lim) and t[0] < lim < t[-1]:
                ax.axvline(lim, color=colour, ls="--", lw=1.0, gid=f"nonlinear:{f}")
                ax.plot(t[t >= lim], s_n[t >= lim], color=colour, lw=5, alpha=0.25, solid_capstyle="butt")
                drawn_limit = True
                label += f", linear up to {lim:,.3g} s"
            t_goal = float(row["exposure_for_snr"]) if "exposure_for_snr" in table.colnames else math.nan
            if goal and math.isfinite(t_goal) and t[0] <= t_goal <= t[-1]:
                ax.plot([t_goal], [goal], marker=marker, ms=9, color=colour, mec=PALETTE["ink"], mew=0.8,
                        ls="none", zorder=5, gid=f"goal:{f}")
                label += f"; S/N {goal:g} in {t_goal:,.3g} s"
            handles.append(Line2D([], [], color=colour, ls=ls, lw=1.7, marker=marker, ms=6, mfc="white",
                                  label=label))
        if goal:
            ax.axhline(goal, color=PALETTE["ink"], lw=0.9, ls=":", gid="goal")
            handles.append(Line2D([], [], color=PALETTE["ink"], lw=0.9, ls=":",
                                  label=f"S/N goal {goal:g} (filled marker: reached)"))
        if drawn_limit:
            handles.append(Line2D([], [], color=PALETTE["ink"], lw=1.0, ls="--",
                                  label="dashed: non-linearity begins (peak pixel at the linear limit);\n"
                                        "thick: exposures beyond it (toward saturation)"))
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.set_xlim(t[0], t[-1])
        ax.set_xlabel("exposure time (s)")
        ax.set_ylabel("signal-to-noise ratio")
        x_txt = ", ".join(f"{x:g}" for x in airmass) if airmass else "?"
        ax.set_title(f"S/N against exposure time: {star} at airmass {x_txt}\n{instrument}", fontsize=10.5)
        ax.grid(True, which="both", alpha=0.8)
        ax.legend(handles=handles, loc="upper left", fontsize=8.5, title="filter")
    return fig


def plot_snr_curves(table, path, t_min=0.01, t_max=None, replace=False):
    """Write `snr_figure` to ``path``; return the path."""
    return _save(snr_figure(table, t_min=t_min, t_max=t_max), path, replace)


# ------------------------------------------------------------------ night
def _windows(tracks, plan, min_alt_deg):
    """[(name, start h, end h, best h)] per target (NaNs without a window), hours from the first midnight."""
    day0 = math.floor(tracks["times"].mjd[0])
    if plan is not None:
        from astropy.time import Time

        from .plan import night_summary

        def hours(isot):
            return (Time(isot, format="isot", scale="utc").mjd - day0) * 24.0 if isot else math.nan

        return [(str(r["target"]), hours(str(r["window_start"])), hours(str(r["window_end"])),
                 hours(str(r["best_time"]))) for r in night_summary(plan)]
    from .night import best_windows

    out = []
    for name, w in zip(tracks["names"], best_windows(tracks["alt"], tracks["times"], tracks["dark"], min_alt_deg)):
        h = [(x.mjd - day0) * 24.0 if x is not None else math.nan for x in (w.start, w.end, w.best)]
        out.append((str(name), *h))
    return out


def _pick_curves(windows, names, chosen):
    """Names whose altitude curves are drawn, and the caption's reason."""
    if chosen is not None:
        return [n for n in chosen if n in names], None
    if len(names) <= CURVE_LIMIT:
        return list(names), None
    timed, seen = [], set()
    for n, s, e, b in sorted(windows, key=lambda w: (w[3], w[0])):
        key = tuple(round(v, 1) for v in (s, e, b))  # stars sharing a track (a cluster): the first only
        if n in names and math.isfinite(b) and key not in seen:
            seen.add(key)
            timed.append(n)
    idx = np.unique(np.linspace(0, len(timed) - 1, min(CURVE_LIMIT - 2, len(timed))).round().astype(int))
    return [timed[i] for i in idx], "spread through the night by best time (one per shared track)"


def _intervals(mask, hours):
    """(start, end) hours of each run of True in ``mask``."""
    out, start = [], None
    for h, m in zip(hours, mask):
        if m and start is None:
            start = h
        if not m and start is not None:
            out.append((start, last))
            start = None
        last = h
    if start is not None:
        out.append((start, last))
    return out


def _moon_text(hours, moon_alt, illum, dark):
    """The caption's sentence on the Moon: phase at mid-night, when it is up, how much of dark time."""
    mid = int(np.flatnonzero(dark)[len(np.flatnonzero(dark)) // 2]) if dark.any() else len(hours) // 2
    lit = float(illum[mid])
    phase = f"{lit:.0%} illuminated" if math.isfinite(lit) else "phase unknown"
    spans = _intervals((moon_alt > 0) & dark, hours)
    if not spans:
        return lit, f"Moon {phase}, below the horizon all through dark time"
    when = " and ".join(f"{clock_label(a)}–{clock_label(b)}" for a, b in spans)
    return lit, f"Moon {phase}, up in dark time {when} UTC"


def night_figure(tracks, min_alt_deg=30.0, plan=None, chosen=None, reason=None):
    """What to observe when: every target's window, with the altitude curves of a few.

    Parameters
    ----------
    tracks : dict
        Output of `stelltemp.observing.plan.night_tracks` (its ``moon_alt``,
        ``moon_illuminated`` and ``utc_offset_hours`` when present).
    min_alt_deg : float
        Altitude limit of the windows, deg.
    plan : astropy.table.Table, optional
        A `stelltemp.observing.plan.plan_night` table: its windows (one per
        target) are drawn.  Without it the windows are computed from
        ``tracks`` as the plan does (`stelltemp.observing.night.best_windows`).
    chosen : list of str, optional
        Targets whose altitude curves are drawn (default: all when at most
        `CURVE_LIMIT`, else a few spread through the night by best time).
    reason : str, optional
        Why those were chosen, for the caption.

    Returns
    -------
    matplotlib.figure.Figure
        Upper panel: altitude (left axis) and Kasten & Young airmass (right
        axis) of the chosen targets and of the Moon, the altitude limit and
        the twilights shaded.  Lower panel: one bar per target, sorted by
        best time, from the start to the end of its window, a dot at the best
        time.  Lower axis UTC, upper axis local time, both as clock times.
    """
    times = tracks["times"]
    day0 = math.floor(times.mjd[0])
    hours = (times.mjd - day0) * 24.0
    sun = np.asarray(tracks["sun_alt"], float)
    offset = float(tracks.get("utc_offset_hours", 0.0) if plan is None
                   else plan.meta.get("utc_offset_hours", tracks.get("utc_offset_hours", 0.0)))
    names = [str(n) for n in tracks["names"]]
    windows = _windows(tracks, plan, min_alt_deg)
    curves, auto_reason = _pick_curves(windows, names, chosen)
    reason = reason or auto_reason
    order = sorted(windows, key=lambda w: (not math.isfinite(w[3]), w[3] if math.isfinite(w[3]) else 0.0, w[0]))
    with_window = [w for w in order if math.isfinite(w[1])]
    without = [w[0] for w in order if not math.isfinite(w[1])]
    night = np.nonzero(sun < 0)[0]
    if night.size:  # from an hour before sunset to an hour after sunrise
        lo, hi = max(hours[0], hours[night[0]] - 1), min(hours[-1], hours[night[-1]] + 1)
    else:
        lo, hi = hours[0], hours[-1]

    n_rows = max(len(with_window), 1)
    bar_h = max(1.6, 0.15 * n_rows + 0.6)
    fig = _new_figure(10.0, 4.2 + bar_h + 0.5)
    with _styled():
        gs = fig.add_gridspec(2, 1, height_ratios=(4.2, bar_h))
        ax = fig.add_subplot(gs[0])
        bars = fig.add_subplot(gs[1], sharex=ax)
        for a in (ax, bars):  # twilights: civil, nautical, astronomical, night
            for level, shade in ((-0.833, 0.035), (-6.0, 0.045), (-12.0, 0.055), (-18.0, 0.07)):
                a.fill_between(hours, 0, 1, where=sun < level, color=PALETTE["ink"], alpha=shade, lw=0,
                               transform=a.get_xaxis_transform())
        colours = {}
        for i, name in enumerate(curves):
            k = names.index(name)
            alt = np.asarray(tracks["alt"][k], float)
            colour, ls, marker = _series_style(i)
            colours[name] = colour
            ax.plot(hours, np.where(alt > 0, alt, np.nan), color=colour, ls=ls, lw=1.6, gid=f"altitude:{name}")
            top = int(np.nanargmax(np.where((hours >= lo) & (hours <= hi) & (alt > 0), alt, -np.inf)))
            high = alt[top] > 82  # near the zenith: the name goes below the peak, inside the axes
            ax.annotate(name, (hours[top], alt[top]), xytext=(0, -4 if high else 3), textcoords="offset points",
                        ha="center", va="top" if high else "bottom", fontsize=8, color=colour)
        moon_alt = tracks.get("moon_alt")
        moon_txt = ""
        if moon_alt is not None:
            moon_alt = np.asarray(moon_alt, float)
            illum = np.asarray(tracks.get("moon_illuminated", np.full(len(hours), np.nan)), float)
            dark = np.asarray(tracks.get("dark", sun < -18.0), bool)
            lit, moon_txt = _moon_text(hours, moon_alt, illum, dark)
            ax.plot(hours, np.where(moon_alt > 0, moon_alt, np.nan), color=PALETTE["slate"], lw=2.4, ls=(0, (2, 2)),
                    alpha=0.9, gid="moon")
            up = (hours >= lo) & (hours <= hi) & (moon_alt > 0)
            if up.any():
                k = int(np.nanargmax(np.where(up, moon_alt, -np.inf)))
                ax.annotate(f"Moon ({lit:.0%} lit)", (hours[k], moon_alt[k]), xytext=(0, 4),
                            textcoords="offset points", ha="center", va="bottom", fontsize=8,
                            color=PALETTE["slate"])
                for a in (ax, bars):
                    a.fill_between(hours, 0, 1, where=up, color=_colour("brass"), alpha=0.10, lw=0,
                                   transform=a.get_xaxis_transform())
        ax.axhline(min_alt_deg, color=PALETTE["ember"], ls="--", lw=1.1, gid="altitude-limit")
        ax.text(lo + 0.05 * (hi - lo) / 10, min_alt_deg + 1.0,
                f"altitude limit {min_alt_deg:g}° (airmass {float(_ky(min_alt_deg)):.2f})",
                color=PALETTE["ember"], fontsize=8.5, va="bottom")
        ax.set_ylim(0, 90)
        ax.set_xlim(lo, hi)
        ax.set_ylabel("altitude (deg)")
        ax.grid(True, alpha=0.8)
        ax.tick_params(labelbottom=False)
        right = ax.twinx()
        right.set_ylim(0, 90)
        right.set_yticks([altitude_at_airmass(x) for x in AIRMASS_TICKS])
        right.set_yticklabels([f"{x:g}" for x in AIRMASS_TICKS])
        right.set_ylabel("airmass (Kasten & Young 1989)")
        local = ax.secondary_xaxis("top", functions=(lambda h: h + offset, lambda h: h - offset))
        _clock_axis(local.xaxis, lo + offset, hi + offset)
        sign = "+" if offset >= 0 else "−"
        local.set_xlabel(f"local time (UTC{sign}{abs(offset):g} h)")

        for y, (name, start, end, best) in enumerate(with_window):
            colour = colours.get(name, _colour("harbour"))
            bars.plot([start, end], [y, y], color=colour, lw=4.2 if name in colours else 3.2,
                      solid_capstyle="butt", gid=f"window:{name}")
            bars.plot([best], [y], "o", color=PALETTE["ink"], ms=3.2)
        bars.set_ylim(len(with_window) - 0.5, -0.5)
        bars.set_yticks(range(len(with_window)))
        bars.set_yticklabels([w[0] for w in with_window], fontsize=7 if len(with_window) > 25 else 8.5)
        for tick, w in zip(bars.get_yticklabels(), with_window):
            if w[0] in colours:
                tick.set_color(colours[w[0]])
                tick.set_fontweight("bold")
        bars.grid(True, axis="x", alpha=0.8)
        bars.set_ylabel("target (by best time)")
        _clock_axis(bars.xaxis, lo, hi)
        bars.set_xlabel(f"time (UTC), night of {times[0].isot[:10]}")

        site = str(tracks.get("site", "") or (plan.meta.get("site", "") if plan is not None else ""))
        ax.set_title(f"What to observe when{': ' + site if site else ''}, night of {times[0].isot[:10]} — "
                     f"{len(with_window)} of {len(windows)} targets have a window", fontsize=11)
        shown = ", ".join(curves)
        caption = [f"Curves: {len(curves)} of {len(windows)} targets ({shown})"
                   + (f", {reason}" if reason else "") + ".",
                   f"Bars: each target's best window in dark time above {min_alt_deg:g}°, dot at its best time"
                   + ("; shading: twilights (grey), Moon up (yellow)." if moon_alt is not None else
                      "; shading: twilights.")]
        if moon_txt:
            caption.append(moon_txt + ".")
        if without:
            caption.append(f"No window ({len(without)}): " + ", ".join(without[:8]) + (" …" if len(without) > 8 else ""))
        import textwrap

        plain = "\n".join(caption)  # unwrapped, for tests and notebooks
        caption = [part for line in caption for part in textwrap.wrap(line, 150, subsequent_indent="  ")]
        fig.text(0.01, 0.0, "\n".join(caption), fontsize=8, color=PALETTE["ink"], ha="left", va="bottom")
        room = (0.16 * len(caption) + 0.08) / fig.get_figheight()  # the caption's lines, in figure height
        fig.get_layout_engine().set(rect=(0, room, 1, 1 - room))
    fig.caption = plain
    return fig


def _ky(alt):
    from .airmass import airmass_kasten_young

    return airmass_kasten_young(alt)


def plot_night(tracks, path, min_alt_deg=30.0, replace=False, plan=None, chosen=None, reason=None):
    """Write `night_figure` to ``path``; return the path."""
    return _save(night_figure(tracks, min_alt_deg, plan=plan, chosen=chosen, reason=reason), path, replace)
