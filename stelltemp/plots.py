"""Figures: a blackbody under passbands, colour against temperature, one star's
fit, and the colour–temperature diagram of a catalogue run.

Every figure is drawn on matplotlib's Agg canvas inside the function
(``matplotlib.figure.Figure`` with ``FigureCanvasAgg``): importing stelltemp
never touches matplotlib, no global backend is switched and no display is
needed.  Each ``plot_*`` function writes one image (format from the file
extension) and returns the path written; each has a ``*_figure`` twin that
returns the :class:`~matplotlib.figure.Figure` itself, for notebooks and
tests.  Artists that carry meaning have a ``gid`` (``"wien-peak"``,
``"passband:V_JC"``, ``"calibration:c10_bv"`` …) so tests can find them.

The planning figures (S/N against exposure time, altitude and airmass
through the night) live in :mod:`stelltemp.observing.figures`.
"""

from __future__ import annotations

import math

import numpy as np

from .errors import StelltempError

__all__ = [
    "PALETTE",
    "plot_spectrum_with_passbands",
    "plot_colour_temperature",
    "plot_star_fit",
    "plot_catalogue_results",
    "spectrum_figure",
    "colour_temperature_figure",
    "star_fit_figure",
    "catalogue_figure",
]

#: our own named colours ("harbour at dusk"); figures use these names only
PALETTE = {
    "ink": "#23272f",      # text, axes, reference curves
    "fog": "#dde1e6",      # grids
    "harbour": "#2d6a8f",  # observations
    "ember": "#c8553d",    # models and fits
    "kelp": "#588157",
    "brass": "#c9962b",
    "heather": "#7b5ea7",
    "rust": "#8c3b2a",
    "slate": "#6c7a89",
}
#: order of the series colours (first colour for the first series)
SERIES = ("harbour", "ember", "kelp", "heather", "brass", "slate", "rust", "ink")
#: blue-to-red ramp for passbands sorted by wavelength
BAND_RAMP = ("heather", "harbour", "kelp", "brass", "ember", "rust")
#: ramp for a colour bar (light to dark)
VALUE_RAMP = ("#f3e3b3", "brass", "ember", "heather", "#2b2140")

_STYLE = {
    "font.size": 10.5,
    "axes.titlesize": 11.5,
    "axes.labelsize": 10.5,
    "axes.edgecolor": PALETTE["ink"],
    "axes.labelcolor": PALETTE["ink"],
    "xtick.color": PALETTE["ink"],
    "ytick.color": PALETTE["ink"],
    "text.color": PALETTE["ink"],
    "grid.color": PALETTE["fog"],
    "grid.linewidth": 0.8,
    "legend.frameon": False,
    "legend.fontsize": 9,
}

MAS_PER_RAD = 180.0 / math.pi * 3600e3


def _colour(name):
    return PALETTE.get(name, name)


def _ramp(names, n):
    """n colours evenly spaced along a ramp of palette names."""
    from matplotlib.colors import LinearSegmentedColormap

    cmap = LinearSegmentedColormap.from_list("stelltemp", [_colour(c) for c in names])
    return [cmap(x) for x in (np.linspace(0, 1, n) if n > 1 else [0.3])]


def _value_cmap():
    from matplotlib.colors import LinearSegmentedColormap

    return LinearSegmentedColormap.from_list("stelltemp-values", [_colour(c) for c in VALUE_RAMP])


def _new_figure(width, height):
    """A Figure on an Agg canvas (no pyplot, no global state)."""
    import matplotlib
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    with matplotlib.rc_context(_STYLE):
        fig = Figure(figsize=(width, height), layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _styled():
    import matplotlib

    return matplotlib.rc_context(_STYLE)


def _save(fig, path, replace):
    """Write a figure atomically (see :mod:`stelltemp.safeio`); returns the path."""
    from .safeio import save_figure

    with _styled():
        return save_figure(fig, path, replace, dpi=130)


def _keys(bands, at_least):
    from .passbands import get_passband

    if isinstance(bands, str):
        bands = [bands]
    pbs = [get_passband(b) for b in bands]
    if len(pbs) < at_least:
        raise StelltempError(f"give at least {at_least} passband(s), got {len(pbs)}")
    return pbs


#: temperatures offered as ticks on logarithmic temperature axes, K
_T_TICKS = (1000, 1500, 2000, 2500, 3000, 4000, 5000, 6000, 8000, 10000, 12000, 15000, 20000, 25000, 30000,
            40000, 50000, 60000, 80000, 100000)


def _temperature_ticks(axis, lo, hi, at_most=10):
    """Plain, readable ticks (3,000, 4,000 …) on a logarithmic temperature axis."""
    from matplotlib.ticker import FixedLocator, FuncFormatter, NullFormatter, NullLocator

    ticks = [t for t in _T_TICKS if lo <= t <= hi]
    while len(ticks) > at_most:
        ticks = ticks[::2]
    axis.set_major_locator(FixedLocator(ticks))
    axis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:,.0f}"))
    axis.set_minor_locator(NullLocator())
    axis.set_minor_formatter(NullFormatter())


