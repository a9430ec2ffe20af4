"""Life data: two-parameter Weibull with right-censoring, B-lives, plot points, age replacement.

Failures in service are failures; capacitors replaced on plan and those still in
service are suspensions (right-censored). Methods as in IEC 61649: maximum
likelihood, Fisher-matrix bounds on the log scale, Benard's median ranks with
Johnson's adjustment for suspensions. Age replacement after Barlow and Proschan.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import optimize, stats
from scipy.special import gamma, gammainc, ndtri


class NoWeibullEstimate(ValueError):
    """The data hold no maximum-likelihood Weibull estimate; the message says why, in words for a page."""


@dataclass(frozen=True)
class WeibullFit:
    beta: float  # shape
    eta: float  # scale, same unit as the times
    failures: int
    suspensions: int
    covariance_log: np.ndarray  # of (ln beta, ln eta), inverse observed information; NaN: no bounds

    @property
    def bounds_available(self) -> bool:
        """Whether the observed information could be inverted (Fisher bounds exist); without it the
        bounds are NaN and only the estimate stands."""
        return bool(np.all(np.isfinite(self.covariance_log)))

    def reliability(self, t):
        return np.exp(-((np.asarray(t, float) / self.eta) ** self.beta))

    def b_life(self, fraction_failed=0.10):
        """Age by which `fraction_failed` have failed: B10 = eta (-ln 0.9)^(1/beta)."""
        return self.eta * (-np.log1p(-fraction_failed)) ** (1.0 / self.beta)

    def conditional_failure(self, age, interval):
        """Probability that a unit of `age` fails within the next `interval`: 1 - R(t + d)/R(t)."""
        return 1.0 - self.reliability(np.asarray(age, float) + interval) / self.reliability(age)

    def b_life_bounds(self, fraction_failed=0.10, confidence=0.90):
        """Two-sided Fisher-matrix bounds on a B-life (delta method on ln B); NaN without bounds."""
        k = -np.log1p(-fraction_failed)
        # ln B = ln eta + ln(k) / beta; gradient in (ln beta, ln eta)
        gradient = np.array([-np.log(k) / self.beta, 1.0])
        sd = float(np.sqrt(gradient @ self.covariance_log @ gradient))
        z = float(ndtri(0.5 + confidence / 2.0))
        centre = self.b_life(fraction_failed)
        return centre * np.exp(-z * sd), centre * np.exp(z * sd)

    def parameter_bounds(self, confidence=0.90):
        z = float(ndtri(0.5 + confidence / 2.0))
        sd_beta, sd_eta = np.sqrt(np.diag(self.covariance_log))
        return (
            (self.beta * np.exp(-z * sd_beta), self.beta * np.exp(z * sd_beta)),
            (self.eta * np.exp(-z * sd_eta), self.eta * np.exp(z * sd_eta)),
        )


def _negative_log_likelihood(params, t, failed):
    """Weibull negative log-likelihood in (ln beta, ln eta), suspensions right-censored: for the Fisher bounds."""
    log_beta, log_eta = params
    beta, eta = np.exp(log_beta), np.exp(log_eta)
    z = t / eta
    log_density = log_beta - log_eta + (beta - 1.0) * np.log(z) - z**beta
    log_survival = -(z**beta)
    return -float(np.sum(np.where(failed, log_density, log_survival)))


def fit_weibull(times, failed) -> WeibullFit:
    """Maximum-likelihood Weibull fit; `failed` False marks a suspension.

    Needs at least two failures, not all at the oldest age in the data (NoWeibullEstimate
    otherwise). SciPy's censored-data fit (`weibull_min.fit` on `CensoredData`, location
    fixed at zero) finds the estimate, started from a least-squares line through the
    median-rank plot; the covariance comes from the numerical Hessian of the log-likelihood
    in (ln beta, ln eta), NaN where that is not positive definite (the estimate without bounds).
    """
    t = np.asarray(times, float)
    failed = np.asarray(failed, bool)
    if np.any(t <= 0):
        raise ValueError("life times must be positive")
    if failed.sum() < 2:
        raise NoWeibullEstimate("fewer than two failures in service")
    if np.all(t[failed] == t.max()):
        # The profile log-likelihood is then r ln(beta) + a constant as beta grows: it has no maximum.
        raise NoWeibullEstimate(
            "every failure is at the same age and no capacitor has outlived it, so the likelihood has no "
            "maximum (the shape grows without bound); a fit needs failures at different ages"
        )
    plot_t, plot_f = probability_plot_points(t, failed)
    if np.ptp(plot_t) > 0:
        slope, intercept = np.polyfit(np.log(plot_t), np.log(-np.log1p(-plot_f)), 1)
        beta_start = max(slope, 0.2)
        scale_start = np.exp(-intercept / beta_start)
    else:  # every failure at one age: no line through the plot, start at an exponential with that scale
        beta_start, scale_start = 1.0, plot_t[0]
    data = stats.CensoredData.right_censored(t, ~failed)
    beta, _, eta = stats.weibull_min.fit(data, beta_start, floc=0, scale=scale_start, optimizer=_tight_simplex)
    estimate = np.log([beta, eta])
    with np.errstate(over="ignore", invalid="ignore"):  # a huge shape overflows to inf: no bounds, below
        hessian = _hessian(lambda p: _negative_log_likelihood(p, t, failed), estimate)
    return WeibullFit(
        beta=float(beta),
        eta=float(eta),
        failures=int(failed.sum()),
        suspensions=int((~failed).sum()),
        covariance_log=_covariance(hessian),
    )


def _covariance(hessian: np.ndarray) -> np.ndarray:
    """The inverse of the observed information (the Hessian of the negative log-likelihood) where it is
    finite and positive definite; NaN otherwise (a singular or indefinite matrix gives no bounds)."""
    if np.all(np.isfinite(hessian)):
        try:
            np.linalg.cholesky(hessian)
            return np.linalg.inv(hessian)
        except np.linalg.LinAlgError:
            pass
    return np.full(hessian.shape, np.nan)


def _tight_simplex(function, start, args=(), disp=0):
    """SciPy's default fit optimizer (Nelder-Mead) held to tighter tolerances than its defaults."""
    return optimize.fmin(function, start, args=args, disp=disp, xtol=1e-8, ftol=1e-10, maxiter=4000, maxfun=8000)


