"""The substitute advisor against the motor model's reference motors.

Motors: the fan of test_operating_point.py (FAN, the demo's example fan, whose limits the
forecast's tests pin), and for a start capacitor the capacitor-start motor built on Chapman,
Electric Machinery Fundamentals 5th ed. Problem 9-1's main winding (test_motor_references.circuit)
[pub] with its auxiliary [derived]. Marks as in the primer: [pub], [trade] common practice of the
trade (no single source), [mem] from memory (unverified), [derived] follows from the model.
"""

import numpy as np
import pytest

from fleet.engineering.drift import DriftLimits, capacitance_limits, operating_figures
from fleet.engineering.motor import (
    LOAD_CONSTANT,
    LOAD_FAN,
    load_matching_rated_slip,
    max_starting_torque_capacitance_uf,
    operating_point,
)
from fleet.engineering.substitutes import (
    CAUTION_PARALLEL,
    CAUTION_SERIES,
    PARALLEL,
    SERIES,
    Candidates,
    Position,
    SubstituteRules,
    advise,
    shown_volts,
    with_pairs,
)
from tests.engineering.test_motor_references import circuit as chapman_circuit
from tests.engineering.test_operating_point import RATED_SLIP, fan

DESIGN_UF = 4.0


def fan_position(design_voltage_v=450.0, with_circuit=True) -> Position:
    c = fan()
    return Position(
        role="run",
        motor_kind="permanent_split",
        frequency_hz=50.0,
        full_load_current_a=0.95,
        design_uf=DESIGN_UF,
        design_voltage_v=design_voltage_v,
        design_dielectric="film",
        design_class="B",
        design_tolerance_minus_pct=5.0,
        design_tolerance_plus_pct=5.0,
        circuit=c if with_circuit else None,
        load=load_matching_rated_slip(c, DESIGN_UF, RATED_SLIP, LOAD_FAN) if with_circuit else None,
    )


def parts(*rows) -> Candidates:
    """rows: (code, uF, V, dielectric[, Hz, class])."""
    rows = [(*r, 50.0, "B")[:6] if len(r) == 4 else r for r in rows]
    code, uf, volts, dielectric, hz, klass = zip(*rows, strict=True)
    return Candidates.from_arrays(
        code=np.array(code, dtype=object),
        rated_uf=uf,
        rated_voltage_v=volts,
        dielectric=np.array(dielectric, dtype=object),
        frequency_hz=hz,
        class_of_operation=np.array(klass, dtype=object),
        tolerance_minus_pct=np.full(len(rows), 5.0),
        tolerance_plus_pct=np.full(len(rows), 5.0),
    )


def by_code(advice):
    return {
        str(code): (str(verdict), reasons, caution)
        for code, verdict, reasons, caution in zip(
            advice.candidates.code, advice.verdict, advice.reasons, advice.cautions, strict=True
        )
    }


def test_the_design_value_is_suitable_and_its_figures_are_the_motor_models():
    """[derived] the design part sits inside every limit the forecast uses, and the figures beside it are
    the operating point of the model itself (solved here independently)."""
    position = fan_position()
    advice = advise(position, parts(("DESIGN", DESIGN_UF, 450.0, "film")))
    assert advice.verdict.tolist() == ["suitable"]
    point = operating_point(position.circuit, DESIGN_UF, position.load)
    assert advice.figures.i_main_a[0] == pytest.approx(abs(point.i_main), rel=1e-9)
    assert advice.design_figures.v_capacitor_v[0] == pytest.approx(abs(point.v_capacitor), rel=1e-9)
    assert advice.predicted_voltage_v[0] == pytest.approx(abs(point.v_capacitor), rel=1e-9)


