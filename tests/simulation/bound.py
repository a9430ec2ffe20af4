"""How well could any forecast rank the year's crossings on the simulated fleet? An information bound.

The product's forecast is scored against the simulation's truth (`scoring.py`). How high can such a
score go at all, with readings this noisy? This module answers with a forecaster that knows far more
than any product can: the simulation's own ageing forms and the spread of their parameters (its
priors), each unit's true stress history past and future, the instruments' noise, and which readings
were strays or unit slips. Per capacitor in service at a cut-off it draws ageing paths from those
priors, weights each by the likelihood of the capacitor's readings (importance sampling: the
posterior of a Bayesian model by likelihood weighting of prior draws; Smith and Gelfand, "Bayesian
statistics without tears", The American Statistician 46, 1992; from memory), and gives the
posterior probability that the true capacitance at 25 C is below the limit a year after the
cut-off. Ranked by that probability, the year's crossings are caught as well as the readings allow.

Two figures per cut-off (`python -m tests.simulation.bound --seed 20261202`):

- the best precision at which a threshold on the probability catches at least 85 % of the year's
  crossings, chosen in hindsight (a precision-recall curve's point; Davis and Goadrich, ICML 2006);
- the precision and recall of a rule chosen without hindsight, from the probabilities alone: flag
  the most probable capacitors until the expected share of crossings caught, the sum of the
  flagged probabilities over the sum of all, reaches 85 % (expected recall of calibrated
  probabilities; ours).

No product code is used: this bounds every forecaster, ours included.
"""

from __future__ import annotations

import argparse
import datetime as dt

import numpy as np
import pandas as pd

from . import fleet as simulated
from .scoring import in_service

HORIZON_DAYS = 365


def best_precision_at_recall(score, positive, recall: float = 0.85) -> float:
    """Highest precision of "flag every capacitor scoring at least s" over the thresholds s
    that catch at least `recall` of the positives (nan: no positives). Ties flag together."""
    score = np.asarray(score, float)
    positive = np.asarray(positive, bool)
    if not positive.any():
        return float("nan")
    order = np.argsort(-score, kind="stable")
    sorted_score, hits = score[order], positive[order]
    caught, flagged = np.cumsum(hits), np.arange(1, len(hits) + 1)
    # Only the last of a run of equal scores is a threshold: a rule cannot split a tie.
    last_of_tie = np.r_[sorted_score[1:] != sorted_score[:-1], True]
    usable = last_of_tie & (caught >= recall * positive.sum())
    return float((caught / flagged)[usable].max())


def expected_recall_rule(probability, recall: float = 0.85) -> np.ndarray:
    """Flags the most probable capacitors until the flagged share of the summed probability
    reaches `recall`: the rule a forecaster with calibrated probabilities would choose unaided."""
    probability = np.nan_to_num(np.asarray(probability, float))
    order = np.argsort(-probability, kind="stable")
    share = np.cumsum(probability[order]) / max(probability.sum(), 1e-300)
    count = int(np.searchsorted(share, recall - 1e-12) + 1) if probability.sum() > 0 else 0
    flagged = np.zeros(len(probability), bool)
    flagged[order[:count]] = True
    return flagged


def _path_loss(film, stress_over_scale, draws):
    """Relative loss of capacitance of sampled paths (the simulation's forms, `fleet.simulate`)."""
    x = stress_over_scale
    if film:
        return draws["a"][:, None] * np.expm1(np.minimum(x, 30.0))
    return draws["b"][:, None] * x + draws["c"][:, None] * x ** draws["p"][:, None]


def _draws(film, rated_uf, lower_uf, upper_uf, life_scale_h, samples, rng):
    """Prior draws of one unit's latent path, as `fleet.simulate` draws them."""
    spread = simulated.INITIAL_SPREAD["film" if film else "electrolytic"]
    draws = {
        "c0": np.clip(rated_uf * (1 + rng.normal(0.0, spread, samples)), lower_uf * 1.005, upper_uf * 0.995),
        "scale": life_scale_h * np.exp(rng.normal(0.0, simulated.RATE_SPREAD, samples)),
    }
    if film:
        draws["a"] = simulated.FILM_KNEE * np.exp(rng.normal(0.0, simulated.FILM_KNEE_SPREAD, samples))
    else:
        draws["b"] = rng.uniform(*simulated.ELECTROLYTIC_LINEAR, samples)
        draws["c"] = simulated.ELECTROLYTIC_DRYING * np.exp(
            rng.normal(0.0, simulated.ELECTROLYTIC_DRYING_SPREAD, samples)
        )
        draws["p"] = rng.uniform(*simulated.ELECTROLYTIC_POWER, samples)
    return draws


