"""The information bound of the simulation suite (tests/simulation/bound.py), without Django.

The two decision rules are checked on hand-made scores whose figures follow from their
definitions [derived]; the bound's paths are checked against the simulation's own truth:
drawn with a unit's recorded latent values, its path must cross its limit on the day the
simulation recorded the crossing.
"""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd
import pytest

from tests.simulation import bound
from tests.simulation import fleet as simulated


def test_best_precision_at_recall_reads_the_curve_and_never_splits_a_tie():
    # Scores 0.9 and 0.5, 0.5: catching both positives means flagging the whole tie.
    assert bound.best_precision_at_recall([0.9, 0.5, 0.5], [True, True, False], recall=0.9) == pytest.approx(2 / 3)
    # Three positives of five; 85 % needs all three: flag down to 0.3 (four flagged).
    scores, positive = [0.9, 0.8, 0.7, 0.3, 0.1], [True, False, True, True, False]
    assert bound.best_precision_at_recall(scores, positive, recall=0.85) == pytest.approx(3 / 4)
    # At 60 % (two of three) flagging down to 0.7 catches two of three flagged, down to 0.3 three of
    # four: the better one counts. At 30 % the first alone is right.
    assert bound.best_precision_at_recall(scores, positive, recall=0.6) == pytest.approx(3 / 4)
    assert bound.best_precision_at_recall(scores, positive, recall=0.3) == pytest.approx(1.0)
    assert np.isnan(bound.best_precision_at_recall([0.5, 0.4], [False, False]))


def test_the_rule_without_hindsight_flags_until_the_expected_recall_is_reached():
    # Sum 1.5; 85 % of it is 1.275: 0.9 alone is 0.6 of it, 0.9 + 0.5 is 0.93.
    flagged = bound.expected_recall_rule([0.1, 0.9, 0.0, 0.5], recall=0.85)
    assert flagged.tolist() == [False, True, False, True]
    assert not bound.expected_recall_rule([0.0, 0.0]).any()


@pytest.fixture(scope="module")
def small_fleet():
    return simulated.simulate(np.random.default_rng(5), motors=40, end=dt.date(2021, 12, 31), record_stress=True)


def test_recording_the_stress_leaves_the_fleet_as_it_was(small_fleet):
    plain = simulated.simulate(np.random.default_rng(5), motors=40, end=dt.date(2021, 12, 31))
    pd.testing.assert_frame_equal(plain.units, small_fleet.units)
    pd.testing.assert_frame_equal(plain.readings, small_fleet.readings)
    assert (
        plain.stress_h is None and small_fleet.stress_h.shape[0] == (dt.date(2021, 12, 31) - simulated.START).days + 1
    )


def test_the_bound_paths_cross_on_the_day_the_simulation_recorded(small_fleet):
    latent, units = small_fleet.latent, small_fleet.units
    crossed = units[units["crossed_on"].notna()]
    assert crossed["dielectric"].value_counts().min() >= 3, "crossings of both dielectrics to check"
    for row in crossed.itertuples():
        unit, film = row.unit, bool(latent["film"][row.unit])
        draws = {"c0": np.array([latent["initial_uf"][unit]]), "scale": np.array([latent["scale_h"][unit]])}
        for name, key in (("a", "film_a"), ("b", "electrolytic_b"), ("c", "electrolytic_c"), ("p", "electrolytic_p")):
            draws[name] = np.array([latent[key][unit]])
        day = (row.crossed_on - pd.Timestamp(simulated.START)).days
        stress = small_fleet.stress_h[[day - 1, day], unit].astype(float)
        capacitance = draws["c0"] * (1 - bound._path_loss(film, stress[None, :] / draws["scale"][:, None], draws))[0]
        assert capacitance[1] < row.lower_limit_uf <= capacitance[0], row
