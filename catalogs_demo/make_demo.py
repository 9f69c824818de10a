"""Generate the invented demo scenario: one night of multi-band photometry.

EVERY VALUE THIS SCRIPT WRITES IS INVENTED.  The scenario: the Quillmere
teaching observatory (invented; the site of ``instruments/quillmere_04m_ccd.toml``)
plans the night of ``DATE`` for 40 field stars and the 20 members of a
compact cluster we call the "Lantern cluster" (invented).  No real
observatory, person, star or catalogue is described.

How the stars are made (all draws from one seeded generator):

* true effective temperatures 2,900–25,000 K, log-uniform for the field;
  cluster dwarfs 5,500–20,000 K plus three cool giants; some field stars
  between 4,000 and 5,200 K are drawn as giants (8–40 R☉);
* radii from a rough main-sequence scaling R/R☉ ≈ (T/5772 K)^1.45 (a
  teaching approximation, not a stellar model); log g from the radius and a
  mass of R^1.33 M☉ (dwarfs) or 1.5 M☉ (giants);
* the star's **intrinsic colours are those of real stars**, not of
  blackbodies: dwarfs take the mean colours of Pecaut & Mamajek 2013 (ApJS
  208, 9, Table 5; the maintained online version in
  ``stelltemp/data/calibrations/pecaut2013_table5.ecsv``), interpolated
  linearly in T_eff between subtypes; giants take their Gaia and 2MASS
  colours (BP−Ks, RP−Ks, BP−J, BP−H) from the giant relations of
  Casagrande et al. 2021 (MNRAS 507, 2684) at their log g and [Fe/H], and —
  a teaching simplification, there is no giant sequence here — their
  Johnson–Cousins colours and bolometric correction from the dwarf sequence
  at the same T_eff;
* the V magnitude from the bolometric flux σT⁴(θ/2)² (θ = 2R/d) and the
  sequence's bolometric correction BC_V (m_bol = −2.5 log10 F/(W m⁻²)
  − 18.997, IAU 2015 Resolution B2);
* extinction through each passband: A = M(T, E) − M(T, 0) of a blackbody at
  the star's T_eff reddened by the G23 law, R_V = 3.1
  (``stelltemp.bandgrid.blackbody_mag``) — the spectrum shape enters only
  through that weighting;
* field distances chosen so that V falls near 7.5–13.5 mag; field
  reddening grows with distance, E(B−V) = U(0, 0.3) × (1 − e^(−d / 500 pc));
  the cluster sits at 560 pc with E(B−V) = 0.25 and a 0.012 mag star-to-star
  scatter;
* Gaussian noise with a brightness-dependent 1σ error of 0.01–0.05 mag;
  bands the sequence has no colour for (U of the latest M dwarfs, Gaia BP
  and RP of stars hotter than B9V) are left empty;
* "measured" E(B−V), parallaxes and log g are the true values plus Gaussian
  noise of the quoted error (log g ± 0.1 dex; left empty for a quarter of
  the field dwarfs, whose class the engine then assumes); [Fe/H] ~ N(0, 0.2)
  in the field, −0.05 ± 0.03 in the cluster (the dwarf sequence has no
  metallicity term, so [Fe/H] changes only the giants' colours);
* coordinates are drawn until the star has at least two hours above 30°
  in astronomical darkness at the site on ``DATE``.

Because the colours are those of stars, a blackbody fit recovers a colour
temperature T_bb that differs from T_eff by hundreds of K; the calibrated
T_eff of the engine (``teff_cal``) is what should match ``t_true``.

Two rows carry deliberate defects for teaching: one star has the sentinel
99.999 (error 9.999) in B_JC, as old reductions write for "no measurement";
another was measured in V only.

Run from the repository root::

    PYTHONPATH=. python catalogs_demo/make_demo.py

It rewrites ``targets.csv``, ``truth.csv`` and ``scenario.toml`` beside
itself, identically for the same code and libraries.  Both CSV files end
with a ``provenance`` column that says ``invented`` on every row (the files
carry no comment header: the night-plan reader does not skip '#' lines).
"""

from __future__ import annotations

import csv
import math
import sys
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
if str(HERE.parent) not in sys.path:  # run from a source checkout
    sys.path.insert(0, str(HERE.parent))

from stelltemp.bandgrid import blackbody_mag  # noqa: E402
from stelltemp.calibrations import CALIBRATION_DIR, get_relation  # noqa: E402

