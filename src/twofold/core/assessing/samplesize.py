"""Minimum sample size for developing a logistic prediction model.

References
----------
Riley RD, Ensor J, Snell KIE, Harrell FE Jr, Martin GP, Reitsma JB, Moons
KGM, Collins G, van Smeden M (2020). Calculating the sample size required for
developing a clinical prediction model. BMJ 368:m441.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from twofold.core.errors import TwofoldError

__all__ = [
    "RileySampleSize",
    "riley_minimum_sample_size",
    "events_per_parameter",
]

# Riley et al. (2020) use the rounded normal quantile in criterion (iii).
_Z_975 = 1.96


@dataclass(frozen=True)
class RileySampleSize:
    """Minimum sample size by the three criteria of Riley et al. (2020).

    Attributes
    ----------
    n_shrinkage : int
        Criterion (i): rows needed for an expected uniform shrinkage of at
        least ``shrinkage``.
    n_optimism : int
        Criterion (ii): rows needed for an optimism of at most
        ``max_optimism`` in the Nagelkerke R-squared.
    shrinkage_optimism : float
        Shrinkage implied by criterion (ii) and used for ``n_optimism``.
    n_overall_risk : int
        Criterion (iii): rows needed to estimate the overall risk within
        +/- ``margin`` (95% confidence).
    n_minimum : int
        Largest of the three: the minimum sample size.
    expected_events : float
        Expected number of events at ``n_minimum`` (n * prevalence).
    events_per_parameter : float
        min(events, non-events) per candidate parameter at ``n_minimum``.
    max_r2_cs : float
        Largest possible Cox-Snell R-squared at this prevalence.
    parameters, prevalence, r2_cs, shrinkage, max_optimism, margin
        The inputs.
    """

    n_shrinkage: int
    n_optimism: int
    shrinkage_optimism: float
    n_overall_risk: int
    n_minimum: int
    expected_events: float
    events_per_parameter: float
    max_r2_cs: float
    parameters: int
    prevalence: float
    r2_cs: float
    shrinkage: float
    max_optimism: float
    margin: float

    def as_dict(self) -> dict:
        return {
            k: (int(v) if isinstance(v, int) else float(v))
            for k, v in self.__dict__.items()
        }


def _n_for_shrinkage(parameters: int, r2_cs: float, s: float) -> float:
    """n = P / ((S - 1) ln(1 - R2cs / S)), unrounded."""
    return parameters / ((s - 1.0) * math.log(1.0 - r2_cs / s))


def riley_minimum_sample_size(
    parameters: int,
    prevalence: float,
    r2_cs: float,
    shrinkage: float = 0.9,
    max_optimism: float = 0.05,
    margin: float = 0.05,
) -> RileySampleSize:
    """Minimum rows to develop a logistic model (Riley et al. 2020).

    (i) n = P / ((S - 1) ln(1 - R2cs / S));
    (ii) the same with S = R2cs / (R2cs + delta * max_R2cs), where
    max_R2cs = 1 - exp(2 (phi ln phi + (1 - phi) ln(1 - phi)));
    (iii) n = (1.96 / margin)^2 phi (1 - phi); minimum = max of the three.

    Parameters
    ----------
    parameters : int
        Number of candidate predictor parameters P (each dummy, spline term
        or interaction counts), not counting the intercept.
    prevalence : float
        Expected event proportion phi in the intended population.
    r2_cs : float
        Anticipated Cox-Snell R-squared of the model (for example from a
        published model in a similar population).
    shrinkage : float, optional
        Target expected uniform shrinkage S for criterion (i), default 0.9.
    max_optimism : float, optional
        Largest acceptable optimism delta in the Nagelkerke R-squared for
        criterion (ii), default 0.05.
    margin : float, optional
        Largest acceptable absolute error in the estimated overall risk for
        criterion (iii), default 0.05.

    Returns
    -------
    RileySampleSize
        Each criterion's n rounded up, and the minimum.

    Notes
    -----
    When criterion (ii)'s shrinkage is below ``shrinkage`` its n is smaller
    than criterion (i)'s and does not drive the minimum.
    """
    p = int(parameters)
    if p != parameters or p < 1:
        raise TwofoldError(
            f"The number of parameters {parameters!r} is not a positive whole "
            "number; count every candidate predictor parameter."
        )
    phi = float(prevalence)
    if not (0.0 < phi < 1.0):
        raise TwofoldError(
            f"The prevalence {prevalence!r} is not strictly between 0 and 1; give "
            "the expected share of events, for example 0.2."
        )
    s = float(shrinkage)
    if not (0.0 < s < 1.0):
        raise TwofoldError(
            f"The target shrinkage {shrinkage!r} is not strictly between 0 and "
            "1; use for example 0.9."
        )
    delta = float(max_optimism)
    if not (delta > 0.0):
        raise TwofoldError(
            f"The acceptable optimism {max_optimism!r} is not positive; use for "
            "example 0.05."
        )
    m = float(margin)
    if not (0.0 < m < 1.0):
        raise TwofoldError(
            f"The margin of error {margin!r} is not strictly between 0 and 1; use "
            "for example 0.05."
        )
    # Null log-likelihood per row of an intercept-only model at prevalence phi.
    ll_null_per_row = phi * math.log(phi) + (1.0 - phi) * math.log(1.0 - phi)
    max_r2 = 1.0 - math.exp(2.0 * ll_null_per_row)
    r2 = float(r2_cs)
    if not (0.0 < r2 < max_r2):
        raise TwofoldError(
            f"The anticipated Cox-Snell R-squared {r2_cs!r} is not between 0 and "
            f"its maximum {max_r2:.3f} at this prevalence; give a smaller value."
        )
    if r2 >= s:
        raise TwofoldError(
            f"The anticipated Cox-Snell R-squared {r2_cs!r} is not below the "
            "target shrinkage, so criterion (i) has no solution; lower the "
            "R-squared or raise the shrinkage."
        )

    n1 = math.ceil(_n_for_shrinkage(p, r2, s))
    s2 = r2 / (r2 + delta * max_r2)
    n2 = math.ceil(_n_for_shrinkage(p, r2, s2))
    n3 = math.ceil((_Z_975 / m) ** 2 * phi * (1.0 - phi))
    n_min = max(n1, n2, n3)
    return RileySampleSize(
        n_shrinkage=n1,
        n_optimism=n2,
        shrinkage_optimism=s2,
        n_overall_risk=n3,
        n_minimum=n_min,
        expected_events=n_min * phi,
        events_per_parameter=n_min * min(phi, 1.0 - phi) / p,
        max_r2_cs=max_r2,
        parameters=p,
        prevalence=phi,
        r2_cs=r2,
        shrinkage=s,
        max_optimism=delta,
        margin=m,
    )


def events_per_parameter(events: float, nonevents: float, parameters: int) -> float:
    """Events per candidate parameter, counting the rarer outcome.

    EPP = min(events, non-events) / parameters.

    Parameters
    ----------
    events, nonevents : float
        Number of events and non-events.
    parameters : int
        Number of candidate predictor parameters (not the intercept).

    Returns
    -------
    float
    """
    if events < 0 or nonevents < 0:
        raise TwofoldError(
            "The numbers of events and non-events must not be negative; pass the "
            "counts in the data."
        )
    if parameters < 1 or int(parameters) != parameters:
        raise TwofoldError(
            f"The number of parameters {parameters!r} is not a positive whole "
            "number; count every candidate predictor parameter."
        )
    return float(min(events, nonevents)) / float(parameters)
