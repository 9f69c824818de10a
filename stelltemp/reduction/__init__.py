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

from .apply import StandardPhotometry, apply_transformation
from .equations import BandSetup, default_setups
from .fit import FilterFit, Transformation, fit_filter, fit_transformation
from .observations import Observations, observations_from_table, standards_from_table

__all__ = ["BandSetup", "default_setups", "Observations", "observations_from_table", "standards_from_table",
           "FilterFit", "Transformation", "fit_filter", "fit_transformation", "StandardPhotometry",
           "apply_transformation"]
