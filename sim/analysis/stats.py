"""Confidence intervals of a mean and of a paired difference (Student t).

For n values :math:`x_i` with mean :math:`\\bar x` and sample standard
deviation :math:`s` (ddof = 1), the two-sided 95 % interval of the mean is

.. math::
    \\bar x \\pm t_{0.975,\\,n-1}\\, s / \\sqrt{n}

exact when the values are independent draws of a normal distribution, and
approximately right for other distributions as n grows (Student 1908; any
statistics text, e.g. Montgomery & Runger 2014, Sec. 8-2).  The paired
difference of two variants run on the same wearers and seeds is that interval
of the per-pair differences :math:`d_i = b_i - a_i` (the paired t interval,
Montgomery & Runger 2014, Sec. 10-4): it removes the spread between wearers,
which both variants share.  A difference whose interval excludes 0 is larger
than its uncertainty at the 5 % level.

References
----------
.. [Student1908] Student (W. S. Gosset) (1908), The probable error of a mean,
   *Biometrika* 6(1):1-25.
.. [Montgomery2014] Montgomery D.C., Runger G.C. (2014), *Applied Statistics
   and Probability for Engineers*, 6th ed., Wiley, Ch. 8 and 10.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy import stats as _scipy_stats

from models.errors import ParameterError

__all__ = ["Interval", "mean_ci95", "paired_difference_ci95", "CONFIDENCE"]

#: The confidence level of the intervals (two-sided).
CONFIDENCE = 0.95


@dataclass(frozen=True)
class Interval:
    """A mean with its sample standard deviation (ddof = 1), count and two-sided 95 % interval.

    ``low`` and ``high`` are NaN for fewer than two values (no spread to estimate).
    """

    mean: float
    std: float
    n: int
    low: float
    high: float

    @property
    def half_width(self) -> float:
        """Half the interval's width, :math:`t_{0.975,n-1} s/\\sqrt n`."""
        return 0.5 * (self.high - self.low)

    @property
    def excludes_zero(self) -> bool:
        """Whether 0 lies outside the interval (a difference larger than its uncertainty)."""
        return bool(self.low > 0.0 or self.high < 0.0)


def _finite(name: str, values: Sequence[float]) -> np.ndarray:
    x = np.asarray(values, dtype=float).ravel()
    if x.size == 0:
        raise ParameterError(f"{name} must hold at least one value, got none")
    if not np.all(np.isfinite(x)):
        raise ParameterError(f"{name} must be finite, got {x[~np.isfinite(x)][0]!r} among {x.size} values")
    return x


def mean_ci95(values: Sequence[float]) -> Interval:
    """The mean of ``values`` and its two-sided 95 % Student-t interval.

    .. math:: \\bar x \\pm t_{0.975,\\,n-1}\\, s/\\sqrt{n}

    Parameters
    ----------
    values : (n,) array_like
        Finite values (any unit; the interval has the same unit).

    Returns
    -------
    Interval
        NaN bounds for n = 1.
    """
    x = _finite("values", values)
    n = x.size
    mean = float(np.mean(x))
    if n < 2:
        return Interval(mean, 0.0, n, math.nan, math.nan)
    s = float(np.std(x, ddof=1))
    h = float(_scipy_stats.t.ppf(0.5 + CONFIDENCE / 2.0, n - 1)) * s / math.sqrt(n)
    return Interval(mean, s, n, mean - h, mean + h)


def paired_difference_ci95(a: Sequence[float], b: Sequence[float]) -> Interval:
    """The mean of the paired differences ``b - a`` and its two-sided 95 % interval (paired t).

    .. math:: \\bar d \\pm t_{0.975,\\,n-1}\\, s_d/\\sqrt{n}, \\qquad d_i = b_i - a_i

    Parameters
    ----------
    a, b : (n,) array_like
        The same wearers and seeds under two variants, in the same order.
    """
    x, y = _finite("a", a), _finite("b", b)
    if x.size != y.size:
        raise ParameterError(f"paired values must be as many in b as in a, got {y.size} and {x.size}")
    return mean_ci95(y - x)