SEED = 20261108
#: local date of the evening (a night near new Moon at the invented site)
DATE = "2026-11-08"
INSTRUMENT = HERE / "instruments" / "quillmere_04m_ccd.toml"
LAW, RV = "G23", 3.1

OPTICAL = ["U_JC", "B_JC", "V_JC", "Rc_JC", "Ic_JC"]
INFRARED = ["J_2MASS", "H_2MASS", "Ks_2MASS"]
GAIA = ["BP_GDR3", "RP_GDR3"]
BANDS = OPTICAL + INFRARED + GAIA

N_FIELD, N_CLUSTER = 40, 20
#: invented cluster: centre (deg), distance (pc), reddening (mag) and metallicity (dex)
CLUSTER = {"ra": 61.25, "dec": 30.67, "radius_deg": 0.08, "distance_pc": 560.0,
           "ebv": 0.25, "ebv_scatter": 0.012, "ebv_quoted_err": 0.02, "feh": -0.05, "feh_scatter": 0.03}

T_SUN = 5772.0
#: 1σ of the invented spectroscopic log g (dex)
LOGG_ERR = 0.1
#: field temperatures are drawn log-uniformly in this range (K)
T_FIELD = (2900.0, 25000.0)
#: field stars in this range may be giants (the giant relations' reach)
T_GIANT = (4000.0, 5200.0)
#: the dwarf colour sequence (Pecaut & Mamajek 2013, Table 5, online version)
SEQUENCE = CALIBRATION_DIR / "pecaut2013_table5.ecsv"
SIGMA_SB = 5.670374419e-8     # W m^-2 K^-4 (CODATA 2018, exact)
MBOL_ZERO = -18.997351        # m_bol = -2.5 log10(F / W m^-2) + this (IAU 2015 Resolution B2)
LOGG_SUN = 4.438              # cgs dex, the nominal Sun (common practice)
RSUN_M = 6.957e8
PC_M = 3.0856775814913673e16
MAS_PER_RAD = 180.0 / math.pi * 3600e3



def main_sequence_radius(t):
    """Rough dwarf radius in R☉ for temperature t (K): (T/5772)^1.45 (teaching approximation)."""
    return (np.asarray(t, float) / T_SUN) ** 1.45


def surface_gravity(radius_rsun, giant):
    """log g (cgs dex) from the radius: mass R^1.33 M☉ for dwarfs, 1.5 M☉ for giants (invented)."""
    r = np.asarray(radius_rsun, float)
    mass = np.where(giant, 1.5, r ** 1.33)
    return LOGG_SUN + np.log10(mass) - 2 * np.log10(r)


def mag_error(m):
    """1σ error (mag) of a measurement of magnitude m: 0.01 at the bright end to 0.05 at the faint end."""
    return np.clip(0.009 + 0.003 * 10 ** (0.2 * (np.asarray(m, float) - 9.0)), 0.01, 0.05)


def _sequence():
    from astropy.table import Table

    seq = Table.read(SEQUENCE, format="ascii.ecsv")
    order = np.argsort(np.asarray(seq["teff"], float))
    return {c: np.asarray(seq[c], float)[order] for c in seq.colnames if c != "spt"}


def dwarf_sequence(t):
    """Intrinsic colours and BC_V of the dwarf sequence at T_eff t, linear in T between subtypes.

    Returns a dict of column name → array (NaN where the sequence has no value).
    """
    seq = _sequence()
    t = np.asarray(t, float)
    return {c: np.interp(t, seq["teff"], v, left=np.nan, right=np.nan) for c, v in seq.items() if c != "teff"}


def _invert(key, t, feh, logg):
    """The colour at which relation ``key`` gives T_eff t (bisection inside its colour range)."""
    from scipy.optimize import brentq

    rel = get_relation(key)
    lo, hi = rel.colour_range
    out = np.full(np.shape(t), np.nan)
    for i, (ti, zi, gi) in enumerate(zip(np.atleast_1d(t), np.atleast_1d(feh), np.atleast_1d(logg))):
        f = lambda x: float(rel.teff(x, zi, gi)[0]) - ti  # noqa: E731
        if np.isfinite(f(lo)) and np.isfinite(f(hi)) and f(lo) * f(hi) < 0:
            out[i] = brentq(f, lo, hi, xtol=1e-6)
    return out


