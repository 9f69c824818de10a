"""``stelltemp star``: temperature of one star from magnitudes typed on the command line."""

import sys

from . import options
from .output import emit_json, interval, measure, number, plural

NAME = "star"
HELP = "temperature of one star from its magnitudes"
DESCRIPTION = (
    "Blackbody colour temperature (with a 68 %% interval), calibrated effective temperature where a "
    "relation applies, and the derived Wien peak, angular diameter, bolometric flux, radius and "
    "luminosity."
)


def add(p):
    """Register the options of this subcommand on ``p`` (made by :func:`stelltemp.cli.options.subcommand`)."""
    options.add_magnitudes(p, required=True, example="B_JC=10.65,0.01")
    options.add_reddening(p)
    p.add_argument("--av", type=float, metavar="MAG", help="A_V, mag, instead of --ebv (E(B-V) = A_V / R_V)")
    p.add_argument("--av-err", type=float, metavar="MAG", help="1-sigma error of A_V, mag")
    p.add_argument("--fit-ebv", action="store_true", help="fit E(B-V) too (3+ bands; --ebv/--ebv-err as prior)")
    p.add_argument("--parallax", type=float, metavar="MAS", help="parallax, mas (for radius and luminosity)")
    p.add_argument("--parallax-err", type=float, metavar="MAS", help="1-sigma error of the parallax, mas")
    options.add_calibration(p)
    p.add_argument("--method", default="auto", choices=["auto", "colour", "fit"],
                   help="colour inversion (2 bands), multi-band fit, or auto")
    p.add_argument("--monte-carlo", type=int, default=0, metavar="N",
                   help="N noisy realisations for percentile intervals (0: analytic errors)")
    p.add_argument("--seed", type=int, help="random seed for --monte-carlo")
    return options.add_closing(p, plot="the fit with its residuals", replace="--plot file")


def _reason_no_radius(args, row):
    from ..engine.derived import MIN_PARALLAX_SNR

    if args.parallax is None:
        return "no parallax given"
    if not (args.parallax > 0):
        return "parallax not positive"
    if args.parallax_err is not None and args.parallax < MIN_PARALLAX_SNR * args.parallax_err:
        return f"parallax error above {100 / MIN_PARALLAX_SNR:.0f} %"
    return "no angular diameter"


def _reason_no_teff(row):
    names = row["flag_names"] or ""
    if "outside_calibration" in names:
        return "the star lies outside every relation's range"
    return "no relation for these passbands applies"


def run(args, out=None, err=None):
    from ..engine.star import estimate_star
    from ..parsing import parse_magnitude

    out = out or sys.stdout
    typed = [parse_magnitude(x) for x in args.mag]
    row, meta, table = estimate_star(
        typed, ebv=args.ebv, ebv_err=args.ebv_err, av=args.av, av_err=args.av_err, rv=args.rv, law=args.law,
        fit_ebv=args.fit_ebv, parallax=args.parallax, parallax_err=args.parallax_err, feh=args.feh,
        logg=args.logg, method=args.method, monte_carlo=args.monte_carlo, seed=args.seed,
        feh_err=args.feh_err, cal_ebv=args.cal_ebv, cal_detail=args.each_relation)
    if args.plot:
        from ..plots import plot_star_fit

        plot_star_fit(table, typed, args.plot, law=args.law, rv=args.rv, replace=args.replace)
    if args.json:
        emit_json({"result": row, "meta": meta, **({"plot": args.plot} if args.plot else {})}, out)
        return 0
    r = row
    m = measure
    n_bands = len(meta["passbands"].split(","))
    print(f"Star in {plural(n_bands, 'passband')} ({', '.join(meta['passbands'].split(','))}); method: {meta['method']}; "
          f"extinction: {meta['extinction_law']}, R_V = {meta['R_V']:g}; errors: {meta['uncertainty']}", file=out)
    lo, hi = r["t_bb_lo"]["value"], r["t_bb_hi"]["value"]
    err_bb = r["t_bb_err"]["value"]
    print(f"  blackbody colour temperature   T_bb  = {m(r['t_bb'], err_bb, 'K')}   "
          f"68 % interval {interval(lo, hi, err_bb, 'K')}", file=out)
    cal = m(r["teff_cal"], r["teff_cal_err"], "K", reason=_reason_no_teff(r))
    print(f"  effective temperature          T_eff = {cal}   (calibrated, {plural(r['n_cal'], 'relation')})",
          file=out)
    if r["cal_used"]:
        agree = (f"; colours agree to chi2 = {number(r['cal_chi2'], '', 3)} for "
                 f"{plural(r['cal_dof'], 'degree of freedom', 'degrees of freedom')}"
                 if r["cal_dof"] and r["cal_dof"] > 0 else "")
        print(f"    relations used: {r['cal_used'].replace(',', ', ')}{agree}", file=out)
    if args.each_relation:
        fitted = r["ebv_cal"]["value"] == r["ebv_cal"]["value"]
        for key in r["cal_used"].split(",") if r["cal_used"] else []:
            print(f"    {key:28s} T_eff = {m(r['teff_' + key], r['teff_' + key + '_err'], 'K')}"
                  + ("   (at the fitted E(B-V); its error not included)" if fitted else ""), file=out)
    if r["ebv_cal"]["value"] == r["ebv_cal"]["value"]:  # not NaN: fitted from the calibrations
        print(f"  E(B-V) from the calibrations   {m(r['ebv_cal'], r['ebv_cal_err'], 'mag')}", file=out)
    print(f"  E(B-V) used                    {m(r['ebv_used'], r['ebv_used_err'], 'mag')}", file=out)
    if r["dof"] and r["dof"] > 0:
        print(f"  fit                            chi2 = {number(r['chi2'], '', 3)} for "
              f"{plural(r['dof'], 'degree of freedom', 'degrees of freedom')}, p = {number(r['p_value'], '', 2)}",
              file=out)
    print(f"  Wien peak                      {m(r['lambda_peak'], r['lambda_peak_err'], 'nm')}", file=out)
    print(f"  angular diameter               {m(r['theta'], r['theta_err'], 'mas')}", file=out)
    print(f"  bolometric flux                {m(r['fbol'], r['fbol_err'], 'erg s^-1 cm^-2')}", file=out)
    why = _reason_no_radius(args, r)
    print(f"  radius                         {m(r['radius'], r['radius_err'], 'R_sun', reason=why)}", file=out)
    print(f"  luminosity                     {m(r['luminosity'], r['luminosity_err'], 'L_sun', reason=why)}",
          file=out)
    severity = f" ({r['severity']})" if r["severity"] else ""
    print(f"  flags: {r['flag_names'] or 'none'}{severity}", file=out)
    if r["assumed"]:
        print(f"  assumed: {r['assumed']}", file=out)
    # the class assumed is already listed under 'assumed'
    cal_note = "; ".join(x for x in r["teff_cal_note"].split("; ") if not x.startswith("log g unknown"))
    if cal_note:
        print(f"  calibration note: {cal_note}", file=out)
    print(f"  note: {meta['note']}", file=out)
    if args.plot:
        print(f"  figure: {args.plot}", file=out)
    return 0