def test_rated_voltage_below_the_predicted_capacitor_voltage_is_unsuitable_and_says_so():
    """[derived] the fan's run capacitor sits near 392 V at 4 uF, well above the 230 V supply (the primer's
    warning); [trade] a rating at least that voltage (the forecast's own limit), marginal without a 10 % margin.
    The original is marked 350 V here, so the never-lower rule does not decide: only the predicted voltage does."""
    position = fan_position(design_voltage_v=350.0)
    predicted = abs(operating_point(position.circuit, DESIGN_UF, position.load).v_capacitor)
    low, mid, high = 0.99 * predicted, 1.05 * predicted, SubstituteRules().voltage_margin * predicted * 1.01
    candidates = parts(
        ("LOW-V", DESIGN_UF, low, "film"), ("MID-V", DESIGN_UF, mid, "film"), ("HIGH-V", DESIGN_UF, high, "film")
    )
    advice = by_code(advise(position, candidates))
    verdict, reasons, _ = advice["LOW-V"]
    assert verdict == "unsuitable"
    assert any(f"below the predicted capacitor voltage {predicted:.0f} V" in r for r in reasons)
    assert advice["MID-V"][0] == "marginal" and "within the 10% margin" in advice["MID-V"][1][0]
    assert advice["HIGH-V"][0] == "suitable"
    assert advise(position, parts(("HIGH-V", DESIGN_UF, high, "film"))).concerns == [[]]


def test_a_nameplate_only_circuit_makes_a_rating_just_under_its_estimate_marginal_not_unsuitable():
    """A technician replacing like for like saw the design's own 370 V part in red as "unsuitable": a
    circuit estimated from the nameplate alone put 414 V across it. Such an estimate resolves the
    capacitor voltage no finer than 15 % (EstimateResolution, the forecast's rule for setting such a
    limit aside [derived]): a rating that close under it is marginal, a design finding to confirm with
    a measured voltage; further under, unsuitable as before; an entered circuit keeps its verdict."""
    from dataclasses import replace

    entered = fan_position(design_voltage_v=300.0)  # under both: the never-lower rule does not decide
    estimated = replace(entered, nameplate_only=True)
    predicted = abs(operating_point(entered.circuit, DESIGN_UF, entered.load).v_capacitor)
    near, far = predicted / 1.12, predicted / 1.2  # 12 % and 20 % under the estimate
    candidates = parts(("NEAR", DESIGN_UF, near, "film"), ("FAR", DESIGN_UF, far, "film"))
    nameplate = by_code(advise(estimated, candidates))
    assert nameplate["NEAR"][0] == "marginal"
    assert any("a nameplate-only estimate puts across it" in r for r in nameplate["NEAR"][1])
    assert nameplate["FAR"][0] == "unsuitable"
    assert by_code(advise(entered, candidates))["NEAR"][0] == "unsuitable"


def test_a_nameplate_only_margin_does_not_fault_a_rating_at_least_the_design_parts():
    """Every run part on the stand-in parts page, the design's own included, showed as marginal: a 450 V
    rating over a 414-421 V nameplate-only estimate is inside the 10 % margin [trade], but such an estimate
    resolves the voltage no finer than 15 % [derived]: a rating at least the design part's is as designed.
    A lower rating than the design's keeps the margin rule, and so does an entered circuit."""
    from dataclasses import replace

    entered = fan_position(design_voltage_v=300.0)
    predicted = abs(operating_point(entered.circuit, DESIGN_UF, entered.load).v_capacitor)
    tight = 1.05 * predicted  # inside the 10 % margin, above the estimate
    as_designed = replace(entered, design_voltage_v=tight, nameplate_only=True)
    candidates = parts(("DESIGN", DESIGN_UF, tight, "film"))
    verdict, reasons, _ = by_code(advise(as_designed, candidates))["DESIGN"]
    assert verdict == "suitable" and any("as the design part or more: as designed" in r for r in reasons)
    lower_design = replace(as_designed, design_voltage_v=tight * 1.01)  # the candidate is rated under the design
    assert by_code(advise(lower_design, candidates))["DESIGN"][0] == "unsuitable"  # the never-lower rule
    assert by_code(advise(replace(entered, design_voltage_v=tight), candidates))["DESIGN"][0] == "marginal"


def test_never_a_lower_voltage_rating_than_the_part_it_replaces():
    """[trade] a substitute's voltage rating is never lower than the original's, even if the model allows."""
    advice = by_code(advise(fan_position(), parts(("440V", DESIGN_UF, 440.0, "film"))))
    verdict, reasons, _ = advice["440V"]
    assert verdict == "unsuitable"
    assert any("lower than the 450 V part it replaces" in r for r in reasons)