def intrinsic_offsets(t, giant, feh, logg):
    """Intrinsic magnitudes relative to V in every band, and BC_V, for each star."""
    seq = dwarf_sequence(t)
    off = {"V_JC": np.zeros(len(t))}
    off["B_JC"] = seq["B-V"]
    off["U_JC"] = seq["B-V"] + seq["U-B"]
    off["Rc_JC"] = -seq["V-Rc"]
    off["Ic_JC"] = -seq["V-Ic"]
    off["Ks_2MASS"] = -seq["V-Ks"]
    off["H_2MASS"] = off["Ks_2MASS"] + seq["H-Ks"]
    off["J_2MASS"] = off["H_2MASS"] + seq["J-H"]
    g = seq["G-V"]
    off["RP_GDR3"] = g - seq["G-RP"]
    off["BP_GDR3"] = off["RP_GDR3"] + seq["BP-RP"]
    if np.any(giant):
        i = np.flatnonzero(giant)
        ks = off["Ks_2MASS"][i]
        bp = ks + _invert("c21_bpks_giant", t[i], feh[i], logg[i])
        off["BP_GDR3"][i] = bp
        off["RP_GDR3"][i] = ks + _invert("c21_rpks_giant", t[i], feh[i], logg[i])
        off["J_2MASS"][i] = bp - _invert("c21_bpj_giant", t[i], feh[i], logg[i])
        off["H_2MASS"][i] = bp - _invert("c21_bph_giant", t[i], feh[i], logg[i])
    return off, seq["BC_V"]


def magnitudes(t, ebv, theta_rad, giant, feh, logg):
    """Noise-free apparent magnitudes of each star in every band (NaN where no colour exists)."""
    t = np.asarray(t, float)
    off, bc_v = intrinsic_offsets(t, giant, feh, logg)
    fbol = SIGMA_SB * t**4 * (np.asarray(theta_rad, float) / 2) ** 2
    v = -2.5 * np.log10(fbol) + MBOL_ZERO - bc_v
    return {b: v + off[b] + blackbody_mag(b, t, ebv, LAW, RV) - blackbody_mag(b, t, 0.0, LAW, RV) for b in BANDS}


def theta_rad(radius_rsun, distance_pc):
    return 2 * radius_rsun * RSUN_M / (distance_pc * PC_M)


def _v_at_10pc(p):
    """V of each star at 10 pc without dust (for choosing distances)."""
    return magnitudes(p["t"], 0.0, theta_rad(p["radius"], 10.0), p["giant"], p["feh"], p["logg"])["V_JC"]


def draw_field(rng):
    """True parameters of the field stars."""
    t = np.exp(rng.uniform(np.log(T_FIELD[0]), np.log(T_FIELD[1]), N_FIELD))
    radius = main_sequence_radius(t)
    giant = (t > T_GIANT[0]) & (t < T_GIANT[1]) & (rng.uniform(size=N_FIELD) < 0.4)
    radius[giant] = np.exp(rng.uniform(np.log(8.0), np.log(40.0), giant.sum()))
    v_goal = rng.uniform(7.5, 13.5, N_FIELD)
    feh = rng.normal(0.0, 0.2, N_FIELD)
    p = {"t": t, "radius": radius, "giant": giant, "feh": feh, "logg": surface_gravity(radius, giant)}
    # distance for the goal V without dust, then dust that grows with distance, then V again
    dist = np.clip(10.0 * 10 ** ((v_goal - _v_at_10pc(p)) / 5), 15.0, 4000.0)
    ebv = rng.uniform(0.0, 0.3, N_FIELD) * (1 - np.exp(-dist / 500.0))
    return {**p, "distance": dist, "ebv": ebv}


def draw_cluster(rng):
    """True parameters of the cluster members (common distance and reddening)."""
    n_giant = 3
    t = np.concatenate([np.exp(rng.uniform(np.log(5500.0), np.log(20000.0), N_CLUSTER - n_giant)),
                        rng.uniform(4400.0, 5000.0, n_giant)])
    radius = main_sequence_radius(t)
    radius[-n_giant:] = rng.uniform(9.0, 14.0, n_giant)
    giant = np.zeros(N_CLUSTER, bool)
    giant[-n_giant:] = True
    dist = CLUSTER["distance_pc"] + rng.normal(0.0, 3.0, N_CLUSTER)  # cluster depth, a few pc
    ebv = CLUSTER["ebv"] + rng.normal(0.0, CLUSTER["ebv_scatter"], N_CLUSTER)
    feh = CLUSTER["feh"] + rng.normal(0.0, CLUSTER["feh_scatter"], N_CLUSTER)
    order = np.argsort(-t)  # hottest first: names run down the cluster sequence
    p = {"t": t, "radius": radius, "giant": giant, "distance": dist, "ebv": ebv, "feh": feh,
         "logg": surface_gravity(radius, giant)}
    return {k: v[order] for k, v in p.items()}


