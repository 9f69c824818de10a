"""What a catalogue output says about itself: column units, descriptions and the run record.

Every output table carries, whatever its format:

* a **unit** on each input column whose meaning is known (magnitudes and
  their errors and E(B−V) in mag, parallax in mas, right ascension and
  declination in deg) where the input had none, and on every result column;
* a **description** on every result column (`RESULT_DESCRIPTIONS`) and on
  each mapped input column;
* the **run record** (`run_record`): one flat mapping of text keys to plain
  values (text, numbers, booleans), the same keys in every format:

  ==========================  ===============================================
  key                         value
  ==========================  ===============================================
  ``tool_name``               ``stelltemp``; ``tool_version`` its version
  ``run_time_utc``            start of the run (ISO 8601, UTC)
  ``method_requested``        ``auto``, ``colour`` or ``fit`` (per row:
                              column ``t_bb_method``)
  ``passbands``               the passband keys, comma-separated
  ``passband_<key>_*``        ``system``, ``magsys``, ``detector``,
                              ``zero_point_mag`` (adopted Vega magnitude),
                              ``source`` (curve and zero-point citations)
  ``vega_spectrum``           the Vega spectrum and its citation
  ``extinction_law``          law name; ``extinction_law_source`` its paper
  ``R_V``                     total-to-selective extinction ratio
  ``ebv_source``              where E(B−V) came from (column, value, fitted)
  ``flag_<bit>_*``            ``name``, ``severity``, ``meaning`` of each bit
                              (as the engine defines them)
  ``assumption_<n>``          every default that can change a number
  ``blackbody_note``          blackbody versus effective temperature
  ==========================  ===============================================

Key rules, so the record survives every format: no key of eight characters
or fewer other than upper-case ones (FITS upper-cases short keywords; longer
ones travel as HIERARCH cards, which keep their case), no dot in
keys (FITS reads ``name.field`` with a number as a record-valued card;
passband keys appear with ``_`` for ``.``, see `record_key`), no nesting.
"""

from __future__ import annotations

import re

#: description of each column the engine and the catalogue layer add (units are on the columns)
RESULT_DESCRIPTIONS = {
    "t_bb": "blackbody colour temperature (not an effective temperature)",
    "t_bb_lo": "lower end of the 68 % interval of t_bb",
    "t_bb_hi": "upper end of the 68 % interval of t_bb (inf: only a lower limit)",
    "t_bb_err": "half-width of the 68 % interval of t_bb",
    "theta": "angular diameter of the fitted blackbody",
    "theta_err": "1-sigma error of theta",
    "ebv_used": "E(B-V) applied through the passbands (given, or fitted)",
    "ebv_used_err": "1-sigma error of ebv_used",
    "n_bands": "number of passbands that entered the result",
    "chi2": "chi-squared of the multi-band blackbody fit (empty for a single colour)",
    "dof": "degrees of freedom of chi2",
    "p_value": "probability of a chi2 at least this large if the star were a reddened blackbody",
    "lambda_peak": "Wien peak wavelength of B_lambda at t_bb",
    "lambda_peak_err": "1-sigma error of lambda_peak",
    "fbol": "bolometric flux at Earth of the blackbody, sigma T^4 (theta/2)^2",
    "fbol_err": "1-sigma error of fbol",
    "radius": "radius from theta and the parallax",
    "radius_err": "1-sigma error of radius",
    "luminosity": "luminosity from fbol and the parallax (Stefan-Boltzmann)",
    "luminosity_err": "1-sigma error of luminosity",
    "teff_cal": "effective temperature from empirical colour-T_eff calibrations (the T_eff to quote)",
    "teff_cal_err": "1-sigma error of teff_cal (photometry, reddening and the relations' scatter)",
    "n_cal": "number of calibrated relations combined into teff_cal",
    "teff_cal_lo": "lower end of the 68 % interval of teff_cal",
    "teff_cal_hi": "upper end of the 68 % interval of teff_cal",
    "cal_used": "keys of the calibrated relations combined into teff_cal (see `stelltemp relations`)",
    "cal_chi2": "chi-squared of the calibrated temperatures about teff_cal (their covariance included)",
    "cal_dof": "degrees of freedom of cal_chi2",
    "ebv_cal": "E(B-V) that makes the calibrated temperatures of the star's colours agree (when asked for)",
    "ebv_cal_err": "1-sigma error of ebv_cal",
    "assumed": "what was assumed for this row (defaults that change its numbers)",
    "teff_cal_note": "what the calibration assumed for this star (class, [Fe/H]) and why a relation did not apply",
    "flags": "quality flag bits (meanings and severities in the table metadata, flag_<bit>_*)",
    "flag_names": "names of the flag bits set, comma-separated",
    "severity": "severity of the row's worst flag (info, warning, unusable)",
    "input_notes": "why an input value of this row was set aside",
    "t_bb_method": "how t_bb was found: colour (exact inversion of one colour) or fit (multi-band fit)",
}