def crossing_probability(
    fleet: simulated.Fleet, cutoff: dt.date, samples: int = 6000, rng=None, horizon_days: int = HORIZON_DAYS
) -> pd.DataFrame:
    """Per capacitor in service at the cut-off: the posterior probability, given its readings
    before the cut-off, that its true capacitance at 25 C is below its limit `horizon_days` later.
    Needs a fleet simulated with `record_stress=True`."""
    if fleet.stress_h is None:
        raise ValueError("simulate the fleet with record_stress=True")
    rng = rng or np.random.default_rng(1)
    day = pd.Timestamp(cutoff)
    cut_index = (day - pd.Timestamp(simulated.START)).days
    horizon_index = min(cut_index + horizon_days, fleet.stress_h.shape[0] - 1)
    units = in_service(simulated.truth(fleet), cutoff).merge(fleet.units[["unit", "serial"]], on="serial")
    parts = simulated.PARTS.set_index("code")
    readings = fleet.readings[
        (fleet.readings["taken_at"] < day.tz_localize("UTC")) & ~fleet.readings["stray"] & ~fleet.readings["slip"]
    ]
    by_unit = dict(tuple(readings.groupby("unit")))
    latent = fleet.latent
    probability = np.zeros(len(units))
    for i, (unit, part_code) in enumerate(zip(units["unit"], units["part_code"], strict=True)):
        film = bool(latent["film"][unit])
        rated = float(parts.loc[part_code, "rated_uf"])
        lower = rated * (1 - parts.loc[part_code, "tolerance_minus_pct"] / 100)
        upper = rated * (1 + parts.loc[part_code, "tolerance_plus_pct"] / 100)
        draws = _draws(film, rated, lower, upper, float(latent["life_scale_h"][unit]), samples, rng)
        log_likelihood = np.zeros(samples)
        mine = by_unit.get(unit)
        if mine is not None and len(mine):
            days = (mine["taken_at"].dt.tz_localize(None).dt.normalize() - pd.Timestamp(simulated.START)).dt.days
            stress = fleet.stress_h[days.to_numpy(), unit].astype(float)
            case = mine["case_temperature_c"].to_numpy(float)
            if film:
                factor = 1 + latent["tempco_per_k"][unit] * (case - 25)
            else:
                tempco = np.where(case > 25, simulated.ELECTROLYTIC_TEMPCO_HOT, simulated.ELECTROLYTIC_TEMPCO_COLD)
                factor = 1 + tempco * (case - 25)
            measured = mine["technician_uf"].to_numpy(float) / factor
            in_circuit = mine["method"].to_numpy() == "in_circuit"
            relative_sd = np.where(in_circuit, np.hypot(simulated.CLAMP_SD, simulated.VOLTMETER_SD), simulated.METER_SD)
            loss = np.minimum(_path_loss(film, stress[None, :] / draws["scale"][:, None], draws), 0.95)
            predicted = draws["c0"][:, None] * (1 - loss)
            log_likelihood = -0.5 * (((measured - predicted) / (relative_sd * measured)) ** 2).sum(axis=1)
        weight = np.exp(log_likelihood - log_likelihood.max())
        future = float(fleet.stress_h[horizon_index, unit])
        future_loss = np.minimum(_path_loss(film, np.array([future]) / draws["scale"][:, None], draws)[:, 0], 0.95)
        probability[i] = float((weight * (draws["c0"] * (1 - future_loss) < lower)).sum() / weight.sum())
    return units.assign(probability=probability)


def bound_scores(fleet: simulated.Fleet, cutoff: dt.date, samples: int = 6000, recall: float = 0.85) -> dict:
    """The bound's figures at one cut-off, overall and per dielectric, scored as `scoring.score`
    scores the risk levels: capacitors not yet below their limit at the cut-off; a positive crosses
    within the horizon; one that never crosses counts only if the span reaches the horizon."""
    frame = crossing_probability(fleet, cutoff, samples)
    day = pd.Timestamp(cutoff)
    crossed = frame["crossed_on"]
    above = crossed.isna() | (crossed >= day)
    span_ok = frame["span_end"] >= day + pd.Timedelta(days=HORIZON_DAYS)
    frame = frame[above & (crossed.notna() | span_ok)]
    positive = (frame["crossed_on"] < day + pd.Timedelta(days=HORIZON_DAYS)).to_numpy()
    out = {}
    for group in ("all", "film", "electrolytic"):
        mask = np.ones(len(frame), bool) if group == "all" else (frame["dielectric"] == group).to_numpy()
        p, y = frame["probability"].to_numpy()[mask], positive[mask]
        flagged = expected_recall_rule(p, recall)
        out[group] = {
            "positives": int(y.sum()),
            "eligible": int(mask.sum()),
            "hindsight_precision": best_precision_at_recall(p, y, recall),
            "rule_precision": float((flagged & y).sum() / max(flagged.sum(), 1)),
            "rule_recall": float((flagged & y).sum() / max(y.sum(), 1)),
        }
    return out


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seed", type=int, default=20261202)
    parser.add_argument("--cutoff", action="append", default=None, help="YYYY-MM-DD (repeat; default both)")
    parser.add_argument("--samples", type=int, default=6000)
    args = parser.parse_args(argv)
    cutoffs = [dt.date.fromisoformat(c) for c in (args.cutoff or ["2024-01-01", "2025-01-01"])]
    fleet = simulated.simulate(np.random.default_rng(args.seed), record_stress=True)
    print("seed     cut-off     group         pos  eligible  hindsight best prec.  rule prec.  rule recall")
    for cutoff in cutoffs:
        for group, row in bound_scores(fleet, cutoff, args.samples).items():
            print(
                f"{args.seed:<8d} {cutoff}  {group:<12s} {row['positives']:4d}  {row['eligible']:8d}"
                f"  {row['hindsight_precision']:20.0%}  {row['rule_precision']:10.0%}  {row['rule_recall']:11.0%}"
            )


if __name__ == "__main__":
    main()
