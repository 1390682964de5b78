"""Chi-square quantiles in plain Python, for the noise-floor statistics.

The noise floor needs a few quantiles of the chi-square law of a Welch bin
(``chi2.ppf(q, nu)`` for real ``nu``); importing ``scipy.stats`` (or even
``scipy.special``) for them would cost an ``extract`` command more start-up than
its whole alias audit.  The regularised lower incomplete gamma function
``P(a, x)`` is summed as its power series below ``x = a + 1`` and as its
continued fraction above (Press et al., *Numerical Recipes*, 3rd ed., 2007,
sec. 6.2, from memory), and ``chi2.ppf(q, nu) = 2 P^-1(nu / 2, q)`` is found by
Newton's method from the Wilson-Hilferty approximation, inside a bracket.

References
----------
.. [1] M. Abramowitz and I. A. Stegun, *Handbook of Mathematical Functions*,
   1964, 26.4.19 (chi-square through the incomplete gamma function) and
   26.4.17 (Wilson-Hilferty), from memory.
"""

import math

__all__ = ["chi2_cdf", "chi2_ppf"]

_EPS = 1e-15
_TINY = 1e-300


def _lower_regularised_gamma(a, x):
    """``P(a, x)``, and ``Q(a, x) = 1 - P``, each computed where it is accurate."""
    if x <= 0.0:
        return 0.0, 1.0
    log_front = -x + a * math.log(x) - math.lgamma(a)
    if x < a + 1.0:
        term = total = 1.0 / a
        n = a
        for _ in range(100_000):
            n += 1.0
            term *= x / n
            total += term
            if abs(term) < abs(total) * _EPS:
                break
        p = total * math.exp(log_front)
        return p, 1.0 - p
    # modified Lentz's method for the continued fraction of Q
    b = x + 1.0 - a
    c = 1.0 / _TINY
    d = 1.0 / b
    h = d
    for i in range(1, 100_000):
        an = -i * (i - a)
        b += 2.0
        d = an * d + b
        d = _TINY if abs(d) < _TINY else d
        c = b + an / c
        c = _TINY if abs(c) < _TINY else c
        d = 1.0 / d
        step = d * c
        h *= step
        if abs(step - 1.0) < _EPS:
            break
    q = math.exp(log_front) * h
    return 1.0 - q, q


def chi2_cdf(x, nu):
    """``P(X <= x)`` for ``X`` chi-square with ``nu > 0`` degrees of freedom."""
    return _lower_regularised_gamma(nu / 2.0, x / 2.0)[0]


def chi2_ppf(q, nu):
    """The ``q``-quantile (``0 < q < 1``) of the chi-square law with ``nu > 0`` degrees of freedom."""
    if not 0.0 < q < 1.0 or not nu > 0:
        raise ValueError(f"chi2_ppf needs 0 < q < 1 and nu > 0, got q={q!r}, nu={nu!r}")
    a = nu / 2.0
    # Wilson-Hilferty start: nu (1 - 2/(9 nu) + z sqrt(2/(9 nu)))**3, z the normal quantile
    z = _normal_ppf(q)
    s = 2.0 / (9.0 * nu)
    x = max(nu * (1.0 - s + z * math.sqrt(s)) ** 3, 1e-8)
    lo, hi = 0.0, math.inf
    log_norm = a * math.log(2.0) + math.lgamma(a)
    for _ in range(200):
        p, upper = _lower_regularised_gamma(a, x / 2.0)
        err = p - q if q < 0.5 else (1.0 - q) - upper  # the side that keeps its digits
        if err > 0:
            hi = x
        else:
            lo = x
        density = math.exp((a - 1.0) * math.log(x) - x / 2.0 - log_norm)
        step = err / density if density > 0 else math.inf
        new = x - step
        if not lo < new < hi:
            new = 0.5 * (lo + hi) if math.isfinite(hi) else 2.0 * x
        if abs(new - x) <= 1e-14 * x:
            return new
        x = new
    return x


def _normal_ppf(q):
    """Standard normal quantile to about 1e-3 (a start for Newton's method only)."""
    # Abramowitz & Stegun 26.2.23
    t = math.sqrt(-2.0 * math.log(min(q, 1.0 - q)))
    z = t - (2.515517 + 0.802853 * t + 0.010328 * t * t) / (1.0 + 1.432788 * t + 0.189269 * t * t + 0.001308 * t**3)
    return z if q > 0.5 else -z
