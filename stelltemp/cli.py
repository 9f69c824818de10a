"""Command line: ``stelltemp <subcommand>``.

A thin layer over the Python API.  Every subcommand takes ``--json``; bad
input prints one line, ``stelltemp: error: …``, on stderr and exits with
code 2 (never a traceback).

Subcommands:

``passbands``   list the built-in passbands and their properties
``blackbody``   Planck, Wien and Stefan–Boltzmann quantities for a temperature
``colourgrid``  synthetic magnitudes and colours of blackbodies over temperatures
``star``        temperature of one star from magnitudes typed on the command line
``relations``   empirical colour–T_eff relations (:mod:`stelltemp.calibrations`)
``catalogue``   temperatures for every row of a table file (:mod:`stelltemp.catalog`)
``exposure``    counts, S/N and exposure time for one star (:mod:`stelltemp.observing`)
``nightplan``   windows and exposures for a target list in one night
``tour``        the whole job once on the invented demo data (:mod:`stelltemp.tour`)
"""

import argparse
import json
import math
import os
import sys

import numpy as np
from astropy import units as u

from . import __version__
from .errors import StelltempError
from .jsonable import json_ready

EXIT_BAD_INPUT = 2


class _Parser(argparse.ArgumentParser):
    """argparse, but a usage error is one line and exit code 2."""

    def error(self, message):
        self.exit(EXIT_BAD_INPUT, f"stelltemp: error: {message} (see `{self.prog} --help`)\n")


def emit_json(obj, stream=None):
    """Print an object as JSON (NaN and inf become null)."""
    print(json.dumps(json_ready(obj), indent=2, ensure_ascii=False), file=stream or sys.stdout)


def parse_temperature(text, unit="K"):
    """A temperature typed by a user: a number in ``unit`` (K, C or F)."""
    from .planck import as_kelvin

    units = {"K": u.K, "C": u.deg_C, "F": u.imperial.deg_F}
    if unit not in units:
        raise StelltempError(f"temperature unit must be K, C or F, got {unit!r}")
    try:
        value = float(text)
    except ValueError:
        raise StelltempError(f"not a temperature: {text!r}") from None
    return float(as_kelvin(value * units[unit]))


# ----------------------------------------------------------------- passbands
def _cmd_passbands(args):
    from .passbands import builtin_keys, get_passband

    rows = [get_passband(k).summary() for k in builtin_keys()]
    if args.json:
        emit_json({"passbands": rows})
        return 0
    print(f"{'key':9s} {'system':16s} {'band':4s} {'mag':4s} {'detector':8s} "
          f"{'pivot/nm':>9s} {'FWHM/nm':>8s} {'W_eq/nm':>8s}  source")
    for r in rows:
        print(f"{r['key']:9s} {r['system']:16s} {r['band']:4s} {r['magsys']:4s} {r['detector']:8s} "
              f"{r['pivot_wavelength_nm']:9.1f} {r['fwhm_nm']:8.1f} {r['equivalent_width_nm']:8.1f}  "
              f"{r['source']}")
    return 0


# ----------------------------------------------------------------- blackbody
def blackbody_report(temperature_k, radius_rsun=None, wavelength_nm=None):
    """Planck, Wien and Stefan–Boltzmann quantities for one temperature, as a dict with units in keys."""
    from . import planck

    t = temperature_k * u.K
    nu_peak = planck.peak_frequency(t)
    out = {
        "temperature_K": temperature_k,
        "peak_wavelength_B_lambda_nm": float(planck.peak_wavelength(t).value),
        "peak_wavelength_photons_nm": float(planck.peak_wavelength_photons(t).value),
        "peak_frequency_B_nu_THz": float(nu_peak.value),
        "wavelength_of_B_nu_peak_nm": float(nu_peak.to(u.nm, equivalencies=u.spectral()).value),
        "surface_flux_W_m2": float(planck.surface_flux(t).value),
        "note": "the three peaks differ: B_lambda, photon rate per wavelength and B_nu peak at different wavelengths",
    }
    if radius_rsun is not None:
        lum = planck.luminosity(radius_rsun * u.R_sun, t)
        out["radius_Rsun"] = radius_rsun
        out["luminosity_W"] = float(lum.value)
        out["luminosity_Lsun"] = float((lum / (3.828e26 * u.W)).decompose().value)
    if wavelength_nm is not None:
        w = wavelength_nm * u.nm
        out["at_wavelength_nm"] = wavelength_nm
        out["B_lambda_W_m2_nm_sr"] = float(planck.radiance_lambda(t, w).value)
        out["B_nu_W_m2_Hz_sr"] = float(planck.radiance_nu(t, w.to(u.Hz, equivalencies=u.spectral())).value)
        out["photon_radiance_per_s_m2_nm_sr"] = float(planck.photon_radiance_lambda(t, w).value)
    return out


