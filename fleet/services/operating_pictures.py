"""The motor page's operating-point pictures (phasors as new and now, and the figures against capacitance) and
the capacitor page's and the API's operating figures, computed by the core from the motor's stored circuit and
the stored assessments.

One motor's capacitors in one core call (a few milliseconds): no trend is fitted on a page load,
the "now" capacitance is the current assessment's.
"""

from __future__ import annotations

import numpy as np

from fleet.charts import capacitance_sweep_figure, phasor_figure
from fleet.engineering.capacitor import VERDICT_NAMES, VERDICT_OPEN, VERDICT_SHORT
from fleet.engineering.drift import ROLE_RUN, capacitor_sweep, limit_levels, operating_figures

from .assessments import motor_circuits
from .selectors import fitted_capacitors_frame

QUANTITIES = ("starting_torque_nm", "capacitor_voltage_v", "main_current_a")  # as in LimitLevels
SWEEP_FRACTIONS = np.linspace(0.5, 1.1, 25)  # 50 % to 110 % of rated, 2.5 % steps


def _number(value) -> float | None:
    """A finite float for the page's JSON, None otherwise (JSON has no NaN)."""
    value = float(value)
    return round(value, 4) if np.isfinite(value) else None


CURRENTS = {"i_line": "line", "i_main": "main", "i_aux": "aux"}
VOLTAGES = {"supply_v": "supply", "v_capacitor": "capacitor"}


def _phasor_points(phasors, column: tuple[int, int], names: dict[str, str]) -> dict:
    """Magnitude and angle (degrees, supply at 0) of the named phasors at one point of the sweep."""
    return {
        label: (_number(np.abs(value[column])), _number(np.degrees(np.angle(value[column]))))
        for label, value in ((label, getattr(phasors, name)) for name, label in names.items())
    }


NOT_WORKING = (VERDICT_NAMES[VERDICT_OPEN], VERDICT_NAMES[VERDICT_SHORT])


def no_figures_now(assessment) -> str:
    """Why the motor's operating figures "now" are not worked out for this capacitor, in words; "" where they are.

    A capacitor whose newest reading says open or short circuit is not in the circuit as its trend (a walk found
    a capacitor read at 0 uF shown with its motor starting as new, at the trend's 29 uF): the figures as now would
    be those of a motor without it, which the model does not solve, so none are shown."""
    if assessment is None or assessment.latest_verdict not in NOT_WORKING:
        return ""
    return (
        f"its newest reading says {assessment.latest_verdict}: the capacitor is not working as its trend, so the "
        "motor's figures now are not worked out"
    )


def _fraction_now(capacitance_now_uf, rated_uf) -> tuple[np.ndarray, np.ndarray]:
    """(each capacitor's capacitance now as a fraction of rated, whether one is known): the assessment's capacitance
    now, or the rating where there is none (no assessment, or none above zero), as the figures "now" are drawn."""
    fraction = np.asarray(capacitance_now_uf, float) / np.asarray(rated_uf, float)
    known = np.isfinite(fraction) & (fraction > 0)
    return np.where(known, fraction, 1.0), known