#: unit of each kind of mapped input
_INPUT_UNITS = {"mag": "mag", "err": "mag", "ebv": "mag", "ebv_err": "mag",
                "parallax": "mas", "parallax_err": "mas"}
_INPUT_TEXT = {"ebv": "E(B-V) (input)", "ebv_err": "1-sigma error of E(B-V) (input)",
               "parallax": "parallax (input)", "parallax_err": "1-sigma error of the parallax (input)",
               "feh": "[Fe/H] in dex (input)", "feh_err": "1-sigma error of [Fe/H] in dex (input)",
               "logg": "log g, cgs, in dex (input)"}
#: input columns known by name alone (common practice in catalogues), case-insensitive
_NAME_UNITS = [
    (re.compile(r"^(ra|dec|raj2000|dej2000|ra_deg|dec_deg|ra_icrs|de_icrs|glon|glat)$", re.I), "deg"),
    (re.compile(r"^(plx|parallax)(_err|_error|_e)?$", re.I), "mas"),
    (re.compile(r"^(mag|vmag|gmag|ebv|e_bv|ebv_err)$", re.I), "mag"),
]


def input_units(colnames, cmap):
    """Units and descriptions of input columns: from the column map, else from the name.

    Parameters
    ----------
    colnames : list of str
        The input's column names.
    cmap : stelltemp.catalog.mapping.ColumnMap
        The run's column map.

    Returns
    -------
    dict of str -> (str or None, str or None)
        Column name -> (unit, description); only columns with something known.

    Examples
    --------
    >>> from stelltemp.catalog.mapping import ColumnMap, BandColumns
    >>> cmap = ColumnMap(bands={"V_JC": BandColumns("Vmag", "e_Vmag")}, columns={"parallax": "plx"})
    >>> info = input_units(["Vmag", "e_Vmag", "plx", "ra", "name"], cmap)
    >>> info["Vmag"], info["plx"][0], info["ra"]
    (('mag', 'V_JC magnitude (input)'), 'mas', ('deg', None))
    """
    out = {}
    for key, spec in cmap.bands.items():
        out[spec.mag] = ("mag", f"{key} magnitude (input)")
        if spec.err:
            out[spec.err] = ("mag", f"1-sigma error of the {key} magnitude (input)")
    for kind, col in cmap.columns.items():
        out[col] = (_INPUT_UNITS.get(kind), _INPUT_TEXT.get(kind))
    for name in colnames:
        if name in out:
            continue
        for pattern, unit in _NAME_UNITS:
            if pattern.match(name):
                out[name] = (unit, None)
                break
    return {k: v for k, v in out.items() if k in set(colnames)}


def describe_result(name):
    """Description of one result column (its name with a ``_result`` suffix included).

    A column nobody described yet gets a plain statement of where it came
    from, so no result column is ever without a description.
    """
    base = name
    while base not in RESULT_DESCRIPTIONS and base.endswith("_result"):
        base = base[: -len("_result")]
    if base in RESULT_DESCRIPTIONS:
        return RESULT_DESCRIPTIONS[base]
    each = re.match(r"^teff_(?P<key>.+?)(?P<err>_err)?$", base)  # one relation's T_eff (cal_detail)
    if each:
        return (f"1-sigma error of the T_eff from relation {each['key']}" if each["err"]
                else f"effective temperature from relation {each['key']} alone")
    return f"result of the stelltemp engine ({base})"


def flag_record():
    """``flag.<bit>.name/severity/meaning`` for every flag bit the engine defines."""
    from stelltemp.engine import flags as F

    levels = getattr(F, "LEVELS", None)
    severity = getattr(F, "SEVERITY", {})
    rules = getattr(F, "RULES", {})
    out = {}
    for bit, name in F.NAMES.items():
        out[f"flag_{bit}_name"] = name
        sev = severity.get(bit)
        if sev is not None:
            out[f"flag_{bit}_severity"] = levels[sev] if levels and isinstance(sev, int) else str(sev)
        if rules.get(bit):
            out[f"flag_{bit}_meaning"] = str(rules[bit])
    return out


def record_key(name):
    """A passband key as part of a record key: no dots (a user curve ``file:my.band`` -> ``file:my_band``).

    FITS reads a keyword holding a dot and a number as a record-valued card,
    so the record keeps dots out of its keys.
    """
    return str(name).replace(".", "_")


def passband_record(keys):
    """``passband.<key>.*`` entries: system, magnitude system, detector, zero point, sources."""
    from stelltemp.passbands import get_passband

    out = {}
    for key in keys:
        p = get_passband(key)
        key = record_key(key)
        out[f"passband_{key}_system"] = str(p.system)
        out[f"passband_{key}_magsys"] = str(p.magsys)
        out[f"passband_{key}_detector"] = str(p.detector)
        if p.vega_mag is not None and str(p.magsys).lower() == "vega":
            out[f"passband_{key}_zero_point_mag"] = float(p.vega_mag)
        out[f"passband_{key}_source"] = str(p.citation)
    return out