def expected_failures(beta, eta, age, until, edges):
    """Expected failures in each interval between `edges` (time from now, ascending) among units
    that have survived to `age`, counted only until `until` (their planned replacement; inf: none).

    Per unit, the chance of failing in [s, e] given survival to age a is
    (R(a + s) - R(a + e)) / R(a), with e cut at `until`; written with the cumulative
    hazard H(t) = (t / eta)^beta so that old units do not divide 0 by 0. beta, eta, age and
    until are per unit (broadcast); all in one time unit. Returns (units, intervals).
    """
    beta = np.asarray(beta, float)[..., None]
    eta = np.asarray(eta, float)[..., None]
    age = np.asarray(age, float)[..., None]
    until = np.asarray(until, float)[..., None]
    edges = np.asarray(edges, float)
    stop = np.minimum(edges[1:], until)
    start = np.minimum(edges[:-1], stop)
    hazard_now = (age / eta) ** beta
    survive_to_start = np.exp(hazard_now - ((age + start) / eta) ** beta)
    survive_to_stop = np.exp(hazard_now - ((age + stop) / eta) ** beta)
    return survive_to_start - survive_to_stop


def successor_failures(beta, eta, installed, edges, generations: int = 4):
    """Expected failures in each interval between `edges` of the new units fitted during them, and of
    the units fitted in their place when those fail (a renewal process, e.g. Ross, *Introduction to
    Probability Models*, ch. 7 [mem]).

    beta, eta (P,): each row's Weibull; installed (P, M): new units fitted in each interval, taken as
    fitted at its midpoint; edges (M + 1,): time from now, ascending, in eta's unit. A unit fitted at
    m fails in interval j with R(s_j - m) - R(e_j - m) (s, e the interval's ends, clipped at 0), and
    each failure is itself a new unit at its interval's midpoint: `generations` rounds of that (the
    next round is smaller by the chance of failing within the horizon). Returns (P, M).
    """
    beta = np.asarray(beta, float)[:, None, None]
    eta = np.asarray(eta, float)[:, None, None]
    edges = np.asarray(edges, float)
    start, end = edges[:-1], edges[1:]
    fitted = 0.5 * (start + end)[:, None]  # (M, 1): interval k's midpoint
    age_start = np.clip(start[None, :] - fitted, 0.0, None)  # (M, M): ages at interval j's ends
    age_end = np.clip(end[None, :] - fitted, 0.0, None)
    chance = np.exp(-((age_start / eta) ** beta)) - np.exp(-((age_end / eta) ** beta))  # (P, M, M)
    new = np.asarray(installed, float)
    total = np.zeros_like(new)
    for _ in range(generations):
        new = np.einsum("pk,pkj->pj", new, chance)
        total += new
    return total


