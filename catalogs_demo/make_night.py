"""Generate the invented night of instrumental photometry (standards + targets).

INVENTED DATA. Every star, field and number written by this script is
invented; none describes a real object.  Run from the repository root:

    PYTHONPATH=. python catalogs_demo/make_night.py

Kept separate from ``make_demo.py`` (which makes the target list): this
script only writes the ``night_*`` files.

How the measurements are made (fixed seed):

* 3 invented standard fields of 8 stars each (``std-A1`` … ``std-C8``),
  blackbodies of 3,600–16,000 K with E(B−V) 0–0.15, and 10 invented
  targets (``demo-N01`` … ``demo-N10``) in a fourth field;
* each field is observed in B, V, R, I with the demo CCD instrument
  (``instruments/quillmere_04m_ccd.toml``) at three times of the night of
  2026-11-08 (airmass from time and position at the site);
* the instrumental magnitude −2.5 log10(e⁻ s⁻¹) is the synthetic magnitude
  through the instrument's natural passband times a model atmosphere
  (:func:`stelltemp.reduction.predict.natural_magnitudes`), plus Gaussian
  noise of the quoted error (photon, sky and read noise of a 0.5 % floor);
* the standard list quotes each standard's true standard magnitudes plus
  noise of 0.005 mag (its quoted error).

The transformation this implies (the coefficients of the linearised
equation fitted to the same synthetic photometry, over the grid of
:func:`stelltemp.reduction.predict.predict_colour_terms`) is written to
``night_coefficients.toml`` so that a fit of the night can be checked
against it; the targets' true standard magnitudes go to ``night_truth.csv``.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

from astropy.time import Time, TimeDelta  # noqa: E402

from stelltemp.bandgrid import blackbody_mag  # noqa: E402
from stelltemp.observing.instrument import load_instrument  # noqa: E402
from stelltemp.reduction.atmosphere import Atmosphere  # noqa: E402
from stelltemp.reduction.equations import default_setups  # noqa: E402
from stelltemp.reduction.observations import airmass_from_position  # noqa: E402
from stelltemp.reduction.predict import natural_magnitudes, predict_colour_terms  # noqa: E402

SEED = 20261108
INSTRUMENT = HERE / "instruments" / "quillmere_04m_ccd.toml"
DATE_UTC = "2026-11-08"
#: invented field centres (ICRS deg) and the UTC hours each is observed
FIELDS = {
    "A": (330.0, 15.0, ("18:50", "21:00", "23:15")),
    "B": (30.0, 10.0, ("19:40", "22:40", "03:10")),
    "C": (85.0, 5.0, ("23:00", "02:40", "04:50")),
    "N": (45.0, 20.0, ("23:40", "04:10")),  # the targets, two visits
}
STD_ERR = 0.005
#: aerosol extinction of the invented night (mag per airmass at 0.55 um)
AEROSOL = 0.08
#: invented S/N model: error = hypot(floor, 0.01 * 10**(0.4 (m - 13)))
FLOOR = 0.005


def _stars(rng, field, n, prefix):
    ra0, dec0, _ = FIELDS[field]
    t = np.exp(rng.uniform(np.log(3600.0), np.log(16000.0), n))
    e = rng.uniform(0.0, 0.15, n)
    v = rng.uniform(9.5, 13.5, n)
    ra = ra0 + rng.uniform(-0.15, 0.15, n)
    dec = dec0 + rng.uniform(-0.15, 0.15, n)
    names = [f"{prefix}{i + 1}" if prefix.startswith("std") else f"{prefix}{i + 1:02d}" for i in range(n)]
    return names, t, e, v, ra, dec


def main():
    rng = np.random.default_rng(SEED)
    inst = load_instrument(INSTRUMENT)
    atm = Atmosphere(inst.site.elevation_m, aerosol_mag=AEROSOL)
    bands = {name: spec.passband.key for name, spec in inst.filters.items()}
    vkey = bands["V"]
    obs_rows, std_rows, truth_rows = [], [], []
    for field in FIELDS:
        is_target = field == "N"
        names, t, e, v, ra, dec = _stars(rng, field, 10 if is_target else 8,
                                         "demo-N" if is_target else f"std-{field}")
        std = {k: blackbody_mag(k, t, e) - blackbody_mag(vkey, t, e) + v for k in bands.values()}
        for i, n in enumerate(names):
            if is_target:
                truth_rows.append([n, f"{t[i]:.1f}", f"{e[i]:.4f}"] + [f"{std[k][i]:.4f}" for k in bands.values()])
            else:
                std_rows.append([n] + [f"{std[k][i] + rng.normal(0, STD_ERR):.4f},{STD_ERR}" for k in bands.values()])
        for visit, hhmm in enumerate(FIELDS[field][2]):
            day = DATE_UTC if hhmm >= "12:00" else None
            when = Time(f"{DATE_UTC}T{hhmm}:00", scale="utc")
            if day is None:
                when = when + TimeDelta(1.0, format="jd")
            for fi, (fname, key) in enumerate(bands.items()):
                ti = when + TimeDelta(120.0 * fi, format="sec")  # one filter after the other
                x = airmass_from_position([ti.isot] * len(names), ra, dec, inst.site)
                if np.any(~np.isfinite(x)) or np.any(x > 3.0):
                    raise SystemExit(f"field {field} too low at {ti.isot}: airmass {np.nanmax(x):.2f}")
                for i, n in enumerate(names):
                    m_nat = natural_magnitudes(inst, fname, [t[i]], [e[i]], [x[i]], atm)[0, 0, 0]
                    m = m_nat + (v[i] - blackbody_mag(vkey, t[i], e[i]))
                    err = float(np.hypot(FLOOR, 0.01 * 10 ** (0.4 * (m + 21.5 - 13.0))))
                    obs_rows.append([n, fname, f"{m + rng.normal(0, err):.4f}", f"{err:.4f}",
                                     ti.isot[:19], f"{ra[i]:.5f}", f"{dec[i]:.5f}", f"v{visit + 1}",
                                     "invented"])
    header = "star,filter,inst_mag,inst_mag_err,time_utc,ra,dec,visit,provenance"
    (HERE / "night_observations.csv").write_text(header + "\n" + "\n".join(",".join(r) for r in obs_rows) + "\n")
    keys = list(bands.values())
    (HERE / "night_standards.csv").write_text(
        "star," + ",".join(f"{k},{k}_err" for k in keys) + ",provenance\n"
        + "\n".join(",".join(r) + ",invented" for r in std_rows) + "\n")
    (HERE / "night_truth.csv").write_text(
        "star,t_true,ebv_true," + ",".join(f"{k}_true" for k in keys) + ",provenance\n"
        + "\n".join(",".join(r) + ",invented" for r in truth_rows) + "\n")
    setups = default_setups(bands, second_order={"B"})  # the demo reduction fits k'' in B
    pred = predict_colour_terms(inst, setups, atmosphere=atm)
    lines = ["# INVENTED: the transformation implied by the generator of the invented night",
             "# (linearised equation fitted to the same synthetic photometry; blackbodies 3,500-20,000 K,",
             "# E(B-V) 0-0.5, airmass 1-2). Instrumental magnitudes are -2.5 log10(e-/s).",
             f'atmosphere = "{atm.describe()}"', f"seed = {SEED}", ""]
    for f, p in pred.items():
        lines.append("[[filter]]")
        lines.append(f'name = "{f}"\nband = "{p.setup.band}"\ncolour = ["{p.setup.colour[0]}", "{p.setup.colour[1]}"]')
        for k, val in p.coefficients.items():
            lines.append(f"{k} = {float(val):.5f}")
        lines.append(f"nonlinearity_max_mag = {p.nonlinearity_max:.5f}\n")
    (HERE / "night_coefficients.toml").write_text("\n".join(lines))
    print(f"wrote {len(obs_rows)} measurements, {len(std_rows)} standards, {len(truth_rows)} targets")


if __name__ == "__main__":
    main()
