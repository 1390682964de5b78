"""Chi-square quantiles without scipy, against scipy.stats.chi2 (the reference)."""

import math

import pytest
import scipy.stats

from channelizer.dsp.chi2 import chi2_cdf, chi2_ppf


@pytest.mark.parametrize("nu", [0.5, 1.0, 2.0, 2.7, 5.0, 41.78, 1024.0, 1e5])
@pytest.mark.parametrize("q", [1e-6, 1e-3, 0.25, 0.4995, 0.5, 0.9, 0.999, 1 - 1e-6])
def test_quantiles_match_scipy_stats(nu, q):
    assert chi2_ppf(q, nu) == pytest.approx(scipy.stats.chi2.ppf(q, nu), rel=1e-10)
    assert chi2_cdf(scipy.stats.chi2.ppf(q, nu), nu) == pytest.approx(q, rel=1e-9)


def test_two_degrees_of_freedom_is_exponential():
    # chi-square with 2 degrees of freedom is exponential with mean 2: median 2 ln 2 (from memory)
    assert chi2_ppf(0.5, 2.0) == pytest.approx(2 * math.log(2), rel=1e-14)


def test_bad_arguments_are_refused():
    for q, nu in ((0.0, 2.0), (1.0, 2.0), (0.5, 0.0)):
        with pytest.raises(ValueError):
            chi2_ppf(q, nu)