def _cmd_blackbody(args):
    t = parse_temperature(args.temperature, args.unit)
    if args.radius is not None and not (args.radius > 0):
        raise StelltempError(f"radius must be positive, got {args.radius}")
    if args.at is not None and not (args.at > 0):
        raise StelltempError(f"wavelength must be positive, got {args.at}")
    rep = blackbody_report(t, args.radius, args.at)
    if args.plot:
        from .plots import plot_spectrum_with_passbands

        plot_spectrum_with_passbands(t, args.bands, args.plot, replace=args.replace)
        rep["plot"] = args.plot
    if args.json:
        emit_json(rep)
        return 0
    print(f"Blackbody at T = {t:.6g} K")
    print(f"  peak of B_lambda (Wien)          {rep['peak_wavelength_B_lambda_nm']:.6g} nm")
    print(f"  peak of photon rate per nm       {rep['peak_wavelength_photons_nm']:.6g} nm")
    print(f"  peak of B_nu                     {rep['peak_frequency_B_nu_THz']:.6g} THz "
          f"(= {rep['wavelength_of_B_nu_peak_nm']:.6g} nm)")
    print(f"  surface flux sigma T^4           {rep['surface_flux_W_m2']:.6g} W m^-2")
    if "luminosity_W" in rep:
        print(f"  luminosity (R = {args.radius:g} R_sun)    {rep['luminosity_W']:.6g} W "
              f"= {rep['luminosity_Lsun']:.6g} L_sun")
    if "B_lambda_W_m2_nm_sr" in rep:
        print(f"  at {args.at:g} nm: B_lambda = {rep['B_lambda_W_m2_nm_sr']:.6g} W m^-2 nm^-1 sr^-1, "
              f"B_nu = {rep['B_nu_W_m2_Hz_sr']:.6g} W m^-2 Hz^-1 sr^-1")
    print("  (the three peaks differ: they are maxima of different distributions)")
    if args.plot:
        print(f"  figure: {args.plot}")
    return 0


# ---------------------------------------------------------------- colourgrid
#: a 1 R_sun sphere at 10 pc: the magnitude scale used by `colourgrid`
_ONE_RSUN_AT_10PC_RAD = 2 * 6.957e8 / (10 * 3.0856775814913673e16)


def colour_grid(bands, temperatures_k, ebv=0.0, law="G23", rv=3.1):
    """Magnitudes of blackbodies of 1 R☉ at 10 pc and adjacent colours, per temperature."""
    from .bandgrid import blackbody_mag, inside

    t = np.asarray(temperatures_k, float)
    if not np.all(inside(t, ebv)):
        raise StelltempError("temperatures must lie in 1000–100000 K and E(B-V) in -0.5–6")
    mags = {b: blackbody_mag(b, t, ebv, law, rv, _ONE_RSUN_AT_10PC_RAD) for b in bands}
    colours = {f"{b1}-{b2}": mags[b1] - mags[b2] for b1, b2 in zip(bands[:-1], bands[1:])}
    return mags, colours