def _hessian(function, x, step=1e-4):
    n = len(x)
    h = np.zeros((n, n))
    for i in range(n):
        for j in range(n):
            e_i, e_j = np.eye(n)[i] * step, np.eye(n)[j] * step
            h[i, j] = (
                function(x + e_i + e_j) - function(x + e_i - e_j) - function(x - e_i + e_j) + function(x - e_i - e_j)
            ) / (4 * step * step)
    return h


def tolerance_life_times(fitted_day, first_out_day, last_read_day, failed_day):
    """Per capacitor: its age in days when it left tolerance in service, or its age when it was last known
    within tolerance, and whether it left (an event; else a suspension). Days are on any common count,
    NaN where there is none.

    Leaving tolerance is a soft failure of a degradation path, the day a threshold is crossed (Meeker and
    Escobar, *Statistical Methods for Reliability Data*, 1998, ch. 13 [mem]): here the first of its first
    reading out of tolerance (`first_out_day`) and its failure in service (`failed_day`). It is dated at that
    reading, after the crossing itself (readings come a season apart). One never read out of tolerance and
    not failed is a suspension at its last reading, the last day it is known to have been within (a capacitor
    replaced on plan before it crossed included); one never read and not failed is not known either way
    (age NaN). Ages of zero or less (read out of tolerance on its fitting day: dead on arrival, not drift)
    are the caller's to leave out.
    """
    event_day = np.fmin(np.asarray(first_out_day, float), np.asarray(failed_day, float))
    left = np.isfinite(event_day)
    end = np.where(left, event_day, np.asarray(last_read_day, float))
    return end - np.asarray(fitted_day, float), left


def probability_plot_points(times, failed):
    """Failure times and their plotting positions on a Weibull plot.

    Johnson's adjusted ranks carry the suspensions (each failure's rank grows by
    (n + 1 - previous rank) / (1 + units beyond it)); Benard's approximation
    (i - 0.3)/(n + 0.4) turns ranks into median-rank fractions failed.
    """
    t = np.asarray(times, float)
    failed = np.asarray(failed, bool)
    order = np.lexsort((~failed, t))  # at equal times, failures before suspensions
    t, failed = t[order], failed[order]
    n = len(t)
    beyond = n - np.arange(n)  # units at or beyond each position
    # The recursion r_i = r_prev + (n + 1 - r_prev) / (1 + beyond_i) is, for the
    # complement, (n + 1 - r_i) = (n + 1 - r_prev) beyond_i / (1 + beyond_i).
    shrink = np.where(failed, beyond / (1.0 + beyond), 1.0)
    ranks = (n + 1.0) * (1.0 - np.cumprod(shrink))[failed]
    return t[failed], (ranks - 0.3) / (n + 0.4)


@dataclass(frozen=True)
class AgeReplacement:
    ages: np.ndarray
    cost_per_time: np.ndarray
    optimum_age: float | None  # None where replacing on age never pays (beta <= 1 or Cf <= Cp)
    optimum_cost_per_time: float | None
    run_to_failure_cost_per_time: float


