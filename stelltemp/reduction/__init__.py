"""From instrumental magnitudes to the standard system.

* :mod:`~stelltemp.reduction.equations` — the transformation equations
  (Harris, FitzGerald & Reed 1981 form) and which colour each filter uses;
* :mod:`~stelltemp.reduction.observations` — measurement and standard-star tables;
* :mod:`~stelltemp.reduction.wls` — weighted least squares with outlier rejection;
* :mod:`~stelltemp.reduction.fit` — fitting the coefficients to the standards;
* :mod:`~stelltemp.reduction.apply` — standard magnitudes of targets with full covariance;
* :mod:`~stelltemp.reduction.atmosphere` — a smooth model of the extinction k(λ);
* :mod:`~stelltemp.reduction.predict` — colour terms predicted from the instrument's passbands.
"""

from ..lazy import lazy_exports

# names load their module on first use (start-up time of the CLI)
_HOME = {
    "BandSetup": "equations",
    "default_setups": "equations",
    "Observations": "observations",
    "observations_from_table": "observations",
    "standards_from_table": "observations",
    "FilterFit": "fit",
    "Transformation": "fit",
    "fit_filter": "fit",
    "fit_transformation": "fit",
    "StandardPhotometry": "apply",
    "apply_transformation": "apply",
    "read_transformation": "store",
    "write_transformation": "store",
    "standardise_night": "workflow",
}

__getattr__, __dir__ = lazy_exports(__name__, _HOME)

__all__ = sorted(_HOME)