def _cmd_colourgrid(args):
    from .passbands import get_passband

    bands = [get_passband(b).key for b in args.bands]
    if len(bands) < 1:
        raise StelltempError("give at least one passband")
    if args.temps:
        temps = np.array([parse_temperature(x) for x in args.temps])
    else:
        if not (0 < args.tmin < args.tmax) or args.steps < 2:
            raise StelltempError("need 0 < --tmin < --tmax and --steps >= 2")
        temps = np.geomspace(args.tmin, args.tmax, args.steps)
    mags, colours = colour_grid(bands, temps, args.ebv, args.law, args.rv)
    if args.plot:
        from .plots import plot_colour_temperature

        plot_colour_temperature(bands, args.plot, ebv=args.ebv, law=args.law, rv=args.rv, replace=args.replace)
    if args.json:
        emit_json({"scale": "blackbody of radius 1 R_sun at 10 pc", "ebv": args.ebv, "law": args.law,
                   "R_V": args.rv, "temperature_K": temps,
                   "magnitudes": mags, "colours": colours})
        return 0
    print(f"# blackbody of radius 1 R_sun at 10 pc; E(B-V) = {args.ebv:g} ({args.law}, R_V = {args.rv:g})")
    print("# magnitudes in each band's own system (Vega or AB); colours of adjacent bands")
    head = f"{'T/K':>9s} " + " ".join(f"{b:>9s}" for b in bands) + " " + " ".join(f"{c:>17s}" for c in colours)
    print(head)
    for i, t in enumerate(temps):
        row = f"{t:9.1f} " + " ".join(f"{mags[b][i]:9.4f}" for b in bands)
        row += " " + " ".join(f"{colours[c][i]:17.4f}" for c in colours)
        print(row)
    return 0


# ---------------------------------------------------------------------- star
def parse_magnitude(text):
    """``KEY=MAG`` or ``KEY=MAG,ERR`` → (key, mag, err or None)."""
    if "=" not in text:
        raise StelltempError(f"magnitude must look like KEY=MAG or KEY=MAG,ERR, got {text!r}")
    key, value = text.split("=", 1)
    parts = value.split(",")
    try:
        mag = float(parts[0])
        err = float(parts[1]) if len(parts) > 1 else None
    except ValueError:
        raise StelltempError(f"not a number in {text!r}") from None
    if len(parts) > 2:
        raise StelltempError(f"too many values in {text!r}")
    if not math.isfinite(mag) or (err is not None and not (err >= 0 and math.isfinite(err))):
        raise StelltempError(f"magnitude and error must be finite (error >= 0) in {text!r}")
    return key.strip(), mag, err


def star_result(mags_typed, **options):
    """Run the engine for one star; return (row dict with units, table meta)."""
    from .engine import estimate
    from .passbands import get_passband

    mags, errs = {}, {}
    for key, mag, err in mags_typed:
        key = get_passband(key).key
        if key in mags:
            raise StelltempError(f"passband {key} given twice")
        mags[key] = [mag]
        if err is not None:
            errs[key] = [err]
    table = estimate(mags, errs, **options)
    row = {}
    for name in table.colnames:
        col = table[name]
        value = col[0]
        if hasattr(value, "unit"):
            row[name] = {"value": float(value.value), "unit": str(value.unit) or ""}
        else:
            row[name] = value.item() if hasattr(value, "item") else value
    return row, dict(table.meta), table


def _fmt(q, digits=4):
    v = q["value"] if isinstance(q, dict) else q
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "—" if not (isinstance(v, float) and math.isinf(v)) else "∞"
    return f"{v:.{digits}g}"