def _power_of_ten(values):
    top = np.nanmax(values)
    return int(math.floor(math.log10(top))) if top > 0 and math.isfinite(top) else 0


# ------------------------------------------------------------------ spectrum
def spectrum_figure(temperature_k, bands, ebv=0.0, law="G23", rv=3.1):
    """B_λ of a blackbody with passband curves over it and the Wien peak marked.

    Parameters
    ----------
    temperature_k : float
        Temperature, K.
    bands : sequence of str
        Passband keys or files (drawn with their tabulated response, peak 1).
    ebv : float
        E(B−V), mag: above 0 the reddened blackbody is drawn too (solid, the
        unreddened one dotted), through ``law`` with ``rv``; 0 draws the
        unreddened blackbody and says so in the title.
    law, rv : str, float
        Extinction law and R_V (see :mod:`stelltemp.extinction`).

    Returns
    -------
    matplotlib.figure.Figure
        The title counts the passbands drawn (``1 passband``, ``9 passbands``).
    """
    from astropy import units as u

    from .planck import as_kelvin, peak_wavelength, radiance_lambda, wien_b_lambda

    t = float(as_kelvin(temperature_k))
    pbs = sorted(_keys(bands, 0), key=lambda p: p.pivot_wavelength.value)
    peak_nm = float(peak_wavelength(t).to_value(u.nm))
    lo = min([peak_nm * 0.4] + [p.wave_range[0] / 10 for p in pbs])
    hi = max([peak_nm * 4.0] + [p.wave_range[1] / 10 for p in pbs])
    log_x = hi / lo > 25
    if log_x:
        lo, hi = lo / 1.15, hi * 1.1
    else:
        pad = 0.04 * (hi - lo)
        lo, hi = max(lo - pad, 0.3 * lo), hi + pad
    wave = np.geomspace(lo, hi, 1500) if log_x else np.linspace(lo, hi, 1500)
    b = radiance_lambda(t, wave * u.nm).to_value(u.W / u.m**2 / u.nm / u.sr)
    k = _power_of_ten(b)

    fig = _new_figure(8.0, 4.8)
    with _styled():
        ax = fig.add_subplot(111)
        ax2 = ax.twinx()
        ax.set_zorder(ax2.get_zorder() + 1)  # the spectrum over the passband fills
        ax.patch.set_visible(False)
        def frac(x):  # horizontal position as a fraction of the axis
            return np.log(x / lo) / np.log(hi / lo) if log_x else (x - lo) / (hi - lo)

        taken = [[] for _ in range(4)]  # label extents per height level, axis fractions
        for pb, col in zip(pbs, _ramp(BAND_RAMP, len(pbs))):
            w = pb.wave / 10
            ax2.fill_between(w, pb.response, color=col, alpha=0.22, lw=0)
            ax2.plot(w, pb.response, color=col, lw=1.2, gid=f"passband:{pb.key}")
            x_label = float(pb.pivot_wavelength.value / 10)
            half = 0.0065 * len(pb.key) + 0.01  # half-width of the label, roughly, at this font size
            centre = frac(x_label)
            level = next((i for i, spans in enumerate(taken)
                          if all(centre + half < a or centre - half > b for a, b in spans)), 0)
            taken[level].append((centre - half, centre + half))
            ax2.text(x_label, 1.05 + 0.1 * level, pb.key, color=col, ha="center", va="bottom", fontsize=8.5)
        ax2.set_ylim(0, 1.67)
        ax2.set_ylabel("passband response (relative, peak = 1)")

        reddened = ebv > 0
        ax.plot(wave, b / 10.0**k, color=PALETTE["ink"], lw=1.3 if reddened else 2.0, ls=":" if reddened else "-",
                gid="spectrum", label="blackbody, unreddened")
        if reddened:
            from .extinction import law_class, transmission

            x_lo, x_hi = law_class(law).x_range
            inside = (1e3 / wave >= x_lo) & (1e3 / wave <= x_hi)  # x in inverse microns, wave in nm
            fade = np.full(wave.shape, np.nan)
            fade[inside] = transmission(wave[inside] * 10.0, ebv, law, rv)
            ax.plot(wave, b * fade / 10.0**k, color=PALETTE["ink"], lw=2.0, gid="spectrum-reddened",
                    label=f"reddened by E(B−V) = {ebv:.3g} ({law}, R$_V$ = {rv:g})")
            # below the Wien-peak line of text, which runs along the top edge
            ax.legend(loc="upper right", bbox_to_anchor=(1.0, 0.91))
        b_peak = float(radiance_lambda(t, peak_nm * u.nm).to_value(u.W / u.m**2 / u.nm / u.sr)) / 10.0**k
        # the marker stops at the curve so it does not cross the passband labels above it
        ax.plot([peak_nm, peak_nm], [0, b_peak], color=PALETTE["ember"], ls="--", lw=1.4, gid="wien-peak")
        ax.plot([peak_nm], [b_peak], "o", color=PALETTE["ember"], ms=5)
        b_mm_k = wien_b_lambda() * 1e3
        left = frac(peak_nm) < 0.55
        ax.text(peak_nm, 0.965, f"● Wien peak  λ$_{{max}}$ = b/T = {b_mm_k:.4f} mm K / {t:,.0f} K = {peak_nm:,.1f} nm",
                transform=ax.get_xaxis_transform(), color=PALETTE["ember"], fontsize=9, va="top",
                ha="left" if left else "right")
        ax.set_xlim(lo, hi)
        ax.set_ylim(0, np.max(b) / 10.0**k * 1.67)
        if log_x:
            from matplotlib.ticker import LogLocator, NullFormatter, ScalarFormatter

            ax.set_xscale("log")
            ax.xaxis.set_major_locator(LogLocator(subs=(1.0, 2.0, 5.0)))
            ax.xaxis.set_major_formatter(ScalarFormatter())
            ax.xaxis.set_minor_formatter(NullFormatter())
        ax.set_xlabel("wavelength λ (nm)")
        ax.set_ylabel(f"spectral radiance B$_λ$ (10$^{{{k}}}$ W m$^{{-2}}$ nm$^{{-1}}$ sr$^{{-1}}$)")
        n_txt = f"{len(pbs)} passband" + ("" if len(pbs) == 1 else "s")
        red_txt = f"reddened by E(B−V) = {ebv:.3g} mag" if reddened else "unreddened"
        ax.set_title(f"Blackbody at T = {t:,.0f} K ({red_txt}) under {n_txt}")
        ax.grid(True, alpha=0.8)
    return fig