def night_checker():
    """A function (ra_deg, dec_deg) -> hours above 30° in astronomical darkness on DATE."""
    from stelltemp.observing import night
    from stelltemp.observing.instrument import load_instrument

    site = load_instrument(INSTRUMENT).site
    tw = night.twilight_times(DATE, site)
    dark = night.dark_interval(tw, "astronomical")
    grid = night.night_grid(DATE, site, 10.0)
    mask = (grid >= dark[0]) & (grid <= dark[1])
    loc = site.location()

    def hours_up(ra, dec):
        alt, _ = night.altaz_of((np.atleast_1d(ra), np.atleast_1d(dec)), grid, loc)
        return (mask[None, :] & (alt >= 30.0)).sum(axis=1) * 10.0 / 60.0

    return hours_up


def field_coordinates(rng, n, hours_up):
    """Coordinates spread over the sky that is dark and high on DATE (rejection sampling)."""
    ra, dec = [], []
    while len(ra) < n:
        r = rng.uniform(0.0, 360.0, 4 * n)
        d = np.degrees(np.arcsin(rng.uniform(np.sin(np.radians(-15.0)), np.sin(np.radians(75.0)), 4 * n)))
        ok = hours_up(r, d) >= 2.0
        # keep clear of the invented cluster so the field stays a field
        ok &= np.hypot((r - CLUSTER["ra"]) * np.cos(np.radians(d)), d - CLUSTER["dec"]) > 2.0
        ra.extend(r[ok].tolist())
        dec.extend(d[ok].tolist())
    return np.array(ra[:n]), np.array(dec[:n])


def cluster_coordinates(rng, n):
    """Members within CLUSTER['radius_deg'] of the centre, concentrated towards it."""
    r = CLUSTER["radius_deg"] * np.sqrt(rng.uniform(0.0, 1.0, n)) * rng.uniform(0.3, 1.0, n)
    phi = rng.uniform(0.0, 2 * np.pi, n)
    dec = CLUSTER["dec"] + r * np.sin(phi)
    ra = CLUSTER["ra"] + r * np.cos(phi) / np.cos(np.radians(CLUSTER["dec"]))
    return ra, dec