VEGA_SPECTRUM = ("CALSPEC alpha_lyr_stis_011 (Bohlin 2014, AJ 147, 127; Bohlin, Gordon & Tremblay 2014, "
                 "PASP 126, 711), from the astro-sedpy package data")


def assumptions(cmap, opts):
    """Every default of the run that can change a number, one sentence each."""
    from stelltemp.engine import DEFAULT_MAG_ERR

    out = []
    missing_err = [k for k, spec in cmap.bands.items() if not spec.err]
    errs = f" (no error column for {', '.join(missing_err)})" if missing_err else ""
    out.append(f"a missing or empty magnitude error is taken as {DEFAULT_MAG_ERR:g} mag{errs}")
    if "ebv" not in cmap.columns and "ebv" not in cmap.values and not opts.fit_ebv:
        out.append("no reddening given: E(B-V) = 0 for every row")
    if "ebv_err" not in cmap.columns and "ebv_err" not in cmap.values and not opts.fit_ebv:
        out.append("no E(B-V) error given: the reddening counts as exact")
    if "feh" not in cmap.columns:
        out.append("no [Fe/H] column: the calibrations assume solar metallicity ([Fe/H] = 0.0)")
    else:
        out.append("rows with an empty [Fe/H] are calibrated at solar metallicity ([Fe/H] = 0.0)")
    if "feh_err" not in cmap.columns and "feh_err" not in cmap.values:
        out.append("no [Fe/H] error given: the metallicity counts as exact in the teff_cal error")
    if "logg" not in cmap.columns:
        out.append("no log g column: every star is calibrated as a dwarf")
    else:
        out.append("rows with an empty log g are calibrated as dwarfs, without the relations that need log g "
                   "(each such row says so in teff_cal_note)")
    out.append(f"extinction law {opts.law} with R_V = {float(opts.rv):g}, applied through each passband "
               "to the blackbody spectrum")
    return {f"assumption_{i + 1}": text for i, text in enumerate(out)}


def run_record(cmap, opts, version, run_utc):
    """The run record stored with every output table (layout in the module notes).

    Parameters
    ----------
    cmap : ColumnMap
    opts : stelltemp.catalog.batch.RunOptions
    version : str
        stelltemp's version.
    run_utc : str
        Start of the run, ISO 8601 in UTC.
    """
    from stelltemp.engine import BLACKBODY_NOTE
    from stelltemp.extinction import LAWS

    if "ebv" in cmap.columns:
        ebv = f"column {cmap.columns['ebv']}"
    elif "ebv" in cmap.values:
        ebv = f"{cmap.values['ebv']:g} mag for every row"
    else:
        ebv = "0 mag (none given)"
    if opts.fit_ebv:
        ebv += ", fitted from the photometry with that as a prior"
    if getattr(opts, "cal_ebv", False):
        ebv += "; for teff_cal estimated from the calibrated colours (that value and its error as prior)"
    record = {
        "tool_name": "stelltemp",
        "tool_version": str(version),
        "run_time_utc": run_utc,
        "method_requested": opts.method,
        "passbands": ",".join(cmap.bands),
    }
    record.update(passband_record(cmap.bands))
    record["vega_spectrum"] = VEGA_SPECTRUM
    record["extinction_law"] = opts.law
    if opts.law in LAWS:
        record["extinction_law_source"] = LAWS[opts.law][1]
    record["R_V"] = float(opts.rv)
    record["ebv_source"] = ebv
    record.update(flag_record())
    record.update(assumptions(cmap, opts))
    record["blackbody_note"] = BLACKBODY_NOTE
    return record


# ------------------------------------------------------------- record as text (VOTable)
def record_to_text(record):
    """The run record as one JSON object, for the table description of a VOTable.

    The description is the one piece of table metadata astropy's VOTable
    reader hands back (``meta["description"]``); `record_from_text` reads it.
    XML writers wrap long descriptions, at spaces and inside long words, so
    spaces within values are written as the JSON escape ``\\u0020``: every
    raw line break is then the writer's and is dropped on reading.  (The
    same record stands readable in the table's ``INFO`` elements.)

    Examples
    --------
    >>> text = record_to_text({"R_V": 3.1, "note": "a b"})
    >>> " b" in text, record_from_text(text)
    (False, {'R_V': 3.1, 'note': 'a b'})
    """
    import json

    return json.dumps(record, ensure_ascii=False, separators=(",", ":"), default=str).replace(" ", "\\u0020")


def record_from_text(text):
    """Inverse of `record_to_text`; {} for a description that is no record."""
    import json

    flat = re.sub(r"\s*\n\s*", "", str(text or "")).strip()
    if not flat.startswith("{"):
        return {}
    try:
        out = json.loads(flat)
    except ValueError:
        return {}
    return out if isinstance(out, dict) else {}