def plot_spectrum_with_passbands(temperature_k, bands, path, replace=False, ebv=0.0, law="G23", rv=3.1):
    """Write `spectrum_figure` to ``path``; return the path."""
    return _save(spectrum_figure(temperature_k, bands, ebv=ebv, law=law, rv=rv), path, replace)


# -------------------------------------------------------- colour–temperature
def colour_temperature_figure(bands, ebv=0.0, law="G23", rv=3.1, calibrations=True,
                              tmin=2500.0, tmax=40000.0):
    """Colours of adjacent passbands against temperature for blackbodies.

    Where an empirical relation exists for a colour
    (:func:`stelltemp.calibrations.relations`), it is drawn at [Fe/H] = 0
    over its published colour range, as T_eff against the dereddened
    colour.

    Parameters
    ----------
    bands : sequence of str
        Two or more passband keys; colours are ``bands[i] − bands[i+1]``.
    ebv : float
        E(B−V) of the blackbodies, mag (0: unreddened).
    law, rv : str, float
        Extinction law and R_V (see :mod:`stelltemp.extinction`).
    calibrations : bool
        Draw the calibrated relations too.
    tmin, tmax : float
        Temperature range, K (within 1,000–100,000 K).

    Returns
    -------
    matplotlib.figure.Figure
    """
    from matplotlib.lines import Line2D

    from . import bandgrid as bg

    pbs = _keys(bands, 2)
    if not (bg.T_MIN <= tmin < tmax <= bg.T_MAX):
        raise StelltempError(f"temperatures must satisfy {bg.T_MIN:g} <= tmin < tmax <= {bg.T_MAX:g} K")
    if not (bg.E_MIN <= ebv <= bg.E_MAX):
        raise StelltempError(f"E(B-V) must lie in {bg.E_MIN:g}–{bg.E_MAX:g} mag")
    t = np.geomspace(tmin, tmax, 400)
    pairs = list(zip(pbs[:-1], pbs[1:]))
    rels = []
    if calibrations:
        from .calibrations import DEFAULT_FEH, relations

        # drawn at solar [Fe/H]; relations whose formula needs log g have no single curve
        rels = [r for r in relations() if r.feh_range[0] <= DEFAULT_FEH <= r.feh_range[1] and not r.needs_logg]

    fig = _new_figure(8.0, 5.2)
    used_rels, stages = [], set()
    with _styled():
        ax = fig.add_subplot(111)
        for (blue, red), col in zip(pairs, _ramp(SERIES, len(pairs)) if len(pairs) > len(SERIES)
                                    else [_colour(c) for c in SERIES[:len(pairs)]]):
            name = f"{blue.key} − {red.key}"
            c = bg.blackbody_mag(blue, t, ebv, law, rv) - bg.blackbody_mag(red, t, ebv, law, rv)
            ax.plot(t, c, color=col, lw=2.0, label=name, gid=f"blackbody:{blue.key}-{red.key}")
            if ebv != 0:
                c0 = bg.blackbody_mag(blue, t, 0.0, law, rv) - bg.blackbody_mag(red, t, 0.0, law, rv)
                ax.plot(t, c0, color=col, lw=1.0, ls=":", gid=f"blackbody-unreddened:{blue.key}-{red.key}")
            for rel in rels:
                if rel.bands != (blue.key, red.key):
                    continue
                x = np.linspace(*rel.colour_range, 200)
                teff, inside = rel.teff(x, DEFAULT_FEH)
                ax.plot(teff[inside], x[inside], color=col, lw=1.6, ls="--" if rel.stage == "dwarf" else "-.",
                        gid=f"calibration:{rel.key}")
                used_rels.append(rel)
                stages.add(rel.stage)
        ax.set_xscale("log")
        ax.set_xlim(tmin, tmax)
        _temperature_ticks(ax.xaxis, tmin, tmax)
        ax.set_xlabel("temperature (K)")
        ax.set_ylabel("colour index (mag)")
        red_txt = f"E(B−V) = {ebv:g} mag ({law}, R$_V$ = {rv:g})" if ebv else "no reddening"
        ax.set_title(f"Colour against temperature: blackbodies, {red_txt}")
        ax.grid(True, which="both", alpha=0.8)
        first = ax.legend(loc="upper right", title="colour")
        ax.add_artist(first)
        styles = [Line2D([], [], color=PALETTE["ink"], lw=2.0,
                         label="blackbody" + (f", E(B−V) = {ebv:g}" if ebv else ""))]
        if ebv:
            styles.append(Line2D([], [], color=PALETTE["ink"], lw=1.0, ls=":", label="blackbody, no reddening"))
        if "dwarf" in stages:
            styles.append(Line2D([], [], color=PALETTE["ink"], lw=1.6, ls="--",
                                 label="calibrated T$_{eff}$, dwarfs, [Fe/H] = 0 (dereddened colour)"))
        if "giant" in stages:
            styles.append(Line2D([], [], color=PALETTE["ink"], lw=1.6, ls="-.",
                                 label="calibrated T$_{eff}$, giants, [Fe/H] = 0 (dereddened colour)"))
        ax.legend(handles=styles, loc="lower left")
        if used_rels:
            cites = sorted({str(r.citation) for r in used_rels})
            fig.text(0.01, 0.0, "Calibrations: " + "; ".join(cites), fontsize=7.5, color=PALETTE["slate"],
                     ha="left", va="bottom")
            fig.get_layout_engine().set(rect=(0, 0.035, 1, 0.965))
    return fig


