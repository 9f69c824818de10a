"""``stelltemp blackbody``: Planck, Wien and Stefan–Boltzmann quantities for one temperature."""

import sys

from . import options
from .output import emit_json, number

NAME = "blackbody"
HELP = "Planck, Wien and Stefan-Boltzmann quantities for a temperature"
DESCRIPTION = (
    "Wien peaks (of B_lambda, of the photon rate and of B_nu), the surface flux and, given a radius, "
    "the luminosity of a blackbody; optionally the radiance at one wavelength and a figure of the "
    "spectrum."
)
DEFAULT_BANDS = ["B_JC", "V_JC", "Ic_JC", "Ks_2MASS"]


def add(p):
    """Register the options of this subcommand on ``p`` (made by :func:`stelltemp.cli.options.subcommand`)."""
    p.add_argument("temperature", help="temperature (a number; its unit from --unit)")
    p.add_argument("--unit", default="K", choices=["K", "C", "F"], help="unit of the temperature")
    p.add_argument("--radius", type=float, metavar="R_SUN", help="radius in R_sun, to give the luminosity")
    p.add_argument("--wavelength", type=float, metavar="NM",
                   help="also give B_lambda and B_nu at this wavelength, nm")
    options.renamed(p, "--at", "--wavelength", "wavelength", type=float, metavar="NM")
    p.add_argument("--bands", nargs="*", default=DEFAULT_BANDS, help="passbands drawn on the --plot figure")
    return options.add_closing(p, plot="the spectrum with the passbands and the Wien peak", replace="--plot file")


def run(args, out=None, err=None):
    from ..parsing import parse_temperature
    from ..planck import blackbody_report

    out = out or sys.stdout
    t = parse_temperature(args.temperature, args.unit)
    rep = blackbody_report(t, args.radius, args.wavelength)
    if args.plot:
        from ..plots import plot_spectrum_with_passbands

        plot_spectrum_with_passbands(t.value, args.bands, args.plot, replace=args.replace)
        rep["plot"] = args.plot
    if args.json:
        emit_json(rep, out)
        return 0
    g = number
    print(f"Blackbody at T = {g(t.value, 'K', 6)}", file=out)
    print(f"  peak of B_lambda (Wien)          {g(rep['peak_wavelength_B_lambda_nm'], 'nm', 6)}", file=out)
    print(f"  peak of photon rate per nm       {g(rep['peak_wavelength_photons_nm'], 'nm', 6)}", file=out)
    print(f"  peak of B_nu                     {g(rep['peak_frequency_B_nu_THz'], 'THz', 6)} "
          f"(= {g(rep['wavelength_of_B_nu_peak_nm'], 'nm', 6)})", file=out)
    print(f"  surface flux sigma T^4           {g(rep['surface_flux_W_m2'], 'W m^-2', 6)}", file=out)
    if "luminosity_W" in rep:
        print(f"  luminosity (R = {args.radius:g} R_sun)    {g(rep['luminosity_W'], 'W', 6)} "
              f"= {g(rep['luminosity_Lsun'], 'L_sun', 6)}", file=out)
    if "B_lambda_W_m2_nm_sr" in rep:
        print(f"  at {args.wavelength:g} nm: B_lambda = {g(rep['B_lambda_W_m2_nm_sr'], 'W m^-2 nm^-1 sr^-1', 6)}, "
              f"B_nu = {g(rep['B_nu_W_m2_Hz_sr'], 'W m^-2 Hz^-1 sr^-1', 6)}", file=out)
    print("  (the three peaks differ: they are maxima of different distributions)", file=out)
    if args.plot:
        print(f"  figure: {args.plot}", file=out)
    return 0
