"""Figure of a transformation fit: residuals against colour and airmass."""

from __future__ import annotations

import numpy as np

from ..plots import PALETTE, _new_figure, _save, _styled

__all__ = ["plot_fit_residuals"]


def plot_fit_residuals(transformation, path, replace=False, predictions=None):
    """Residuals (observed − fitted instrumental magnitude, mag) of every filter.

    One row per filter: against the standard colour (left) and the airmass
    (right).  Kept measurements are dots with their effective 1σ error,
    rejected ones open crosses; the band shows ± the rms.  With
    ``predictions`` (from :func:`stelltemp.reduction.predict.predict_colour_terms`)
    the left panels also show the predicted minus fitted colour term as a
    line through zero (the slope of the disagreement).

    Returns
    -------
    str
        The path written (atomically; an existing file only with ``replace``).
    """
    fits = [f for f in transformation.fits.values() if f.points["star"].size and "residual" in f.points]
    n = max(len(fits), 1)
    with _styled():
        fig = _new_figure(9.0, 2.3 * n + 0.6)
        axes = fig.subplots(n, 2, squeeze=False, sharey="row")
        for row, fit in zip(axes, fits):
            p = fit.points
            kept = p["kept"] & np.isfinite(p["residual"])
            out = ~p["kept"] & np.isfinite(p["residual"])
            for ax, key, label in ((row[0], "colour", f"standard {fit.setup.colour_name} (mag)"),
                                   (row[1], "airmass", "airmass X")):
                ax.axhspan(-fit.rms, fit.rms, color=PALETTE["fog"], zorder=0)
                ax.axhline(0.0, color=PALETTE["ink"], lw=0.8)
                ax.errorbar(p[key][kept], p["residual"][kept], yerr=p["sigma"][kept], fmt="o", ms=3.5,
                            color=PALETTE["harbour"], ecolor=PALETTE["slate"], elinewidth=0.7, label="kept")
                if np.any(out):
                    ax.plot(p[key][out], p["residual"][out], "x", ms=6, color=PALETTE["ember"], label="rejected")
                ax.set_xlabel(label)
                ax.grid(True)
            pred = (predictions or {}).get(fit.setup.filter)
            if pred is not None and np.any(kept):
                c = np.linspace(np.nanmin(p["colour"][kept]), np.nanmax(p["colour"][kept]), 2)
                d = pred.coefficients["colour_term"] - fit.coefficient("colour_term")
                row[0].plot(c, d * (c - c.mean()), "--", color=PALETTE["heather"], lw=1.2,
                            label=f"predicted − fitted colour term ({d:+.3f})")
            row[0].set_ylabel(f"{fit.setup.filter}: residual (mag)")
            row[0].set_title(f"{fit.setup.filter} → {fit.setup.band}: c = {fit.coefficient('colour_term'):+.3f}, "
                             f"rms {fit.rms * 1000:.0f} mmag, {fit.n_used} kept", fontsize=9.5, loc="left")
            k = fit.coefficient("extinction")
            row[1].set_title(f"k' = {k:.3f} mag/airmass", fontsize=9.5, loc="left")
            row[0].legend(loc="upper left", fontsize=8)
        fig.suptitle("Transformation fit: residuals of the standard stars")
    return _save(fig, path, replace)
