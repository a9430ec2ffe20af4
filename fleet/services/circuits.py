"""Equivalent circuits for motors that have only a nameplate, one solve per design."""

from __future__ import annotations

import numpy as np

from fleet.engineering.nameplate import CommissioningReadings, Nameplate, ParameterEstimate, estimate_designs
from fleet.models import FittedCapacitor, Motor, Reading

from .selectors import CIRCUIT_FIELDS, not_superseded

CIRCUIT_MODEL_FIELDS = (*CIRCUIT_FIELDS, "circuit_source")
NAMEPLATE_FIELDS = [
    "rated_voltage_v",
    "frequency_hz",
    "poles",
    "output_w",
    "full_load_current_a",
    "rated_speed_rpm",
    "motor_type",
]


def circuit_fields(estimate: ParameterEstimate) -> dict:
    """A nameplate estimate as the Motor model's circuit fields."""
    return dict(
        r1m_ohm=estimate.r1m,
        x1m_ohm=estimate.x1m,
        r1a_ohm=estimate.r1a,
        x1a_ohm=estimate.x1a,
        r2_ohm=estimate.r2,
        x2_ohm=estimate.x2,
        xm_ohm=estimate.xm,
        turns_ratio=estimate.turns_ratio,
        rotational_loss_w=estimate.rotational_loss_w,
        circuit_source="estimated",
    )


def estimate_circuits(motor_ids=None) -> int:
    """Fill the circuit of motors without one (entered circuits are kept).

    Motors sharing a nameplate and capacitor ratings share one estimate, so a
    register of thousands needs only as many solves as it has designs.
    """
    motors = Motor.objects.filter(r1m_ohm__isnull=True)
    if motor_ids is not None:
        motors = motors.filter(id__any_of=np.asarray(list(motor_ids), np.int64))
    rows = list(motors.values_list("id", *NAMEPLATE_FIELDS))
    if not rows:
        return 0
    ratings = {}
    for motor_id, role, rated_uf in FittedCapacitor.objects.filter(
        motor_id__any_of=np.array([r[0] for r in rows], np.int64), removed_on__isnull=True
    ).values_list("motor_id", "role", "part__rated_uf"):
        ratings.setdefault(motor_id, {})[role] = rated_uf
    by_design: dict[tuple, list[int]] = {}
    for motor_id, *plate in rows:
        rating = ratings.get(motor_id, {})
        by_design.setdefault(
            (*plate, rating.get(FittedCapacitor.Role.RUN, 0.0), rating.get(FittedCapacitor.Role.START, 0.0)), []
        ).append(motor_id)
    designs = list(by_design)
    estimates = estimate_designs([Nameplate(*design) for design in designs])
    updated = [
        Motor.objects.filter(id__in=by_design[design]).update(**circuit_fields(estimate))
        for design, estimate in zip(designs, estimates, strict=True)
    ]
    return sum(updated)


def fit_circuits_from_readings(motor_ids=None, max_error_pct: float = 10.0) -> dict:
    """Refine motors' circuits from their earliest run-capacitor reading that has both
    winding currents (commissioning data, taken at normal running load).

    One problem per such motor (each has its own data), all solved together; the estimate must reproduce
    the nameplate and the currents within `max_error_pct`, otherwise the motor
    keeps its nameplate estimate. Circuits entered by hand are never touched.
    """
    readings = Reading.objects.filter(
        not_superseded(),  # a corrected reading's currents are the ones put right (an audit found them used)
        fitted_capacitor__role=FittedCapacitor.Role.RUN,
        main_current_a__isnull=False,
        aux_current_a__isnull=False,
    ).exclude(fitted_capacitor__motor__circuit_source="entered")
    if motor_ids is not None:
        readings = readings.filter(fitted_capacitor__motor_id__any_of=np.asarray(list(motor_ids), np.int64))
    rows = readings.order_by("fitted_capacitor__motor_id", "taken_at").values_list(
        "fitted_capacitor__motor_id", "capacitance_uf", "main_current_a", "aux_current_a"
    )
    first = {}
    for motor_id, capacitance_uf, main_a, aux_a in rows:
        first.setdefault(motor_id, (capacitance_uf, main_a, aux_a))
    if not first:
        return {"fitted": 0, "kept": 0}
    starts = dict(
        FittedCapacitor.objects.filter(
            motor_id__in=first, role=FittedCapacitor.Role.START, removed_on__isnull=True
        ).values_list("motor_id", "part__rated_uf")
    )
    motors = list(Motor.objects.filter(id__in=first))
    plates = [
        Nameplate(
            motor.rated_voltage_v,
            motor.frequency_hz,
            motor.poles,
            motor.output_w,
            motor.full_load_current_a,
            motor.rated_speed_rpm,
            motor.motor_type,
            first[motor.id][0],
            starts.get(motor.id, 0.0),
        )
        for motor in motors
    ]
    readings = [CommissioningReadings(main_current_a=first[m.id][1], aux_current_a=first[m.id][2]) for m in motors]
    fitted, kept = [], 0
    for motor, estimate in zip(motors, estimate_designs(plates, readings), strict=True):
        if estimate.fit_error_pct > max_error_pct:
            kept += 1
            continue
        for name, value in {**circuit_fields(estimate), "circuit_source": "fitted"}.items():
            setattr(motor, name, value)
        fitted.append(motor)
    if fitted:
        Motor.objects.bulk_update(fitted, list(CIRCUIT_MODEL_FIELDS))
    return {"fitted": len(fitted), "kept": kept}
