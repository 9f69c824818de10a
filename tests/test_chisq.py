"""The engine's chi-squared survival function against scipy's."""

import numpy as np
import pytest
from scipy.special import chdtrc

from stelltemp.engine.chisq import MAX_DOF, chi2_survival


@pytest.mark.parametrize("dof", list(range(1, 41)) + [57, 200, MAX_DOF])
def test_agrees_with_scipy(dof):
    x = np.concatenate([[0.0, 1e-300, 1e-20], np.logspace(-12, np.log10(4 * dof + 3000), 3000)])
    ours, theirs = chi2_survival(dof, x), chdtrc(dof, x)
    normal = theirs > 1e-290  # below, both sit in the subnormal range or at 0
    assert normal.sum() > 1000
    np.testing.assert_allclose(ours[normal], theirs[normal], rtol=1e-12, atol=0)
    assert np.all(np.abs(ours[~normal] - theirs[~normal]) < 1e-290)


def test_rows_with_their_own_dof_and_edge_values():
    rng = np.random.default_rng(7)
    dof = rng.integers(1, 9, 5000)
    x = rng.chisquare(dof) * rng.uniform(0.1, 10, 5000)
    np.testing.assert_allclose(chi2_survival(dof, x), chdtrc(dof, x), rtol=1e-12, atol=0)
    edge = chi2_survival([1, 2, 3, 4], [np.inf, np.nan, -1.0, 0.0])
    assert edge[0] == 0.0 and np.isnan(edge[1]) and np.isnan(edge[2]) and edge[3] == 1.0
    assert np.isnan(chdtrc(3, -1.0)) and np.isnan(chdtrc(2, np.nan))  # scipy's answers for the same
    assert chi2_survival(2, 2.0) == pytest.approx(np.exp(-1.0), rel=1e-15)


def test_refuses_dof_it_does_not_cover():
    for bad in (0, MAX_DOF + 1, 2.5):
        with pytest.raises(ValueError):
            chi2_survival(bad, 1.0)