def build(rng=None):
    """All rows of targets.csv and truth.csv, as two lists of dicts."""
    rng = rng or np.random.default_rng(SEED)
    field, clus = draw_field(rng), draw_cluster(rng)
    hours_up = night_checker()
    f_ra, f_dec = field_coordinates(rng, N_FIELD, hours_up)
    c_ra, c_dec = cluster_coordinates(rng, N_CLUSTER)
    targets, truth = [], []
    groups = [("field", "demo-F", field, f_ra, f_dec), ("cluster", "demo-C", clus, c_ra, c_dec)]
    for group, prefix, p, ras, decs in groups:
        n = len(p["t"])
        th = theta_rad(p["radius"], p["distance"])
        true_mags = magnitudes(p["t"], p["ebv"], th, p["giant"], p["feh"], p["logg"])
        has_gaia = rng.uniform(size=n) < 0.7
        plx_true = 1000.0 / p["distance"]
        plx_err = rng.uniform(0.02, 0.08, n)
        plx = plx_true + plx_err * rng.standard_normal(n)
        if group == "field":
            ebv_err = rng.uniform(0.02, 0.05, n)
            ebv_meas = p["ebv"] + ebv_err * rng.standard_normal(n)
            feh_meas = p["feh"] + 0.1 * rng.standard_normal(n)
        else:  # the cluster's reddening and metallicity are quoted for the cluster as a whole
            ebv_err = np.full(n, CLUSTER["ebv_quoted_err"])
            ebv_meas = np.full(n, CLUSTER["ebv"])
            feh_meas = np.full(n, CLUSTER["feh"])
        noise = {b: rng.standard_normal(n) for b in BANDS}
        logg_meas = p["logg"] + LOGG_ERR * rng.standard_normal(n)
        # a quarter of the field dwarfs have no log g yet: the engine says which class it assumed
        logg_known = p["giant"] | (rng.uniform(size=n) >= (0.25 if group == "field" else 0.0))
        for i in range(n):
            name = f"{prefix}{i + 1:02d}"
            row = {"name": name, "group": group, "ra": round(float(ras[i]), 5), "dec": round(float(decs[i]), 5)}
            mags = {}
            for b in BANDS:
                if (b in GAIA and not has_gaia[i]) or not np.isfinite(true_mags[b][i]):
                    mags[b] = (None, None)  # not observed, or no colour for it in the sequence
                    continue
                err = float(mag_error(true_mags[b][i]))
                mags[b] = (round(float(true_mags[b][i] + err * noise[b][i]), 3), round(err, 3))
            if group == "field" and i == 6:  # deliberate defect: a "no measurement" sentinel in B
                mags["B_JC"] = (99.999, 9.999)
            if group == "field" and i == 22:  # deliberate defect: observed in V only so far
                mags = {b: (mags[b] if b == "V_JC" else (None, None)) for b in BANDS}
            row["mag"], row["band"] = mags["V_JC"][0], "V_JC"  # for the night plan
            for b in BANDS:
                row[b], row[b + "_err"] = mags[b]
            row.update({"ebv": round(float(ebv_meas[i]), 3), "ebv_err": round(float(ebv_err[i]), 3),
                        "parallax": round(float(plx[i]), 4), "parallax_err": round(float(plx_err[i]), 4),
                        "feh": round(float(feh_meas[i]), 2),
                        "logg": round(float(logg_meas[i]), 2) if logg_known[i] else None})
            targets.append(row)
            tr = {"name": name, "group": group, "t_true": round(float(p["t"][i]), 1),
                  "theta_true_mas": float(f"{th[i] * MAS_PER_RAD:.6g}"),
                  "radius_true_rsun": round(float(p["radius"][i]), 4),
                  "distance_true_pc": round(float(p["distance"][i]), 2),
                  "ebv_true": round(float(p["ebv"][i]), 4),
                  "parallax_true": round(float(plx_true[i]), 5),
                  "feh_true": round(float(p["feh"][i]), 3),
                  "logg_true": round(float(p["logg"][i]), 3),
                  "stage": "giant" if p["giant"][i] else "dwarf"}
            for b in BANDS:
                tr[f"{b}_true"] = round(float(true_mags[b][i]), 4) if np.isfinite(true_mags[b][i]) else None
            truth.append(tr)
    return targets, truth


#: every row says where it came from; the files carry no comment header because the
#: night-plan reader (astropy's plain CSV) does not skip '#' lines
PROVENANCE = "invented"


def write_csv(path, rows):
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.DictWriter(fh, fieldnames=list(rows[0]) + ["provenance"], lineterminator="\n")
        w.writeheader()
        for r in rows:
            w.writerow({**{k: ("" if v is None else v) for k, v in r.items()}, "provenance": PROVENANCE})


#: the star whose fit and exposures the tour draws (a clean, mid-temperature cluster member)
SHOWCASE = "demo-C12"
#: signal-to-noise goal of the night plan
SNR_GOAL = 100


def write_scenario(path):
    """The scenario file the tour reads (date, instrument, files, fit settings)."""
    path.write_text(
        "# INVENTED demo scenario for stelltemp: every value is invented (see README.md).\n"
        "# Written by make_demo.py; read by `stelltemp tour`.\n"
        'title = "Quillmere teaching observatory (invented): one night of multi-band photometry"\n'
        f'date = "{DATE}"                 # local date of the evening\n'
        f'instrument = "instruments/{INSTRUMENT.name}"\n'
        'targets = "targets.csv"\n'
        'truth = "truth.csv"\n'
        f'extinction_law = "{LAW}"\n'
        f"r_v = {RV}\n"
        f"snr_goal = {SNR_GOAL}\n"
        f'showcase_star = "{SHOWCASE}"\n',
        encoding="utf-8")


def main():
    targets, truth = build()
    write_csv(HERE / "targets.csv", targets)
    write_csv(HERE / "truth.csv", truth)
    write_scenario(HERE / "scenario.toml")
    print(f"wrote {len(targets)} invented stars to {HERE / 'targets.csv'} and {HERE / 'truth.csv'}")


if __name__ == "__main__":
    main()
