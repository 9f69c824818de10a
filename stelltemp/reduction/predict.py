"""Colour terms predicted from the instrument's own passbands.

The natural passband of a filter is what the instrument file describes
(filter × mirrors × other optics × detector QE,
:func:`stelltemp.observing.counts.system_efficiency`) times the atmosphere
at airmass X (:class:`stelltemp.reduction.atmosphere.Atmosphere`).  Through
it, the instrumental magnitude of a star is m = −2.5 log10(electrons per
second); through the standard passbands it has standard magnitudes M.
Computing both for reddened blackbodies over a grid of temperatures,
reddenings and airmasses, and fitting the transformation equation
(:mod:`stelltemp.reduction.equations`) to m − M, gives the coefficients the
instrument should show (synthetic photometry, as in e.g. Bessell 1990,
PASP 102, 1181, on matching filters to a standard system): the colour term
and the second-order extinction are properties of the passbands, the zero
point of the collecting area and throughput (for magnitudes in e⁻ s⁻¹;
for ADU s⁻¹ add 2.5 log10(gain)).

Real stars are not blackbodies: the Balmer jump and lines change B and U
colour terms for A–F stars by a few hundredths, so the prediction is a
check and a prior, not a replacement for standards.  The non-linearity
reported is how far m − M departs from the fitted straight line over the
colour range (maximum and rms, mag), and the local slope along the
unreddened sequence.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..bandgrid import blackbody_mag
from ..errors import StelltempError
from ..extinction import DEFAULT_LAW, DEFAULT_RV, transmission
from ..planck import planck_lambda_cgs
from .atmosphere import Atmosphere
from .equations import BandSetup, design_matrix, parameter_names
from .wls import solve

__all__ = ["ColourTermPrediction", "natural_magnitudes", "predict_colour_terms", "DEFAULT_TEMPERATURES_K"]

#: blackbody temperatures spanning the usual stellar colours (K)
DEFAULT_TEMPERATURES_K = tuple(np.geomspace(3500.0, 20000.0, 25).round(1))
DEFAULT_EBV = (0.0, 0.25, 0.5)
DEFAULT_AIRMASSES = (1.0, 1.5, 2.0)


@dataclass
class ColourTermPrediction:
    """Predicted transformation of one filter.

    Attributes
    ----------
    setup : BandSetup
    coefficients : dict
        ``zero_point`` (for m in e⁻ s⁻¹), ``extinction``, ``colour_term`` and
        (when the setup has it) ``colour_extinction``, from all grid points.
    colour_range : tuple
        Smallest and largest standard colour of the grid (mag).
    nonlinearity_max, nonlinearity_rms : float
        Largest and rms departure of m − M from the fitted equation (mag).
    curvature : float
        q of a quadratic q C² added at the zenith (mag per mag²).
    local_slopes : list of (colour, slope)
        d(m − M)/dC along the unreddened sequence at X = 1.
    grid : dict
        ``temperature``, ``ebv``, ``airmass``, ``colour``, ``y`` (m − M) arrays.
    """

    setup: BandSetup
    coefficients: dict
    colour_range: tuple
    nonlinearity_max: float
    nonlinearity_rms: float
    curvature: float
    local_slopes: list
    grid: dict = field(repr=False)
    notes: list = field(default_factory=list)

    def summary(self):
        return {"filter": self.setup.filter, "band": self.setup.band, "colour": self.setup.colour_name,
                "coefficients": {k: float(v) for k, v in self.coefficients.items()},
                "colour_range_mag": [float(c) for c in self.colour_range],
                "nonlinearity_max_mag": self.nonlinearity_max, "nonlinearity_rms_mag": self.nonlinearity_rms,
                "curvature_mag_per_mag2": self.curvature,
                "local_slopes": [[float(c), float(s)] for c, s in self.local_slopes], "notes": list(self.notes)}

    def prior(self, sigma=None):
        """(value, σ) of the colour term for :func:`stelltemp.reduction.fit.fit_filter`.

        σ defaults to the larger of 0.01 and the spread of the local slopes
        over the colour range (the straight line cannot be better than that).
        """
        if sigma is None:
            slopes = np.array([s for _, s in self.local_slopes])
            sigma = max(0.01, float(np.ptp(slopes)) / 2 if slopes.size else 0.0)
        return float(self.coefficients["colour_term"]), float(sigma)


def natural_magnitudes(instrument, filter_name, temperature_k, ebv=0.0, airmass=1.0, atmosphere=None,
                       law=DEFAULT_LAW, rv=DEFAULT_RV):
    """−2.5 log10(e⁻ s⁻¹) of reddened blackbodies of unit solid angle through a filter.

    Parameters
    ----------
    instrument : stelltemp.observing.instrument.Instrument
    filter_name : str
    temperature_k, ebv, airmass : array_like
        Outer product: the result has shape (nT, nE, nX).
    atmosphere : Atmosphere, optional
        Default: the model at the instrument's site elevation.

    Returns
    -------
    ndarray (nT, nE, nX)
    """
    from ..observing.counts import band_grid, photon_integral, system_efficiency

    atm = atmosphere or Atmosphere(instrument.site.elevation_m)
    spec = instrument.filter(filter_name)
    grid = band_grid(spec.passband, [instrument.camera.qe.wave])
    eff = system_efficiency(instrument, filter_name, grid)
    t = np.atleast_1d(np.asarray(temperature_k, float))
    e = np.atleast_1d(np.asarray(ebv, float))
    x = np.atleast_1d(np.asarray(airmass, float))
    star = planck_lambda_cgs(t[:, None, None, None], grid) * transmission(grid, e, law, rv)[None, :, None, :]
    rate = photon_integral(grid, star * atm.transmission(grid, x)[None, None], eff)
    rate = rate * instrument.telescope.collecting_area_cm2
    with np.errstate(divide="ignore"):
        return -2.5 * np.log10(rate)


def predict_colour_terms(instrument, setups, temperatures_k=DEFAULT_TEMPERATURES_K, ebvs=DEFAULT_EBV,
                         airmasses=DEFAULT_AIRMASSES, atmosphere=None, law=DEFAULT_LAW, rv=DEFAULT_RV):
    """Predicted coefficients of every filter in ``setups`` from synthetic photometry.

    Parameters
    ----------
    instrument : Instrument
        Filters named in ``setups`` must exist in it.
    setups : list of BandSetup
    temperatures_k, ebvs, airmasses : sequences
        The grid of blackbody temperatures (K), E(B−V) (mag) and airmasses.
    atmosphere : Atmosphere, optional
    law, rv : extinction law and R_V of the reddening

    Returns
    -------
    dict
        Filter name → :class:`ColourTermPrediction`.
    """
    t = np.asarray(temperatures_k, float)
    e = np.asarray(ebvs, float)
    x = np.asarray(airmasses, float)
    if t.size < 4 or np.any(~np.isfinite(t)) or np.any(t <= 0):
        raise StelltempError("need at least four positive temperatures for a colour-term prediction")
    if np.any(x < 0):
        raise StelltempError("airmasses must be >= 0")
    atm = atmosphere or Atmosphere(instrument.site.elevation_m)
    std = {}

    def standard(key):
        if key not in std:
            std[key] = blackbody_mag(key, t[:, None], e[None, :], law, rv)  # (nT, nE)
        return std[key]

    out = {}
    for s in setups:
        m = natural_magnitudes(instrument, s.filter, t, e, x, atm, law, rv)
        colour = standard(s.colour[0]) - standard(s.colour[1])
        y = m - standard(s.band)[..., None]
        cc = np.broadcast_to(colour[..., None], y.shape)
        xx = np.broadcast_to(x, y.shape)
        design = design_matrix(xx.ravel(), cc.ravel(), s.second_order)
        var = np.ones(y.size)
        beta = solve(design, y.ravel(), var, np.ones(y.size, bool))[0]
        resid = y.ravel() - design @ beta
        notes = []
        if x.size < 2:
            notes.append("one airmass: extinction and zero point are not separable (extinction set by the model)")
        # curvature and local slopes at the first airmass (the zenith by default), unreddened sequence
        c0, y0 = colour[:, 0], y[:, 0, 0]
        order = np.argsort(c0)
        c0, y0 = c0[order], y0[order]
        q = float(np.polyfit(c0, y0, 2)[0])
        mid = 0.5 * (c0[1:] + c0[:-1])
        slopes = np.diff(y0) / np.diff(c0)
        pick = np.linspace(0, mid.size - 1, min(6, mid.size)).round().astype(int)
        coeffs = dict(zip(parameter_names(s), beta))
        out[s.filter] = ColourTermPrediction(
            s, coeffs, (float(colour.min()), float(colour.max())), float(np.max(np.abs(resid))),
            float(np.sqrt(np.mean(resid**2))), q, [(float(mid[i]), float(slopes[i])) for i in pick],
            {"temperature": t, "ebv": e, "airmass": x, "colour": colour, "y": y},
            notes + [f"blackbody spectra, {law} reddening R_V={rv:g}, atmosphere: {atm.describe()}"])
    return out


def compare_with_prediction(transformation, predictions):
    """Fitted against predicted colour terms (and second-order extinction), per filter.

    Returns
    -------
    list of dict
        ``filter``, ``coefficient``, ``fitted``, ``error``, ``predicted``,
        ``difference_sigma`` ((fitted − predicted) / fitted error).
    """
    rows = []
    for name, fit in transformation.fits.items():
        pred = predictions.get(name)
        if pred is None:
            continue
        for k in ("colour_term", "colour_extinction"):
            if k in fit.names and k in pred.coefficients:
                i = fit.names.index(k)
                v, err = float(fit.values[i]), float(fit.errors[i])
                p = float(pred.coefficients[k])
                rows.append({"filter": name, "coefficient": k, "fitted": v, "error": err, "predicted": p,
                             "difference_sigma": (v - p) / err if err > 0 else float("nan")})
    return rows