def motor_pictures(capacitors) -> dict[int, dict]:
    """Per capacitor in service (by id): phasor figures of currents and voltages, and the figures
    against capacitance with the limits.

    `capacitors` are one motor's fitted capacitors in service, each with `assessment` (the current
    one, or None). Empty when the motor has no equivalent circuit.
    """
    capacitors = list(capacitors)
    if not capacitors:
        return {}
    inst = fitted_capacitors_frame([c.id for c in capacitors])
    with_circuit, circuit, load, run_uf, start_uf, kind = motor_circuits(inst)
    if not with_circuit.all():
        return {}
    by_id = {c.id: c for c in capacitors}
    ordered = [by_id[int(i)] for i in inst["fitted_capacitor_id"]]
    rated_uf = inst["rated_uf"].to_numpy(float)
    now_uf = np.array([c.assessment.capacitance_now_uf if c.assessment else np.nan for c in ordered])
    now_fraction, has_now = _fraction_now(now_uf, rated_uf)
    has_now &= np.array([not no_figures_now(c.assessment) for c in ordered], bool)
    role = inst["role"].to_numpy()
    n = len(inst)
    # Per capacitor: the grid, then as new (rated), then now.
    now_column = now_fraction[:, None]
    fractions = np.hstack([np.tile(SWEEP_FRACTIONS, (n, 1)), np.ones((n, 1)), now_column])
    sweep = capacitor_sweep(circuit, load, kind, role, run_uf, start_uf, fractions)
    levels = limit_levels(load, role, inst["full_load_current_a"], inst["part_rated_voltage_v"])
    swept = {
        "starting_torque_nm": sweep.figures.starting_torque_nm,
        "capacitor_voltage_v": sweep.capacitor_voltage_v,
        "main_current_a": sweep.figures.i_main_a,
    }
    steps = len(SWEEP_FRACTIONS)
    pictures = {}
    for i, capacitor in enumerate(ordered):
        points = {"as new": steps, **({"now": steps + 1} if has_now[i] else {})}
        where = "running" if role[i] == ROLE_RUN else "at standstill"
        currents = {state: _phasor_points(sweep.phasors, (i, k), CURRENTS) for state, k in points.items()}
        voltages = {state: _phasor_points(sweep.phasors, (i, k), VOLTAGES) for state, k in points.items()}
        limits = capacitor.assessment.limits if capacitor.assessment else []
        pictures[capacitor.id] = {
            "currents": phasor_figure(currents, "A", where),
            "voltages": phasor_figure(voltages, "V", where),
            "sweep": capacitance_sweep_figure(
                percent_of_rated=[round(100 * f, 2) for f in SWEEP_FRACTIONS],
                rated_uf=float(rated_uf[i]),
                values={name: [_number(v) for v in swept[name][i, :steps]] for name in QUANTITIES},
                levels={name: _number(getattr(levels, name)[i]) for name in QUANTITIES},
                points={
                    state: {
                        "percent_of_rated": round(100 * float(sweep.fraction[i, k]), 2),
                        **{name: _number(swept[name][i, k]) for name in QUANTITIES},
                    }
                    for state, k in points.items()
                },
                crossings=[
                    {"name": limit["name"], "percent_of_rated": round(100 * limit["fraction_of_rated"], 1)}
                    for limit in limits
                    if limit.get("fraction_of_rated") is not None and limit.get("used")
                ],
            ),
        }
    return pictures


def with_operating_figures(assessments) -> list:
    """The assessments as a list, each with `figures_new` and `figures_now`: its motor's operating figures
    (`drift.OperatingFigures.as_rows`) with the capacitor as new (its rating) and as now (the assessment's
    capacitance now; at its rating where there is none), {} where the motor has no equivalent circuit, and
    `figures_now` {} too where the newest reading says open or short circuit (`no_figures_now`, its words).

    Worked out on reading, for all of them in one core call (the capacitor page's one assessment, an API
    page's hundred), not stored: every refit wrote two dozen figures a capacitor that a page recomputes in
    milliseconds. Two queries (the capacitors with their motors' circuits, their companions' ratings)."""
    assessments = list(assessments)
    for assessment in assessments:
        assessment.figures_new, assessment.figures_now = {}, {}
        assessment.no_figures_now = no_figures_now(assessment)
    if not assessments:
        return assessments
    inst = fitted_capacitors_frame({a.fitted_capacitor_id for a in assessments})
    with_circuit, circuit, load, run_uf, start_uf, kind = motor_circuits(inst)
    if not with_circuit.any():
        return assessments
    sub = inst[with_circuit]
    ids = sub["fitted_capacitor_id"].to_numpy(np.int64)
    now_uf = {a.fitted_capacitor_id: a.capacitance_now_uf for a in assessments}
    scale, _ = _fraction_now(np.array([now_uf[i] for i in ids.tolist()], float), sub["rated_uf"].to_numpy(float))
    is_run = sub["role"].to_numpy() == ROLE_RUN
    # As new and as now in one solve (each motor twice): the solver's fixed cost is most of a page's.
    twice = np.tile(np.arange(len(sub)), 2)
    rows = operating_figures(
        circuit.take(twice),
        load.take(twice),
        np.concatenate([run_uf, np.where(is_run, scale, 1.0) * run_uf]),
        np.concatenate([start_uf, np.where(is_run, 1.0, scale) * start_uf]),
        kind[twice],
    ).as_rows()
    new, now = rows[: len(sub)], rows[len(sub) :]
    figures = dict(zip(ids.tolist(), zip(new, now, strict=True), strict=True))
    for assessment in assessments:
        if assessment.fitted_capacitor_id in figures:
            assessment.figures_new, assessment.figures_now = figures[assessment.fitted_capacitor_id]
            if assessment.no_figures_now:
                assessment.figures_now = {}
    return assessments