def test_a_start_duty_electrolytic_in_a_run_position_is_unsuitable():
    """[trade] electrolytic capacitors are for short start duty; in a run position they fail (never the other way)."""
    advice = by_code(advise(fan_position(), parts(("START-E", DESIGN_UF, 450.0, "electrolytic"))))
    verdict, reasons, _ = advice["START-E"]
    assert verdict == "unsuitable"
    assert any("electrolytic is not the film a run" in r for r in reasons)


def test_a_film_part_in_a_start_position_is_unsuitable_and_the_design_electrolytic_suitable():
    """[trade] same dielectric and duty; [derived] the design value is the model's largest-torque capacitance
    of the Chapman 9-1 based motor, inside its break-away limit."""
    c = chapman_circuit()
    design = round(float(max_starting_torque_capacitance_uf(c.z_main_locked, c.z_aux_locked, 60.0)))
    position = Position(
        role="start",
        motor_kind="capacitor_start",
        frequency_hz=60.0,
        full_load_current_a=20.0,
        design_uf=design,
        design_voltage_v=250.0,
        design_dielectric="electrolytic",
        design_class="",
        design_tolerance_minus_pct=0.0,
        design_tolerance_plus_pct=20.0,
        circuit=c,
        load=load_matching_rated_slip(c, 0.0, 0.05, LOAD_CONSTANT, aux_in_circuit=False),
    )
    candidates = parts(("E", design, 250.0, "electrolytic", 60.0, ""), ("F", design, 250.0, "film", 60.0, ""))
    advice = advise(position, candidates)
    assert advice.verdict.tolist() == ["suitable", "unsuitable"]
    locked = operating_figures(c, position.load, 0.0, design, "capacitor_start")
    assert advice.figures.starting_torque_nm[0] == pytest.approx(float(locked.starting_torque_nm), rel=1e-9)


def test_a_parallel_pair_equal_to_the_design_value_is_suitable_with_the_caution():
    """[trade] two capacitors in parallel add; each carries the full voltage, hence the caution."""
    position = fan_position()
    singles = parts(("TWO", 2.0, 450.0, "film"), ("ONE-HALF", 1.5, 450.0, "film"))
    advice = by_code(advise(position, with_pairs(singles, position)))
    verdict, _, caution = advice["TWO + TWO"]
    assert verdict == "suitable"
    assert caution == CAUTION_PARALLEL and "each must carry the full voltage rating" in caution
    assert advice["TWO"][0] == "unsuitable"  # half the value alone breaks the main-winding current
    assert "ONE-HALF + ONE-HALF" not in advice  # 3 uF is outside the run band: not offered


def test_two_equal_parts_in_series_give_half_the_capacitance_at_twice_the_voltage():
    """[trade] series: C/2 at 2V, offered only where one part alone lacks the voltage rating."""
    position = fan_position()
    pairs = with_pairs(parts(("EIGHT-250", 8.0, 250.0, "film")), position)
    series = np.flatnonzero(pairs.arrangement == SERIES)
    assert len(series) == 1
    assert pairs.rated_uf[series[0]] == pytest.approx(4.0) and pairs.rated_voltage_v[series[0]] == pytest.approx(500)
    advice = advise(position, pairs)
    assert advice.verdict[series[0]] == "suitable" and advice.cautions[series[0]] == CAUTION_SERIES
    assert not (pairs.arrangement == PARALLEL).any()


def test_a_value_far_above_the_design_is_unsuitable():
    """The issue's case: a 30 uF part on a fan designed for a few uF. [derived] the main-winding current
    passes the forecast's limit (1.15 x full-load current); [trade] outside the run band."""
    advice = by_code(advise(fan_position(), parts(("THIRTY", 30.0, 450.0, "film"))))
    verdict, reasons, _ = advice["THIRTY"]
    assert verdict == "unsuitable"
    assert any("outside the run band" in r for r in reasons)
    assert any("breaks the motor's limit: main-winding current" in r for r in reasons)
    wide = advise(fan_position(), parts(("THIRTY", 30.0, 450.0, "film")), SubstituteRules(run_band=10.0))
    assert wide.verdict.tolist() == ["unsuitable"]  # the motor's limit alone decides