def _cmd_star(args):
    typed = [parse_magnitude(x) for x in args.mag]
    row, meta, table = star_result(
        typed, ebv=args.ebv, ebv_err=args.ebv_err, av=args.av, av_err=args.av_err, rv=args.rv, law=args.law,
        fit_ebv=args.fit_ebv,
        parallax=args.parallax, parallax_err=args.parallax_err, feh=args.feh, logg=args.logg,
        method=args.method, monte_carlo=args.monte_carlo, seed=args.seed)
    if args.plot:
        from .plots import plot_star_fit

        plot_star_fit(table, typed, args.plot, law=args.law, rv=args.rv, replace=args.replace)
    if args.json:
        emit_json({"result": row, "meta": meta, **({"plot": args.plot} if args.plot else {})})
        return 0
    r = row
    print(f"Passbands: {meta['passbands']}   method: {meta['method']}   "
          f"extinction: {meta['extinction_law']}, R_V = {meta['R_V']:g}   errors: {meta['uncertainty']}")
    print(f"  blackbody colour temperature  T_bb = {_fmt(r['t_bb'], 5)} K   "
          f"68% interval {_fmt(r['t_bb_lo'], 5)} – {_fmt(r['t_bb_hi'], 5)} K")
    print(f"  effective temperature (calibrated, {r['n_cal']} relations)  "
          f"T_eff = {_fmt(r['teff_cal'], 5)} ± {_fmt(r['teff_cal_err'], 2)} K")
    print(f"  E(B-V) used {_fmt(r['ebv_used'], 3)} ± {_fmt(r['ebv_used_err'], 2)} mag;  "
          f"chi2 = {_fmt(r['chi2'], 4)} for {r['dof']} d.o.f., p = {_fmt(r['p_value'], 3)}")
    print(f"  Wien peak {_fmt(r['lambda_peak'], 5)} ± {_fmt(r['lambda_peak_err'], 2)} nm;  "
          f"angular diameter {_fmt(r['theta'], 4)} ± {_fmt(r['theta_err'], 2)} mas")
    print(f"  bolometric flux {_fmt(r['fbol'], 4)} ± {_fmt(r['fbol_err'], 2)} erg s^-1 cm^-2")
    if args.parallax is not None:
        print(f"  radius {_fmt(r['radius'], 4)} ± {_fmt(r['radius_err'], 2)} R_sun;  "
              f"luminosity {_fmt(r['luminosity'], 4)} ± {_fmt(r['luminosity_err'], 2)} L_sun")
    print(f"  flags: {r['flag_names'] or 'none'}")
    print(f"  note: {meta['note']}")
    if args.plot:
        print(f"  figure: {args.plot}")
    return 0


# ---------------------------------------------------------------- the parser
def _add_reddening_options(p):
    p.add_argument("--ebv", type=float, default=0.0, help="E(B-V), mag (nominal, of the law); default 0")
    p.add_argument("--law", default="G23", help="extinction law: G23 (default), F99, F19, CCM89, O94")
    p.add_argument("--rv", type=float, default=3.1, help="R_V (default 3.1)")


def _add_replace_option(p):
    p.add_argument("--replace", action="store_true", help="allow replacing an existing --plot file")