def plot_colour_temperature(bands, path, ebv=0.0, law="G23", rv=3.1, calibrations=True, replace=False,
                            tmin=2500.0, tmax=40000.0):
    """Write `colour_temperature_figure` to ``path``; return the path."""
    return _save(colour_temperature_figure(bands, ebv=ebv, law=law, rv=rv, calibrations=calibrations,
                                           tmin=tmin, tmax=tmax), path, replace)


# ------------------------------------------------------------------ star fit
def _scalar(value, unit=None):
    """Plain float of a table cell (Quantity, masked or number); NaN when missing."""
    if np.ma.is_masked(value):
        return math.nan
    if hasattr(value, "unit") and unit is not None and value.unit is not None:
        return float(value.to_value(unit))
    return float(getattr(value, "value", value))


def star_fit_figure(table, typed_mags, law="G23", rv=3.1):
    """Observed magnitudes against pivot wavelength with the fitted reddened blackbody.

    Parameters
    ----------
    table : astropy.table.QTable
        Engine result (:func:`stelltemp.engine.estimate`) for one star; its
        first row is drawn (``t_bb``, ``theta``, ``ebv_used``, errors, χ²).
    typed_mags : list of (str, float, float or None)
        (passband key, magnitude, 1σ error or None) for each band.
    law, rv : str, float
        Extinction law and R_V used in the fit.

    Returns
    -------
    matplotlib.figure.Figure
    """
    from astropy import units as u

    from . import bandgrid as bg
    from .engine import DEFAULT_MAG_ERR
    from .passbands import get_passband

    if len(table) < 1:
        raise StelltempError("the result table has no rows")
    row = table[0]
    t = _scalar(row["t_bb"], u.K)
    theta = _scalar(row["theta"], u.mas)
    ebv = _scalar(row["ebv_used"], u.mag)
    pts = []
    for key, mag, err in typed_mags:
        if mag is None or not math.isfinite(float(mag)):
            continue
        pb = get_passband(key)
        pts.append((pb.pivot_wavelength.to_value(u.nm), pb.key, float(mag),
                    DEFAULT_MAG_ERR if err is None else float(err), err is None))
    if not pts:
        raise StelltempError("no finite magnitudes to draw")
    pts.sort()
    wave = np.array([p[0] for p in pts])
    mags = np.array([p[2] for p in pts])
    errs = np.array([p[3] for p in pts])
    have_fit = math.isfinite(t) and math.isfinite(theta) and math.isfinite(ebv)
    model = np.full(len(pts), np.nan)
    if have_fit:
        model = np.array([float(bg.blackbody_mag(p[1], t, ebv, law, rv, theta / MAS_PER_RAD)) for p in pts])

    fig = _new_figure(7.6, 6.0)
    with _styled():
        gs = fig.add_gridspec(2, 1, height_ratios=(3, 1.3))
        ax = fig.add_subplot(gs[0])
        res = fig.add_subplot(gs[1], sharex=ax)
        ax.errorbar(wave, mags, yerr=errs, fmt="o", color=PALETTE["harbour"], ms=6, capsize=3,
                    label="observed (1σ)", gid="observed", zorder=3)
        above, last_w = False, None
        for w, key, m in zip(wave, (p[1] for p in pts), mags):
            # close neighbours take turns above and below their points so labels do not collide
            above = not above if last_w is not None and math.log10(w / last_w) < 0.08 else True
            last_w = w
            ax.annotate(key, (w, m), xytext=(0, 13 if above else -13), textcoords="offset points", ha="center",
                        va="bottom" if above else "top", fontsize=8.5, color=PALETTE["slate"])
        if have_fit:
            ax.plot(wave, model, "s--", color=PALETTE["ember"], mfc="none", ms=8, lw=1.0,
                    label="fitted reddened blackbody, through each passband", gid="model")
            res.errorbar(wave, mags - model, yerr=errs, fmt="o", color=PALETTE["harbour"], ms=5, capsize=3,
                         gid="residuals")
            span = np.nanmax(np.abs(mags - model) + errs)
            res.set_ylim(-1.25 * span, 1.25 * span)
        else:
            res.text(0.5, 0.5, "no fit: the engine returned no temperature", transform=res.transAxes,
                     ha="center", va="center", color=PALETTE["ember"])
        res.axhline(0.0, color=PALETTE["ink"], lw=0.8)
        ax.margins(y=0.14)
        ax.invert_yaxis()
        ax.set_xscale("log")
        from matplotlib.ticker import NullFormatter, ScalarFormatter

        ticks = [t_ for t_ in (300, 400, 500, 600, 800, 1000, 1500, 2000, 3000, 5000)
                 if wave.min() * 0.8 <= t_ <= wave.max() * 1.25]
        res.set_xticks(ticks)
        res.xaxis.set_major_formatter(ScalarFormatter())
        res.xaxis.set_minor_formatter(NullFormatter())
        ax.set_xlim(wave.min() * 0.85, wave.max() * 1.18)
        ax.tick_params(labelbottom=False)
        ax.set_ylabel("magnitude (each band's own system)")
        res.set_ylabel("observed − model\n(mag)")
        res.set_xlabel("pivot wavelength (nm)")
        ax.grid(True, which="both", alpha=0.8)
        res.grid(True, which="both", alpha=0.8)
        ax.legend(loc="best")
        if have_fit:
            t_err = _scalar(row["t_bb_err"], u.K) if "t_bb_err" in row.colnames else math.nan
            chi2 = _scalar(row["chi2"]) if "chi2" in row.colnames else math.nan
            dof = int(row["dof"]) if "dof" in row.colnames else 0
            t_txt = f"T$_{{bb}}$ = {t:,.0f} ± {t_err:,.0f} K" if math.isfinite(t_err) else f"T$_{{bb}}$ = {t:,.0f} K"
            fit_txt = f", χ² = {chi2:.1f} for {dof} d.o.f." if math.isfinite(chi2) and dof > 0 else ""
            ax.set_title(f"Blackbody fit: {t_txt}, θ = {theta:.4g} mas\n"
                         f"E(B−V) = {ebv:.3f} mag ({law}, R$_V$ = {rv:g}){fit_txt}", fontsize=10.5)
        else:
            ax.set_title("observed magnitudes (no temperature)")
        if any(p[4] for p in pts):
            fig.text(0.01, 0.0, f"bands without a given error drawn with the engine's default {DEFAULT_MAG_ERR} mag",
                     fontsize=7.5, color=PALETTE["slate"], ha="left", va="bottom")
            fig.get_layout_engine().set(rect=(0, 0.03, 1, 0.97))
    return fig


