"""The demo analysis runs end to end and agrees with statsmodels (reference library)."""

import numpy as np
import statsmodels.api as sm

from plumbrule.analysis import analyze
from plumbrule.demo.town import DEMO_SETTINGS


def test_demo_coefficients_match_statsmodels(demo_frame):
    res = analyze(demo_frame, DEMO_SETTINGS)
    x = sm.add_constant(res.model.x)
    ref = sm.OLS(res.model.y, x).fit()
    coefs = res.tables.coefficients
    np.testing.assert_allclose(coefs["estimate"], ref.params, rtol=1e-9)
    np.testing.assert_allclose(coefs["std_error"], ref.bse, rtol=1e-9)
    assert res.tables.fit["n_used"].iloc[0] == len(demo_frame)
