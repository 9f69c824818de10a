"""Temperatures of stars from their photometry.

:func:`estimate` is the engine's one entry point: magnitudes in two or more
passbands in, one row of results per star out, as an astropy QTable with
units.  It never raises for a bad star (the row comes back NaN with flags,
see :mod:`stelltemp.engine.flags`); it raises
:class:`~stelltemp.errors.StelltempError` for bad arguments.

A blackbody colour temperature is *not* an effective temperature: real
stellar spectra have absorption lines, edges and molecular bands, so the
temperature of the blackbody with the same colour differs from T_eff by
hundreds of K depending on the colour used.  The calibrated column
``teff_cal`` uses empirical colour–T_eff relations
(:mod:`stelltemp.calibrations`) and is the one to quote as T_eff.
"""

from types import SimpleNamespace

import numpy as np
from astropy import units as u
from astropy.table import QTable

from .. import bandgrid as bg
from ..calibrations import ASSUMED_STAGE, DEFAULT_FEH
from ..errors import StelltempError
from ..extinction import DEFAULT_LAW, DEFAULT_RV, check_law
from ..passbands import get_passband
from ..threads import MIN_ROWS_PER_THREAD, engine_threads, ordered_map
from ..validation import RANGES, check_memory, check_number, check_size
from . import flags as fl
from .colour import colour_interval, invert_colour
from .combine import calibrated_teff
from .derived import angular_diameter_mas, derived_quantities
from .fit import fit_blackbody
from .notes import RowNotes
from ..lazy import lazy_exports

__all__ = ["estimate", "estimate_star", "BLACKBODY_NOTE", "METHODS"]
# estimate_star (one star, with the derived quantities) lives in engine/star.py
__getattr__, __dir__ = lazy_exports(__name__, {"estimate_star": "star"})

#: the caution carried by every result: a blackbody colour temperature is not T_eff
BLACKBODY_NOTE = ("t_bb is a blackbody colour temperature, not an effective temperature; "
                  "teff_cal (empirical calibrations, inside their validity ranges) is the T_eff to quote.")
#: the values of estimate(method=…): choose per star, one colour, or the multi-band fit
METHODS = ("auto", "colour", "fit")
#: magnitudes beyond this are taken as absurd (flagged, band dropped)
ABSURD_MAG = RANGES["mag"].hi
#: a 1-sigma magnitude error above this carries no information (flagged, band dropped)
MAX_MAG_ERR = RANGES["mag_err"].hi
DEFAULT_MAG_ERR = 0.03


def _column(values, n, name, default=None, unit=u.mag):
    """A per-star input as a float array of length n (Quantities converted to ``unit``).

    A scalar is broadcast to every star; an array must have exactly n values.
    """
    if values is None:
        return None if default is None else np.full(n, float(default))
    if isinstance(values, u.Quantity):
        try:
            values = values.to_value(unit)
        except u.UnitConversionError:
            raise StelltempError(f"{name} must be in units convertible to {unit}, got {values.unit}") from None
    try:
        arr = np.asarray(values, dtype=float)
    except (TypeError, ValueError):
        raise StelltempError(f"{name} must be numeric") from None
    # only a scalar is broadcast: a length-1 array for many stars is a mistake, not a shorthand
    if arr.ndim > 1 or (arr.ndim == 1 and arr.size != n):
        values_word = "value" if arr.size == 1 else "values"
        raise StelltempError(f"{name} has {arr.size} {values_word} for {n} stars "
                             "(give one per star, or a single number for all)")
    return np.broadcast_to(arr, (n,)).astype(float)