def plot_star_fit(table, typed_mags, path, law="G23", rv=3.1, replace=False):
    """Write `star_fit_figure` to ``path``; return the path."""
    return _save(star_fit_figure(table, typed_mags, law=law, rv=rv), path, replace)


# ------------------------------------------------------------ catalogue run
#: colours tried in turn for the catalogue diagram
PREFERRED_COLOURS = (("B_JC", "V_JC"), ("BP_GDR3", "RP_GDR3"), ("g_SDSS", "r_SDSS"), ("V_JC", "Ks_2MASS"),
                     ("J_2MASS", "Ks_2MASS"))


def _column_values(table, name, unit=None):
    col = table[name]
    if unit is not None and getattr(col, "unit", None) is not None:
        try:
            col = col.to(unit)
        except Exception:  # a dimensionless or foreign unit: take the numbers as they are
            pass
    data = getattr(col, "value", col)
    return np.ma.filled(np.ma.asarray(data, dtype=float), np.nan)


def _pick_colour(table, colour):
    if colour is not None:
        if isinstance(colour, str):
            parts = colour.split("-", 1) if colour.count("-") == 1 else colour.split(",")
            colour = tuple(p.strip() for p in parts)
        if len(colour) != 2 or any(c not in table.colnames for c in colour):
            raise StelltempError(f"colour {colour!r}: need two magnitude columns of the table")
        return tuple(colour)
    for pair in PREFERRED_COLOURS:
        if all(c in table.colnames for c in pair):
            return pair
    from .catalog.mapping import default_mapping

    keys = list(default_mapping(table.colnames).bands)
    if len(keys) < 2:
        raise StelltempError("the table has fewer than two magnitude columns to make a colour")
    from .passbands import get_passband

    keys.sort(key=lambda k: get_passband(k).pivot_wavelength.value)
    return keys[0], keys[-1]