def test_near_the_lowest_value_where_the_limits_hold_is_marginal():
    """[derived] the lowest value is the forecast's own crossing (capacitance_limits); [mem] marginal within
    10 % above it. A wider run band lets the part through the band rule so the window alone decides."""
    position = fan_position()
    lowest = DESIGN_UF * float(
        capacitance_limits(
            position.circuit, position.load, "permanent_split", "run", 4.0, 0.0, 0.95, np.inf
        ).governing_fraction
    )
    rules = SubstituteRules(run_band=0.5)
    advice = advise(position, parts(("NEAR", lowest * 1.05, 450.0, "film")), rules, DriftLimits())
    assert advice.lowest_uf == pytest.approx(lowest)
    assert advice.verdict.tolist() == ["marginal"]
    assert any("lowest value where the motor's limits hold" in r for r in advice.reasons[0])


def test_the_marginal_window_ends_ten_percent_above_the_lowest_value():
    """[mem] marginal within 10 % above the lowest capacitance where the motor's limits hold
    (`SubstituteRules.edge_margin`); [derived] the lowest value is the forecast's own crossing. A part
    0.1 % of the window inside the edge is marginal, naming it; one 0.1 % outside is suitable."""
    position = fan_position()
    lowest = DESIGN_UF * float(
        capacitance_limits(
            position.circuit, position.load, "permanent_split", "run", 4.0, 0.0, 0.95, np.inf
        ).governing_fraction
    )
    candidates = parts(("INSIDE", lowest * 1.099, 450.0, "film"), ("OUTSIDE", lowest * 1.101, 450.0, "film"))
    advice = advise(position, candidates, SubstituteRules(run_band=0.5), DriftLimits())
    assert advice.verdict.tolist() == ["marginal", "suitable"]
    named = [any("within 10% of the lowest value" in r for r in reasons) for reasons in advice.reasons]
    assert named == [True, False]


def test_frequency_and_class_of_operation():
    """[trade] a part rated for a lower frequency than the supply is unsuitable, a higher one marginal;
    [pub] IEC 60252-1 classes of operation A-D (longest life first): no worse than the original."""
    advice = by_code(
        advise(
            fan_position(),
            parts(("HZ60", 4.0, 450.0, "film", 60.0, "B"), ("CLASS-C", 4.0, 450.0, "film", 50.0, "C")),
        )
    )
    assert advice["HZ60"][0] == "marginal"
    assert advice["CLASS-C"][0] == "unsuitable" and "worse than the original's B" in advice["CLASS-C"][1][0]


def test_without_a_circuit_judged_by_ratings_alone_within_the_marked_tolerance():
    """[trade] with no model, a substitute within the original's marked tolerance and ratings; the reasons say
    the figures are missing."""
    position = fan_position(with_circuit=False)
    advice = advise(position, parts(("SAME", 4.1, 450.0, "film"), ("FAR", 4.5, 450.0, "film")))
    assert advice.verdict.tolist() == ["suitable", "unsuitable"]
    assert advice.figures is None and np.isnan(advice.predicted_voltage_v).all()
    assert all(any("ratings alone" in r for r in reasons) for reasons in advice.reasons)
    assert "marked tolerance, 3.8-4.2 µF" in advice.reasons[1][0]


@pytest.mark.parametrize("voltage_v", [421.46, 421.44, 420.5, 419.95, 0.049, 399.5])
def test_a_reason_rounds_a_voltage_as_the_page_shows_its_figure(voltage_v):
    """A walk: a reason said 421 V beside a figure of 422 V, both from 421.46 V (the figure stored to 0.1 V, then
    shown to whole volts: rounded twice). [derived] `shown_volts` gives the whole volts Django's `floatformat:0`
    shows for the value stored to 0.1 V (Django's documented filter, rounding half up)."""
    from django.template.defaultfilters import floatformat

    assert f"{float(shown_volts(voltage_v)):.0f}" == floatformat(round(voltage_v, 1), 0)
