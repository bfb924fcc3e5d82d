"""Small statistics for Monte Carlo verdicts: the Wilson score interval and failure-parameter correlations."""

from __future__ import annotations

import math

import numpy as np
from scipy.stats import norm

from upswing.errors import RequestError


def wilson_interval(successes: int, trials: int, confidence: float = 0.95) -> tuple[float, float]:
    """Wilson score interval for a binomial proportion (Wilson, 1927, J. Am. Stat. Assoc. 22:209).

    With p = successes / trials, n = trials and z the two-sided normal quantile,

        (p + z^2 / (2n) -+ z sqrt(p (1 - p) / n + z^2 / (4 n^2))) / (1 + z^2 / n).

    Unlike the normal-approximation interval it stays inside [0, 1] and is sensible at p = 0 or 1.

    Raises
    ------
    RequestError
        For trials < 1, successes outside [0, trials] or confidence outside (0, 1).
    """
    if trials < 1:
        raise RequestError(f"a success interval needs at least one trial; got {trials}")
    if not 0 <= successes <= trials:
        raise RequestError(f"successes must be in [0, trials] = [0, {trials}]; got {successes}")
    if not 0.0 < confidence < 1.0:
        raise RequestError(f"confidence must be in (0, 1); got {confidence}")
    z = float(norm.ppf(0.5 + confidence / 2.0))
    n = float(trials)
    p = successes / n
    denominator = 1.0 + z * z / n
    centre = (p + z * z / (2.0 * n)) / denominator
    half = z * math.sqrt(p * (1.0 - p) / n + z * z / (4.0 * n * n)) / denominator
    return max(0.0, centre - half), min(1.0, centre + half)


def point_biserial(flag: np.ndarray, values: np.ndarray) -> float:
    """Pearson correlation between a 0/1 outcome and a continuous value (the point-biserial coefficient);
    0 when either has no spread."""
    f = np.asarray(flag, dtype=float)
    v = np.asarray(values, dtype=float)
    if f.size < 2 or np.ptp(f) == 0 or np.ptp(v) == 0:
        return 0.0
    return float(np.corrcoef(f, v)[0, 1])


def trials_to_show(required: float, confidence: float = 0.95) -> int:
    """Fewest trials n for which n successes out of n put the Wilson interval's lower end at ``required`` or above.

    With s = n the lower end is n / (n + z^2) (the formula of :func:`wilson_interval` at p = 1), so
    n >= z^2 r / (1 - r); e.g. 73 trials for r = 0.95 and 381 for r = 0.99 at 95 % confidence.

    Raises
    ------
    RequestError
        For ``required`` outside (0, 1).
    """
    if not 0.0 < required < 1.0:
        raise RequestError(f"a required success rate must be in (0, 1); got {required}")
    z = float(norm.ppf(0.5 + confidence / 2.0))
    n = max(1, math.ceil(z * z * required / (1.0 - required)))
    while wilson_interval(n, n, confidence)[0] < required:  # guard the ceiling against round-off
        n += 1
    return n