# The cost of one replacement, planned or after a failure, in the plant's currency: labour, part and lost
# production come to tens to thousands; past a million is a slip of the decimal point (ours). The life-data
# page refuses costs above it by name.
MAX_REPLACEMENT_COST = 1_000_000.0


def mean_time_to_age(beta, eta, age):
    """Expected length of a replacement cycle at age T, the integral of R(t) from 0 to T, in closed form:
    (eta / beta) Gamma(1/beta) P(1/beta, (T/eta)^beta), P the regularised lower incomplete gamma function
    [derived from the Weibull survivor function by the substitution u = (t/eta)^beta]."""
    age = np.asarray(age, float)
    shape = 1.0 / beta
    return eta * shape * gamma(shape) * gammainc(shape, (np.maximum(age, 0.0) / eta) ** beta)


def age_replacement(fit: WeibullFit, planned_cost, failure_cost, ages=None) -> AgeReplacement:
    """Cost per unit time of replacing at age T or at failure, whichever comes first.

    C(T) = [Cp R(T) + Cf (1 - R(T))] / integral_0^T R(t) dt (Barlow and Proschan).
    Run to failure costs Cf / MTTF. A finite optimum exists only when beta > 1
    and Cf > Cp; with a rising hazard it is the one minimum of C(T) (Barlow and
    Proschan), found on the logarithm of the age from a ten-thousandth of eta up,
    so an optimum far below eta (failures that cost far more than a planned change)
    is found as surely as one near it. `ages`: where the curve is drawn (by default
    from half the optimum, or 5 % of eta, to three times eta, evenly in the logarithm).
    """

    def cost_at(age):
        r = fit.reliability(age)
        return (planned_cost * r + failure_cost * (1.0 - r)) / mean_time_to_age(fit.beta, fit.eta, age)

    mttf = fit.eta * gamma(1.0 + 1.0 / fit.beta)
    run_to_failure = failure_cost / mttf
    optimum_age = optimum_cost = None
    if fit.beta > 1.0 and failure_cost > planned_cost:
        log_ages = np.linspace(np.log(1e-4), np.log(3.0), 400) + np.log(fit.eta)
        coarse = cost_at(np.exp(log_ages))
        best = int(np.argmin(coarse))
        if 0 < best < len(log_ages) - 1:
            found = optimize.minimize_scalar(
                lambda log_age: float(cost_at(np.exp(log_age))),
                bounds=(log_ages[best - 1], log_ages[best + 1]),
                method="bounded",
                options={"xatol": 1e-9},
            )
            if found.fun < run_to_failure:
                optimum_age, optimum_cost = float(np.exp(found.x)), float(found.fun)
    if ages is None:
        low = 0.05 * fit.eta if optimum_age is None else min(0.05 * fit.eta, 0.5 * optimum_age)
        # Spaced evenly in the logarithm: a best age far below eta is drawn with as many points as one near it.
        ages = np.geomspace(low, 3.0 * fit.eta, 240)
    ages = np.asarray(ages, float)
    return AgeReplacement(ages, cost_at(ages), optimum_age, optimum_cost, float(run_to_failure))


# The units an age is read in, longest first: (name, how many in a year, the least age in years written in it).
AGE_UNITS = (("years", 1.0, 1.0), ("months", 12.0, 1.0 / 12.0), ("days", 365.25, 0.0))


def age_unit(years: float) -> tuple[str, float]:
    """The unit a planner reads an age of `years` in, and how many of it make a year: years from one year,
    months from one month, days below."""
    return next((name, per_year) for name, per_year, least in AGE_UNITS if years >= least or name == "days")


def age_in_words(years: float) -> str:
    """An age in the unit it is read in (`age_unit`): 2.93 -> '2.9 years', 0.29 -> '3.5 months', 0.02 ->
    '7 days', a no-break space before the unit."""
    name, per_year = age_unit(years)
    if name == "days":
        days = round(per_year * years)
        return f"{days}\u00a0day{'' if days == 1 else 's'}"
    return f"{per_year * years:.1f}\u00a0{name}"