def catalogue_figure(results, colour=None, law="G23", rv=3.1):
    """Colour temperature against an observed colour for every row of a catalogue run.

    Parameters
    ----------
    results : astropy Table or QTable
        Output of a catalogue run (input columns plus ``t_bb``, ``t_bb_lo``,
        ``t_bb_hi``, ``flags``, ``ebv_used``); magnitude columns named by
        passband key with ``_err`` errors (the default naming of
        :mod:`stelltemp.catalog.mapping`).
    colour : (str, str) or str, optional
        Passband keys (blue, red) of the colour; default B−V, BP−RP, g−r,
        V−Ks or J−Ks, whichever the table has first.
    law, rv : str, float
        Extinction law and R_V of the blackbody reference curves.

    Returns
    -------
    matplotlib.figure.Figure
        Stars coloured by the E(B−V) used (one colour and no colour bar
        when every star has the same); rings mark the stars by the
        severity of their worst flag (`stelltemp.engine.flags.SEVERITY`):
        warning and unusable are ringed, info (notes only) is not.
        Blackbody reference curves at E(B−V) = 0 and at the percentiles of
        the stars' E(B−V) (`_ebv_levels`), coloured as the stars.  The title
        counts the stars with a temperature as the run does
        (`stelltemp.catalog.batch.success_mask`); rows without one, or
        without the colour, are named in a note.
    """
    from astropy import units as u
    from matplotlib.lines import Line2D

    from . import bandgrid as bg

    for need in ("t_bb", "t_bb_lo", "t_bb_hi"):
        if need not in results.colnames:
            raise StelltempError(f"the results table has no '{need}' column (is it a catalogue run output?)")
    from .catalog.hygiene import LIMITS

    blue, red = _pick_colour(results, colour)
    phot = {}
    for c in (blue, red):  # sentinels such as 99.999 and absurd errors are not photometry
        m = _column_values(results, c)
        e = _column_values(results, c + "_err") if c + "_err" in results.colnames else np.zeros(len(results))
        with np.errstate(invalid="ignore"):
            bad = (m < LIMITS["mag"][0]) | (m > LIMITS["mag"][1]) | (e < LIMITS["err"][0]) | (e > LIMITS["err"][1])
        phot[c] = (np.where(bad, np.nan, m), np.where(bad, np.nan, np.nan_to_num(e)))
    x = phot[blue][0] - phot[red][0]
    ex = np.hypot(phot[blue][1], phot[red][1])
    t = _column_values(results, "t_bb", u.K)
    lo = _column_values(results, "t_bb_lo", u.K)
    hi = _column_values(results, "t_bb_hi", u.K)
    flags = (np.asarray(results["flags"], dtype=np.int64) if "flags" in results.colnames
             else np.zeros(len(results), np.int64))
    ebv_name = "ebv_used" if "ebv_used" in results.colnames else ("ebv" if "ebv" in results.colnames else None)
    ebv = _column_values(results, ebv_name, u.mag) if ebv_name else np.zeros(len(results))
    ok = np.isfinite(t) & np.isfinite(x)
    from .catalog.batch import success_mask
    from .engine import flags as fl

    if any(getattr(results[c], "unit", None) == u.K for c in results.colnames):
        n_temperature = int(np.count_nonzero(success_mask(results)))  # as the run reports it
    else:  # a table read without its units: the same rule on the temperature columns by name
        n_temperature = int(np.count_nonzero(np.isfinite(t) | (np.isfinite(_column_values(results, "teff_cal"))
                                                               if "teff_cal" in results.colnames else False)))
    level = fl.row_severity(flags, np.isfinite(t))
    missing = ~np.isfinite(t)
    no_colour = np.isfinite(t) & ~np.isfinite(x)
    finite_e = ebv[ok & np.isfinite(ebv)]
    spread_e = finite_e.size and (np.nanmax(finite_e) - np.nanmin(finite_e)) > 1e-6
    levels_e = _ebv_levels(finite_e)

    t_floor, t_ceil = bg.T_MIN, bg.T_MAX
    if ok.any():
        t_floor = max(bg.T_MIN, 10 ** (np.floor(np.log10(np.nanmin(t[ok]) / 1.25) * 10) / 10))
        t_ceil = min(bg.T_MAX, 10 ** (np.ceil(np.log10(np.nanmax(t[ok]) * 1.35) * 10) / 10))
    err_lo = np.clip(t - lo, 0, None)
    err_hi = np.where(np.isfinite(hi), hi - t, t_ceil * 10 - t)  # open upper limits run off the top

    fig = _new_figure(8.4, 5.8)
    with _styled():
        from matplotlib.colors import Normalize

        ax = fig.add_subplot(111)
        grid_t = np.geomspace(t_floor, t_ceil, 300)
        cmap = _value_cmap()
        norm = Normalize(np.nanmin(finite_e), np.nanmax(finite_e)) if spread_e else None
        for i, (e_ref, why) in enumerate(levels_e):
            curve = bg.blackbody_mag(blue, grid_t, e_ref, law, rv) - bg.blackbody_mag(red, grid_t, e_ref, law, rv)
            colour = cmap(norm(e_ref)) if norm is not None and e_ref else PALETTE["ink"]
            ax.plot(curve, grid_t, color=colour, lw=1.5, ls=("-", "--", "-.", ":")[i % 4], gid=f"blackbody-{e_ref:g}",
                    label=f"blackbody, E(B−V) = {e_ref:.2f}" + (f" ({why})" if why else ""))
        ax.errorbar(x[ok], t[ok], xerr=ex[ok], yerr=[err_lo[ok], err_hi[ok]], fmt="none",
                    ecolor=PALETTE["slate"], elinewidth=0.8, alpha=0.7, capsize=0, zorder=2)
        if spread_e:
            sc = ax.scatter(x[ok], t[ok], c=ebv[ok], cmap=cmap, norm=norm, s=36, edgecolors=PALETTE["ink"],
                            linewidths=0.5, zorder=3, gid="stars")
            cb = fig.colorbar(sc, ax=ax, pad=0.01)
            cb.set_label(f"E(B−V) {'used' if ebv_name == 'ebv_used' else 'given'} (mag)")
        else:  # one E(B-V) for every star: no colour bar, the value goes in the legend
            ax.scatter(x[ok], t[ok], color=PALETTE["harbour"], s=36, edgecolors=PALETTE["ink"], linewidths=0.5,
                       zorder=3, gid="stars")
        rings = {}
        for sev, colour, lw, size in ((fl.WARNING, _colour("ember"), 1.6, 150), (fl.UNUSABLE, _colour("rust"), 2.4, 230)):
            sel = ok & (level == sev)
            rings[sev] = int(np.count_nonzero(sel))
            if rings[sev]:
                ax.scatter(x[sel], t[sel], s=size, facecolors="none", edgecolors=colour, linewidths=lw, zorder=4,
                           gid=f"flagged-{fl.LEVELS[sev]}")
        ax.set_yscale("log")
        ax.set_ylim(t_floor, t_ceil)
        _temperature_ticks(ax.yaxis, t_floor, t_ceil, at_most=14)
        if ok.any():
            span = np.nanmax(x[ok]) - np.nanmin(x[ok])
            ax.set_xlim(np.nanmin(x[ok]) - 0.08 * span - 0.05, np.nanmax(x[ok]) + 0.08 * span + 0.05)
        ax.set_xlabel(f"{blue} − {red} (mag, observed)")
        ax.set_ylabel("blackbody colour temperature T$_{bb}$ (K)")
        drawn = int(ok.sum())
        ax.set_title(f"Catalogue run: {n_temperature} of {len(results)} stars with a temperature"
                     + (f", {drawn} drawn against {blue} − {red}" if drawn != n_temperature
                        else f", against {blue} − {red}"))
        ax.grid(True, which="both", alpha=0.8)
        handles, labels = ax.get_legend_handles_labels()
        if spread_e:
            star_label = "star (colour: E(B−V)); bars: 1σ"
        else:
            one_e = float(finite_e[0]) if finite_e.size else 0.0
            star_label = f"star (E(B−V) = {one_e:g} for every star); bars: 1σ"
        handles.append(Line2D([], [], ls="none", marker="o", ms=6, mfc=_colour("brass") if spread_e
                              else PALETTE["harbour"], mec=PALETTE["ink"], label=star_label))
        if rings[fl.WARNING]:
            handles.append(Line2D([], [], ls="none", marker="o", ms=11, mfc="none", mec=_colour("ember"), mew=1.6,
                                  label=f"ringed: a warning flag ({rings[fl.WARNING]})"))
        if rings[fl.UNUSABLE]:
            handles.append(Line2D([], [], ls="none", marker="o", ms=13, mfc="none", mec=_colour("rust"), mew=2.4,
                                  label=f"ringed: unusable ({rings[fl.UNUSABLE]})"))
        n_info = int(np.count_nonzero(ok & (level == fl.INFO)))
        if n_info:
            handles.append(Line2D([], [], ls="none", label=f"not ringed: {n_info} with notes only (severity info)"))
        ax.legend(handles=handles, loc="upper right")
        notes = []
        for mask, what in ((missing, "without a temperature (flagged)"),
                           (no_colour, f"with a temperature but no usable {blue} − {red}, not drawn")):
            if mask.any():
                names = results["name"][mask] if "name" in results.colnames else np.nonzero(mask)[0]
                shown = ", ".join(str(n) for n in list(names)[:5]) + (" …" if mask.sum() > 5 else "")
                notes.append(f"{int(mask.sum())} row(s) {what}: {shown}")
        if notes:
            ax.text(0.01, 0.02, "\n".join(notes), transform=ax.transAxes, fontsize=8.5, color=PALETTE["rust"],
                    va="bottom")
    return fig