def _clean_photometry(mags, errs, keys, n, notes=None):
    """(n, nb) arrays of magnitudes and errors with bad values removed, and flags.

    A negative error is a bad value: the band is dropped and ABSURD_VALUE set.
    A missing error becomes `DEFAULT_MAG_ERR`, an exact zero 1e-4 mag; both
    are recorded in ``notes`` (a `RowNotes`) for the rows they touch.
    """
    flags = np.zeros(n, np.int64)
    m = np.empty((n, len(keys)))
    e = np.empty((n, len(keys)))
    for b, k in enumerate(keys):
        m[:, b] = _column(mags[k], n, f"magnitudes in {k}")
        # a band without an error column: NaN here, the default below (and noted)
        e[:, b] = _column(errs.get(k), n, f"errors in {k}", np.nan)
    with np.errstate(invalid="ignore"):
        absurd = (np.abs(m) > ABSURD_MAG) | (e < 0) | (e > MAX_MAG_ERR)
        flags[np.any(absurd & np.isfinite(m), axis=1)] |= fl.ABSURD_VALUE
        m[absurd | ~np.isfinite(m)] = np.nan
        missing = ~np.isfinite(e) & np.isfinite(m)
        exact = (e == 0) & np.isfinite(m)
        e[~np.isfinite(e)] = DEFAULT_MAG_ERR
        e[e == 0] = 1e-4  # an exact magnitude: keep it, with a tiny error
    if notes is not None:
        for b, k in enumerate(keys):
            notes.add(missing[:, b], f"{k} error {DEFAULT_MAG_ERR:g} mag assumed")
            notes.add(exact[:, b], f"{k} error 0 taken as 0.0001 mag")
    return m, e, flags


#: stars per internal block of `estimate` at most: time and memory grow linearly with rows
BLOCK_ROWS = 1 << 16
#: fewest stars in a block of their own when blocks run on several threads
MIN_THREAD_BLOCK = MIN_ROWS_PER_THREAD