def build_parser():
    parser = _Parser(prog="stelltemp", description=(
        "Temperatures of stars from their colours, with reddening applied through the passbands; "
        "blackbody physics; exposure planning."))
    parser.add_argument("--version", action="version", version=f"stelltemp {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="<subcommand>", parser_class=_Parser)

    p = sub.add_parser("passbands", help="list built-in passbands with their properties")
    p.add_argument("--json", action="store_true", help="machine-readable output")
    p.set_defaults(func=_cmd_passbands)

    p = sub.add_parser("blackbody", help="Planck, Wien and Stefan-Boltzmann quantities for a temperature")
    p.add_argument("temperature", help="temperature (number; unit from --unit)")
    p.add_argument("--unit", default="K", choices=["K", "C", "F"], help="unit of the temperature (default K)")
    p.add_argument("--radius", type=float, help="radius in R_sun, to give the luminosity")
    p.add_argument("--at", type=float, metavar="NM", help="also give B_lambda and B_nu at this wavelength (nm)")
    p.add_argument("--bands", nargs="*", default=["jc.B", "jc.V", "jc.Ic", "2mass.Ks"],
                   help="passbands drawn on the --plot figure")
    p.add_argument("--plot", metavar="FILE", help="write the spectrum with passbands and Wien peak (PNG)")
    _add_replace_option(p)
    p.add_argument("--json", action="store_true", help="machine-readable output")
    p.set_defaults(func=_cmd_blackbody)

    p = sub.add_parser("colourgrid", help="synthetic magnitudes and colours of blackbodies over temperatures")
    p.add_argument("bands", nargs="+", help="passband keys, e.g. jc.B jc.V 2mass.Ks")
    p.add_argument("--temps", nargs="+", help="explicit temperatures in K")
    p.add_argument("--tmin", type=float, default=3000.0, help="lowest temperature, K (default 3000)")
    p.add_argument("--tmax", type=float, default=30000.0, help="highest temperature, K (default 30000)")
    p.add_argument("--steps", type=int, default=10, help="number of temperatures, log-spaced (default 10)")
    _add_reddening_options(p)
    p.add_argument("--plot", metavar="FILE", help="write colour against temperature (PNG)")
    _add_replace_option(p)
    p.add_argument("--json", action="store_true", help="machine-readable output")
    p.set_defaults(func=_cmd_colourgrid)

    p = sub.add_parser("star", help="temperature of one star from its magnitudes")
    p.add_argument("--mag", action="append", required=True, metavar="KEY=MAG[,ERR]",
                   help="a magnitude, e.g. --mag jc.B=10.65,0.01 (repeat for each band)")
    _add_reddening_options(p)
    p.add_argument("--ebv-err", type=float, default=0.0, help="1-sigma error of E(B-V), mag")
    p.add_argument("--av", type=float, help="A_V, mag, instead of --ebv (E(B-V) = A_V / R_V)")
    p.add_argument("--av-err", type=float, help="1-sigma error of A_V, mag")
    p.add_argument("--fit-ebv", action="store_true", help="fit E(B-V) too (3+ bands; --ebv/--ebv-err as prior)")
    p.add_argument("--parallax", type=float, help="parallax, mas (for radius and luminosity)")
    p.add_argument("--parallax-err", type=float, help="parallax error, mas")
    p.add_argument("--feh", type=float, help="[Fe/H], dex (calibrations; default solar)")
    p.add_argument("--logg", type=float, help="log g, cgs dex (calibrations: dwarf or giant)")
    p.add_argument("--method", default="auto", choices=["auto", "colour", "fit"],
                   help="colour inversion (2 bands), multi-band fit, or auto (default)")
    p.add_argument("--monte-carlo", type=int, default=0, metavar="N",
                   help="N noisy realisations for percentile intervals (default: analytic)")
    p.add_argument("--seed", type=int, help="random seed for --monte-carlo")
    p.add_argument("--plot", metavar="FILE", help="write the fit with residuals (PNG)")
    _add_replace_option(p)
    p.add_argument("--json", action="store_true", help="machine-readable output")
    p.set_defaults(func=_cmd_star)

    _register_module_commands(sub)
    return parser


def _register_module_commands(sub):
    """Subcommands that live beside their own modules."""
    from . import calibrations, tour
    from .catalog import cli_hooks as catalogue_cli
    from .observing import cli_hooks as observing_cli

    calibrations.add_cli(sub)
    catalogue_cli.add_cli(sub)
    observing_cli.add_cli(sub)
    tour.add_cli(sub)


def main(argv=None):
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "command", None):
        parser.print_help()
        return EXIT_BAD_INPUT
    try:
        if getattr(args, "observing_command", None):
            from .observing import cli_hooks as observing_cli

            return observing_cli.run_cli(args)
        return int(args.func(args) or 0)
    except StelltempError as exc:
        print(f"stelltemp: error: {exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except (OSError, ValueError) as exc:
        print(f"stelltemp: error: {exc.__class__.__name__}: {exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print("stelltemp: interrupted", file=sys.stderr)
        return 130
    except Exception as exc:  # a bug of ours: one line, unless debugging
        if os.environ.get("STELLTEMP_DEBUG"):
            raise
        print(f"stelltemp: internal error: {exc.__class__.__name__}: {exc} "
              "(set STELLTEMP_DEBUG=1 for the traceback, and please report it)", file=sys.stderr)
        return 1


if __name__ == "__main__":
    sys.exit(main())