def _ebv_levels(ebv):
    """E(B−V) values of the catalogue diagram's reference curves, each with why it was chosen.

    E(B−V) = 0 always; then the median, 10th and 90th percentiles of the
    stars' values (each the value of an actual star, not interpolated
    between groups), each kept only when it differs by more than 0.03 mag
    from one already taken, so a cluster away from the median gets its own
    curve.

    Examples
    --------
    >>> _ebv_levels(np.zeros(5))
    [(0.0, '')]
    >>> [round(e, 2) for e, _ in _ebv_levels(np.r_[np.full(10, 0.05), np.full(20, 0.25)])]
    [0.0, 0.05, 0.25]
    """
    out = [(0.0, "")]
    if not np.size(ebv):
        return out
    for q, why in ((50, "median of the stars"), (10, "10th percentile"), (90, "90th percentile")):
        e = round(float(np.percentile(ebv, q, method="nearest")), 2)  # a value some star has
        if all(abs(e - e0) > 0.03 for e0, _ in out):
            out.append((e, why))
    return sorted(out)


def plot_catalogue_results(results_table, path, colour=None, law="G23", rv=3.1, replace=False):
    """Write `catalogue_figure` to ``path``; return the path."""
    return _save(catalogue_figure(results_table, colour=colour, law=law, rv=rv), path, replace)