def _block_rows(n, threads):
    """Stars per block: at most `BLOCK_ROWS`, the blocks equal and as many as a multiple of the threads.

    Examples
    --------
    >>> _block_rows(100_000, 1), _block_rows(100_000, 2), _block_rows(200_000, 2)
    (50000, 50000, 50000)
    """
    count = -(-n // BLOCK_ROWS)
    if threads > 1:
        count = -(-count // threads) * threads
    return -(-n // count)


def _in_blocks(call, n, per_star, threads):
    """``call(**inputs)`` over row blocks of the per-star inputs, results joined into one QTable.

    Values of ``per_star`` with n entries are sliced per block; scalars (and
    dicts of them) pass whole.  The engine works row by row, so the joined
    table equals one unblocked call.  Each block is copied into columns
    allocated once and then dropped, so the memory of one block is reused
    by the next and the whole run holds one table, not the blocks and their join.
    Blocks of `_block_rows` stars run side by side on ``threads`` threads
    (each exactly as alone: the same bits for any block size and thread count).
    """
    rows = _block_rows(n, threads)

    def part(value, sl):
        if isinstance(value, dict):
            return {k: part(v, sl) for k, v in value.items()}
        return value[sl] if np.ndim(value) == 1 and np.size(value) == n else value

    def one_block(i):
        return call(**{k: part(v, slice(i, i + rows)) for k, v in per_star.items()})

    columns, first, metas = {}, None, []
    starts = range(0, n, rows)
    for i, block in zip(starts, ordered_map(one_block, starts, threads)):
        if first is None:
            first = block
        for name in first.colnames:
            values = np.asarray(getattr(block[name], "value", block[name]))
            if name not in columns:
                columns[name] = np.empty(n, values.dtype)
            elif values.dtype != columns[name].dtype:  # a block needing a wider type widens the column
                columns[name] = columns[name].astype(np.result_type(columns[name], values))
            columns[name][i:i + len(values)] = values
        metas.append(block.meta)
        del block
    table = QTable({name: u.Quantity(values, first[name].unit, copy=False)
                    if isinstance(first[name], u.Quantity) else values
                    for name, values in columns.items()}, meta=first.meta, copy=False)
    table.meta.update(_whole_table_meta(metas))
    return table


def _whole_table_meta(metas):
    """Metadata counts of a table joined from blocks: the blocks' counts added up."""
    flags, notes = {}, {}
    for meta in metas:
        for key, count in meta["flag_summary"].items():
            if key != "by_flag":
                flags[key] = flags.get(key, 0) + count
        for key, count in meta["assumptions"].items():
            notes[key] = notes.get(key, 0) + count
    by_flag = {}
    for meta in metas:
        for key, count in meta["flag_summary"]["by_flag"].items():
            by_flag[key] = by_flag.get(key, 0) + count
    flags["by_flag"] = {name: by_flag[name] for name in fl.NAMES.values() if name in by_flag}
    return {"flag_summary": flags, "assumptions": notes}


def estimate(mags, errs=None, *, ebv=0.0, ebv_err=0.0, av=None, av_err=None, rv=DEFAULT_RV,
             law=DEFAULT_LAW, fit_ebv=False, parallax=None, parallax_err=None, feh=None, logg=None,
             method="auto", monte_carlo=0, seed=None, feh_err=None, cal_ebv=False,
             cal_detail=False):
    """Temperatures, errors, flags and derived quantities for many stars.

    Parameters
    ----------
    mags : dict
        Passband key (``'B_JC'``, ``'Ks_2MASS'``, …) → magnitudes (array over
        stars, plain or a Quantity in mag; NaN = not measured).  Two bands at
        least.  For an astropy Table with catalogue column names use
        :func:`stelltemp.catalog.estimate_table`.
    errs : dict, optional
        Same keys → 1σ magnitude errors (missing or NaN: 0.03 mag).
    ebv, ebv_err : float or array
        E(B−V) (nominal, of the law) and its 1σ error, mag.
    av, av_err : float or array, optional
        A_V and its error instead of E(B−V): E(B−V) = A_V / R_V.
    rv : float
        R_V (default 3.1).
    law : str
        Extinction law: G23 (default), F99, F19, CCM89, O94.
    fit_ebv : bool
        Fit E(B−V) too (three or more bands; ``ebv``/``ebv_err`` act as a prior).
    parallax, parallax_err : float, array or Quantity, optional
        Parallax and error (plain numbers in mas), for radius and luminosity.
    feh, logg : float or array, optional
        [Fe/H] and log g for the empirical calibrations (missing: solar
        [Fe/H] and the dwarf relations, recorded in ``assumed``).
    feh_err : float or array, optional
        1σ error of [Fe/H], dex, propagated into ``teff_cal``.
    method : {'auto', 'colour', 'fit'}
        'colour': exact inversion of one colour (exactly two bands);
        'fit': multi-band fit of T and angular diameter; 'auto': colour for
        two bands, fit for more.
    monte_carlo : int
        If > 0, that many noisy realisations per star (magnitudes and a common
        E(B−V) drawn independently, so colours sharing a band stay correlated)
        give percentile intervals instead of the analytic ones.
    seed : int, optional
        Random seed for the Monte Carlo.
    cal_ebv : bool
        Fit E(B−V) from the calibrations themselves (the reddening that makes
        the colours agree), with ``ebv ± ebv_err`` as prior when ebv_err > 0;
        without a prior this needs three or more calibrated colours.  Always
        done for ``teff_cal`` when ``fit_ebv`` (the blackbody fit's E(B−V) is
        biased by the star not being a blackbody).  Gives ``ebv_cal``.
    cal_detail : bool
        Add each relation's own temperature and error as columns
        ``teff_<relation key>`` and ``teff_<relation key>_err``.

    Returns
    -------
    QTable
        One row per star; columns listed in :data:`RESULT_COLUMNS` (plus the
        per-relation columns with ``cal_detail``).  ``teff_cal`` combines the
        relations with their full covariance (:mod:`stelltemp.engine.combine`).
        Metadata: ``flag_summary`` (rows by severity and by flag) and
        ``assumptions`` (each default used, with its number of rows).
        The text columns (``flag_names``, ``teff_cal_note``) hold str
        objects (dtype object, one shared str per distinct text);
        ``.astype(str)`` makes them fixed-width, as some writers (FITS) need.

    Examples
    --------
    >>> t = estimate({"B_JC": [10.65, 9.9], "V_JC": [10.0, 9.3]}, ebv=0.05)
    >>> type(t).__name__, t["t_bb"].unit, len(t)
    ('QTable', Unit("K"), 2)

    """
    if not isinstance(mags, dict) or len(mags) < 2:
        raise StelltempError("need magnitudes in at least two passbands")
    if method not in METHODS:
        raise StelltempError(f"unknown method {method!r}; choose one of {', '.join(METHODS)}")
    check_law(law, rv)
    rv = float(rv)
    keys = [get_passband(k).key for k in mags]
    if len(set(keys)) < len(keys):
        raise StelltempError(f"two of the passbands share a key: {', '.join(keys)}")
    if method == "colour" and len(keys) != 2:
        raise StelltempError(f"method 'colour' takes exactly two bands, got {len(keys)}")
    if fit_ebv and len(keys) < 3:
        raise StelltempError("fitting E(B−V) needs at least three bands")
    _check_scalars(ebv=ebv, ebv_err=ebv_err, av=av, av_err=av_err, parallax=parallax,
                   parallax_err=parallax_err, feh=feh, feh_err=feh_err, logg=logg)
    monte_carlo = check_size("monte_carlo", monte_carlo)
    n_rows = max((np.size(v) for v in mags.values()), default=0)
    # the Monte Carlo holds about (4 per band + 16) float64 arrays of n_rows × samples
    check_memory(f"monte_carlo = {monte_carlo} for {n_rows} star(s)",
                 8.0 * n_rows * monte_carlo * (4 * len(keys) + 16), "use fewer samples or fewer stars at once")
    threads = engine_threads() if n_rows >= 2 * MIN_THREAD_BLOCK else 1
    if (n_rows > BLOCK_ROWS or threads > 1) and not monte_carlo and isinstance(mags, dict):
        per_star = dict(mags=mags, errs=errs, ebv=ebv, ebv_err=ebv_err, av=av, av_err=av_err,
                        parallax=parallax, parallax_err=parallax_err, feh=feh, logg=logg,
                        feh_err=feh_err)
        values = [x for v in per_star.values() for x in (v.values() if isinstance(v, dict) else [v])]
        if all(np.ndim(x) <= 1 and np.size(x) in (0, 1, n_rows) for x in values if x is not None):
            table = _in_blocks(lambda **kw: estimate(**kw, rv=rv, law=law, fit_ebv=fit_ebv, method=method,
                                                     cal_ebv=cal_ebv, cal_detail=cal_detail),
                               n_rows, per_star, threads)
            return table
        # otherwise the unblocked path below names the badly shaped input
    pivots = [get_passband(k).pivot_wavelength.value for k in keys]
    order = np.argsort(pivots)
    keys = [keys[i] for i in order]
    given = list(mags)
    mags = {keys[j]: mags[given[i]] for j, i in enumerate(order)}
    errs = {} if errs is None else {get_passband(k).key: v for k, v in errs.items()}
    n = max((np.size(v) for v in mags.values()), default=0)
    notes = RowNotes(n)
    m, e, flags = _clean_photometry(mags, errs, keys, n, notes)
    # a float array is compared as it is (made into objects it cost 1–2 ms per 65,536 stars)
    plain = ebv if type(ebv) is np.ndarray and ebv.dtype.kind == "f" else np.asarray(ebv, dtype=object)
    ebv_given = not (av is None and np.all(plain == 0.0) and not isinstance(ebv, u.Quantity))
    ebv = _column(ebv, n, "E(B-V)")
    ebv_err = _column(ebv_err, n, "E(B-V) error")
    if av is not None:
        if np.any(ebv != 0) or np.any(ebv_err != 0):
            raise StelltempError("give the reddening as E(B-V) or as A_V, not both")
        ebv = _column(av, n, "A_V") / rv
        ebv_err = _column(av_err, n, "A_V error", 0.0) / rv
    with np.errstate(invalid="ignore"):
        bad_red = ~np.isfinite(ebv) | (ebv < bg.E_MIN) | (ebv > bg.E_MAX) | ~(ebv_err >= 0)
    flags |= np.where(bad_red, fl.BAD_INPUT, 0)
    m[bad_red] = np.nan  # no result without a usable reddening (never that of E(B-V) = 0)
    ebv_err = np.where(np.isfinite(ebv_err), ebv_err, 0.0)
    if not ebv_given and not fit_ebv:
        notes.add(True, "E(B-V) = 0 assumed" + (" for t_bb" if cal_ebv else ""))

    use_colour = method == "colour" or (method == "auto" and len(keys) == 2)
    if use_colour:
        core = _by_colour(m, e, keys, ebv, ebv_err, law, rv)
    else:
        core = _by_fit(m, e, keys, ebv, ebv_err, fit_ebv, law, rv)
    flags |= core.pop("flags")
    if monte_carlo:
        lo, hi = _monte_carlo_interval(m, e, keys, ebv, ebv_err, fit_ebv, use_colour, law, rv,
                                       int(monte_carlo), seed)
        core["t_lo"], core["t_hi"] = lo, hi

    t = core["t"]
    theta = angular_diameter_mas(core["a"])
    lnt_err = np.log(core["t_hi"] / core["t_lo"]) / 2
    lntheta_err = 0.2 * np.log(10) * core["a_err"]  # θ ∝ 10^(−0.2 a)
    cov_t_theta = -0.2 * np.log(10) * core["cov_lnt_a"]
    plx = _column(parallax, n, "parallax", unit=u.mas)
    plx_err = _column(parallax_err, n, "parallax error", 0.0, unit=u.mas)
    if plx is not None:
        no_err = np.isfinite(plx) & (np.full(n, True) if parallax_err is None else ~(plx_err > 0))
        notes.add(no_err, "parallax error unknown: radius and luminosity errors exclude the distance")
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        derived = derived_quantities(t, np.where(np.isfinite(lnt_err), lnt_err, np.nan), theta,
                                     lntheta_err, cov_t_theta, plx, plx_err)
        cal = _calibrated(m, e, keys, t, ebv, ebv_err, core, fit_ebv or cal_ebv, feh, feh_err, logg,
                          law, rv, n, notes, monte_carlo, seed)
    flags |= cal.flags
    flags |= np.where(cal.p_value < fl.DISAGREE_P, fl.COLOURS_DISAGREE, 0)
    # where there is a calibrated T_eff (the one to quote), the reddening's share is judged on it
    has_cal = np.isfinite(cal.teff)
    red_cal = has_cal & (cal.ebv_share > fl.REDDENING_SHARE)
    flags = np.where(has_cal, (flags & ~fl.REDDENING_DOMINATES) | np.where(red_cal, fl.REDDENING_DOMINATES, 0),
                     flags)
    usable = np.isfinite(t) | np.isfinite(cal.teff)
    level = fl.row_severity(flags, usable)

    table = QTable()
    table["t_bb"] = t * u.K
    table["t_bb_lo"] = core["t_lo"] * u.K
    table["t_bb_hi"] = core["t_hi"] * u.K
    table["t_bb_err"] = (core["t_hi"] - core["t_lo"]) / 2 * u.K
    table["theta"] = theta * u.mas
    table["theta_err"] = theta * lntheta_err * u.mas
    table["ebv_used"] = core["ebv"] * u.mag
    table["ebv_used_err"] = core["ebv_err"] * u.mag
    table["n_bands"] = core["n_bands"]
    table["chi2"] = core["chi2"]
    table["dof"] = core["dof"]
    table["p_value"] = core["p_value"]
    table["lambda_peak"] = derived["lambda_peak_nm"] * u.nm
    table["lambda_peak_err"] = derived["lambda_peak_err_nm"] * u.nm
    table["fbol"] = derived["fbol_cgs"] * u.erg / u.s / u.cm**2
    table["fbol_err"] = derived["fbol_err_cgs"] * u.erg / u.s / u.cm**2
    table["radius"] = derived["radius_rsun"] * u.R_sun
    table["radius_err"] = derived["radius_err_rsun"] * u.R_sun
    table["luminosity"] = derived["lum_lsun"] * u.L_sun
    table["luminosity_err"] = derived["lum_err_lsun"] * u.L_sun
    table["teff_cal"] = cal.teff * u.K
    table["teff_cal_err"] = cal.teff_err * u.K
    table["teff_cal_lo"] = cal.teff_lo * u.K
    table["teff_cal_hi"] = cal.teff_hi * u.K
    table["n_cal"] = cal.n_used
    table["cal_used"] = cal.used_names()
    table["cal_chi2"] = cal.chi2
    table["cal_dof"] = cal.dof
    table["ebv_cal"] = cal.ebv * u.mag
    table["ebv_cal_err"] = cal.ebv_err * u.mag
    if cal_detail:
        for i, key in enumerate(cal.keys):
            table[f"teff_{key}"] = cal.teff_each[:, i] * u.K
            table[f"teff_{key}_err"] = cal.err_each[:, i] * u.K
    table["teff_cal_note"] = np.asarray(cal.notes, dtype=object)
    table["flags"] = flags
    table["flag_names"] = fl.describe_all(flags)
    table["severity"] = fl.severity_names(level)
    table["assumed"] = notes.texts()
    table.meta.update({
        "method": "colour" if use_colour else ("fit+ebv" if fit_ebv else "fit"),
        "passbands": ",".join(keys),
        "extinction_law": law,
        "R_V": rv,
        "uncertainty": f"monte_carlo:{int(monte_carlo)}" if monte_carlo else "analytic",
        "note": BLACKBODY_NOTE,
        "calibration_ebv": "fitted from the calibrations" if (fit_ebv or cal_ebv) else "as given",
        "flag_summary": fl.summary(flags, level),
        "assumptions": notes.counts(),
        "luminosity_class": ("log g given per star" if logg is not None else
                             f"log g not given: {ASSUMED_STAGE} relations assumed for every star"),
    })
    return table


def _check_scalars(**values):
    """One number for every star must lie in its documented range (:mod:`stelltemp.validation`).

    Arrays are checked star by star instead: a bad value flags that star.
    """
    for name, value in values.items():
        if value is None or isinstance(value, u.Quantity) or np.ndim(value) != 0:
            continue
        check_number(name, value)


RESULT_COLUMNS = (
    "t_bb", "t_bb_lo", "t_bb_hi", "t_bb_err", "theta", "theta_err", "ebv_used", "ebv_used_err",
    "n_bands", "chi2", "dof", "p_value", "lambda_peak", "lambda_peak_err", "fbol", "fbol_err",
    "radius", "radius_err", "luminosity", "luminosity_err", "teff_cal", "teff_cal_err",
    "teff_cal_lo", "teff_cal_hi", "n_cal", "cal_used", "cal_chi2", "cal_dof", "ebv_cal",
    "ebv_cal_err", "teff_cal_note", "flags", "flag_names", "severity", "assumed",
)


def _offset_from_bands(m, e, keys, t, ebv, law, rv):
    """Magnitude offset a (−2.5 log10 Ω) given T: weighted mean of m − M, and its error parts."""
    lnt = np.log(np.where(np.isfinite(t), t, 5800.0))
    mod = np.empty_like(m)
    d_t = np.empty_like(m)
    for b, k in enumerate(keys):
        mod[:, b], d_t[:, b], _ = bg.band_table(k, law, rv).evaluate(lnt, ebv, want_de=False)
    w = np.where(np.isfinite(m), 1 / e**2, 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        wsum = w.sum(axis=1)
        a = np.nansum(w * (m - mod), axis=1) / wsum
        mean_slope = (w * d_t).sum(axis=1) / wsum
        a_err = 1 / np.sqrt(wsum)
    a = np.where(np.isfinite(t), a, np.nan)
    return a, a_err, mean_slope


def _by_colour(m, e, keys, ebv, ebv_err, law, rv):
    blue, red = keys
    res = colour_interval(m[:, 0] - m[:, 1], np.hypot(e[:, 0], e[:, 1]), blue, red,
                          np.where(np.isfinite(ebv), ebv, 0.0), ebv_err, law, rv)
    t = res["t"]
    a, a_phot_err, slope = _offset_from_bands(m, e, keys, t, np.where(np.isfinite(ebv), ebv, 0.0), law, rv)
    lnt_err = np.log(res["t_hi"] / res["t_lo"]) / 2
    with np.errstate(invalid="ignore"):
        a_err = np.sqrt(a_phot_err**2 + (slope * lnt_err) ** 2)
    flags = res["flags"] | np.where(np.isnan(m).any(axis=1), fl.BAD_INPUT, 0)
    n = len(t)
    return {"t": t, "t_lo": res["t_lo"], "t_hi": res["t_hi"], "a": a, "a_err": a_err,
            "cov_lnt_a": -slope * lnt_err**2, "ebv": ebv, "ebv_err": ebv_err,
            "n_bands": np.isfinite(m).sum(axis=1), "chi2": np.full(n, np.nan),
            "dof": np.zeros(n, int), "p_value": np.full(n, np.nan), "flags": flags}


def _by_fit(m, e, keys, ebv, ebv_err, fit_ebv, law, rv):
    prior = np.where(ebv_err > 0, ebv_err, np.inf)
    res = fit_blackbody(m, e, keys, np.where(np.isfinite(ebv), ebv, 0.0), prior, fit_ebv, law, rv)
    t = res["t"]
    lnt_err = res["lnt_err"]
    flags = res["flags"]
    if not fit_ebv:
        red_part = np.abs(res["dlnt_de"]) * ebv_err
        flags = flags | np.where(fl.reddening_dominates(red_part, lnt_err), fl.REDDENING_DOMINATES, 0)
        lnt_err = np.hypot(lnt_err, red_part)
    t_lo = t * np.exp(-lnt_err)
    t_hi = t * np.exp(lnt_err)
    open_top = t_hi > bg.T_MAX
    flags = flags | np.where(open_top, fl.RJ_LIMIT, 0)
    t_hi = np.where(open_top, np.inf, t_hi)
    return {"t": t, "t_lo": t_lo, "t_hi": t_hi, "a": res["a"], "a_err": res["a_err"],
            "cov_lnt_a": res["cov_lnt_a"], "ebv": res["ebv"],
            "ebv_err": res["ebv_err"] if fit_ebv else ebv_err,
            "n_bands": res["n_bands"], "chi2": res["chi2"], "dof": res["dof"],
            "p_value": res["p_value"], "model": res["model"], "model_de": res["model_de"], "flags": flags}


def _monte_carlo_interval(m, e, keys, ebv, ebv_err, fit_ebv, use_colour, law, rv, samples, seed):
    """16th and 84th percentiles of T over noisy realisations of each star."""
    rng = np.random.default_rng(seed)
    n, nb = m.shape
    mm = (m[:, None, :] + e[:, None, :] * rng.standard_normal((n, samples, nb))).reshape(-1, nb)
    ee = np.repeat(e, samples, axis=0)
    base = np.where(np.isfinite(ebv), ebv, 0.0)
    ss = np.clip(np.repeat(base, samples) + np.repeat(ebv_err, samples) * rng.standard_normal(n * samples),
                 bg.E_MIN, bg.E_MAX)
    if use_colour:
        t, _, f = invert_colour(mm[:, 0] - mm[:, 1], keys[0], keys[1], ss, law, rv)
        # samples bluer than the hot edge count as hotter than any grid temperature
        t = np.where((f & (fl.NO_SOLUTION | fl.AT_GRID_EDGE)) != 0,
                     np.where(mm[:, 0] - mm[:, 1] < 0.5, np.inf, 0.0), t)
    else:
        prior = np.where(np.repeat(ebv_err, samples) > 0, np.repeat(ebv_err, samples), np.inf)
        t = fit_blackbody(mm, ee, keys, ss, prior, fit_ebv, law, rv)["t"]
    t = t.reshape(n, samples)
    lo, hi = np.nanpercentile(np.where(np.isnan(t), np.nan, t), [15.865, 84.135], axis=1)
    return lo, hi


def _calibrated(m, e, keys, t_bb, ebv, ebv_err, core, fit_ebv, feh, feh_err, logg, law, rv, n,
                notes, monte_carlo, seed):
    """Empirical T_eff from every calibrated colour (:func:`.combine.calibrated_teff`).

    Colours are dereddened through the passbands with the excess of a
    blackbody at the star's (iterated) calibrated temperature, starting from T_bb.
    """
    feh = None if feh is None else _column(feh, n, "[Fe/H]", unit=u.dex)
    feh_err = None if feh_err is None else _column(feh_err, n, "[Fe/H] error", unit=u.dex)
    logg = None if logg is None else _column(logg, n, "log g", unit=u.dex(u.cm / u.s**2))
    cal = calibrated_teff(m, e, keys, t_bb, ebv, ebv_err, fit_ebv=fit_ebv, feh=feh, feh_err=feh_err,
                          logg=logg, law=law, rv=rv, monte_carlo=int(monte_carlo),
                          seed=None if seed is None else [int(seed), 11])
    has_cal = cal.n_used > 0
    if cal.keys:
        no_feh = np.full(n, True) if feh is None else ~np.isfinite(feh)
        notes.add(has_cal & no_feh, f"[Fe/H] = {DEFAULT_FEH:g} assumed")
        no_logg = np.full(n, True) if logg is None else ~np.isfinite(logg)
        notes.add(has_cal & no_logg, f"log g unknown: {ASSUMED_STAGE} relations assumed")
    return cal
