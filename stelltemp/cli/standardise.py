"""``stelltemp standardise``: fit the night's transformation from standard stars and apply it."""

import sys

from ..errors import StelltempError
from . import options
from .output import emit_json, measure

NAME = "standardise"
HELP = "standard magnitudes from instrumental ones: fit the night's transformation, apply it"
DESCRIPTION = (
    "Fit zero point, extinction and colour term (optionally the colour-dependent extinction) per "
    "filter to the standard stars among the measurements, write the transformation file, and give "
    "the other stars' standard magnitudes and colours with errors that include the fit's. "
    "Measurements: one row each, columns star, filter, inst_mag, inst_mag_err and airmass (or "
    "time_utc, ra, dec). Standards: star plus one column per passband key with <key>_err."
)


def add(p):
    """Register the options of this subcommand on ``p`` (made by :func:`stelltemp.cli.options.subcommand`)."""
    p.add_argument("observations", help="measurement table (CSV, ECSV, FITS, Parquet)")
    p.add_argument("--standards", metavar="FILE", help="standard-star list (one row per star)")
    p.add_argument("--use-fit", metavar="FILE",
                   help="apply this transformation file instead of fitting (no standards needed; every star "
                        "is a target)")
    p.add_argument("--instrument", required=True, metavar="FILE",
                   help="instrument + site description (TOML): filters, passbands, site for the airmass")
    options.add_output(p, "the transformation file (TOML); needed unless --use-fit")
    p.add_argument("--targets", metavar="PATH",
                   help="write the targets' standard magnitudes and colours (ECSV keeps the covariance)")
    p.add_argument("--temperatures", metavar="PATH", help="also run the temperature engine on the targets (reddening from --ebv)")
    p.add_argument("--second-order", metavar="FILTERS",
                   help="filters that get the colour-dependent extinction term, e.g. B or B,V or all")
    p.add_argument("--clip", type=float, default=3.5, metavar="SIGMA", help="outlier threshold, robust sigma")
    p.add_argument("--predicted", choices=("check", "fallback", "prior", "off"), default="check",
                   help="colour terms predicted from the passbands: compare with the fit; also use as priors "
                        "where too few standards fix a colour term (fallback) or everywhere (prior); or skip")
    p.add_argument("--extinction-prior", action="store_true",
                   help="use the instrument file's extinction coefficients as priors (+-0.05 mag/airmass), "
                        "for nights with standards at one airmass only")
    options.add_reddening(p)
    options.add_plot(p, "residuals of the standards against colour and airmass")
    options.add_replace(p, "output, targets, temperatures or plot file")
    p.add_argument("--quiet", action="store_true", help="no progress lines")
    options.add_json(p)
    return p


def _second_order(text):
    text = (text or "").strip()
    if text.lower() == "all":
        return "all"
    return {t.strip() for t in text.split(",") if t.strip()}


def run(args, out=None, err=None):
    from ..reduction.workflow import standardise_night

    out = out or sys.stdout
    err = err or sys.stderr
    if not args.clip > 0:
        raise StelltempError("--clip must be > 0")
    progress = None if (args.quiet or args.json) else (lambda text: print(f"stelltemp: {text}", file=err))
    if args.use_fit:
        from ..reduction.workflow import apply_stored_transformation

        fitting_only = [o for o, v in (("--standards", args.standards), ("-o/--output", args.output),
                                       ("--plot", args.plot), ("--second-order", args.second_order)) if v]
        if fitting_only:
            raise StelltempError(f"--use-fit applies a stored transformation: {', '.join(fitting_only)} "
                                 "belong(s) to a fit")
        s = apply_stored_transformation(args.observations, args.use_fit, args.instrument, targets_out=args.targets,
                                        temperatures_out=args.temperatures, replace=args.replace, ebv=args.ebv,
                                        ebv_err=args.ebv_err, law=args.law, rv=args.rv, progress=progress)
        if args.json:
            emit_json(s, out)
        else:
            _report(s, out)
        return 0
    if not args.standards or not args.output:
        raise StelltempError("a fit needs --standards and -o/--output (or apply a stored one with --use-fit)")
    try:
        s = standardise_night(args.observations, args.standards, args.instrument, args.output,
                              targets_out=args.targets, temperatures_out=args.temperatures, plot_out=args.plot,
                              replace=args.replace, second_order=_second_order(args.second_order), clip=args.clip,
                              predicted=args.predicted, extinction_prior=args.extinction_prior, ebv=args.ebv,
                              ebv_err=args.ebv_err, law=args.law, rv=args.rv, progress=progress)
    except StelltempError as exc:
        raise StelltempError(str(exc).replace("(allow replacing it explicitly)", "(add --replace to replace it)"))
    if args.json:
        emit_json(s, out)
        return 0
    _report(s, out)
    return 0


_UNITS = {"zero_point": "mag", "extinction": "mag/airmass", "colour_term": "", "colour_extinction": "/airmass"}
_LABEL = {"zero_point": "zero point", "extinction": "extinction k'", "colour_term": "colour term c",
          "colour_extinction": "colour extinction k''"}


def _report(s, out):
    prov = s["transformation"]["provenance"]
    print(f"Transformation of {prov.get('instrument_title') or prov.get('instrument')} "
          f"({prov.get('method')})", file=out)
    if prov.get("read_from"):
        print(f"  read from {prov['read_from']} (fitted {prov.get('written_utc', 'at an unknown time')})", file=out)
    pred = {(r["filter"], r["coefficient"]): r for r in s["comparison_with_prediction"]}
    for f in s["transformation"]["filters"]:
        print(f"\n  {f['filter']} -> {f['band']}, colour {f['colour']}: {f['n_used']} measurements kept, "
              f"rms {f['rms_mag'] * 1000:.1f} mmag, chi2/dof {f['chi2']:.1f}/{f['dof']}", file=out)
        for name, value in f["coefficients"].items():
            line = f"    {_LABEL[name]:22s} {measure(value, f['errors'][name], _UNITS[name])}"
            cmp = pred.get((f["filter"], name))
            if cmp:
                line += f"   (predicted {cmp['predicted']:+.3f}, {cmp['difference_sigma']:+.1f} sigma)"
            print(line, file=out)
        p = s["predicted"].get(f["filter"])
        if p:
            lo, hi = p["colour_range_mag"]
            print(f"    predicted from the passbands: c = {p['coefficients']['colour_term']:+.4f}; departure from "
                  f"the straight line {p['nonlinearity_max_mag'] * 1000:.1f} mmag at most over "
                  f"{f['colour']} {lo:+.2f} to {hi:+.2f}", file=out)
        for r in f["rejected"]:
            print(f"    set aside: {r['star']} at X = {r['airmass']:.2f}: {r['reason']}", file=out)
    if s["targets"]:
        t = s["targets"]
        line = f"\n  targets: {t['rows']} star-visits, {t['without_result']} without a result"
        if "t_bb_median_K" in t:
            line += f"; median blackbody temperature {t['t_bb_median_K']:.0f} K"
        print(line, file=out)
    for n in s["notes"]:
        print(f"  note: {n}", file=out)
    for what, path in s["written"].items():
        print(f"  wrote {what}: {path}", file=out)
