"""Equivalent circuits for motors that have only a nameplate, one solve per design."""

from __future__ import annotations

from fleet.engineering.nameplate import Nameplate, ParameterEstimate, estimate_parameters
from fleet.models import FittedCapacitor, Motor

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
        motors = motors.filter(id__in=list(motor_ids))
    rows = list(motors.values_list("id", *NAMEPLATE_FIELDS))
    if not rows:
        return 0
    ratings = {}
    for motor_id, role, rated_uf in FittedCapacitor.objects.filter(
        motor_id__in=[r[0] for r in rows], removed_on__isnull=True
    ).values_list("motor_id", "role", "part__rated_uf"):
        ratings.setdefault(motor_id, {})[role] = rated_uf
    by_design: dict[tuple, list[int]] = {}
    for motor_id, *plate in rows:
        rating = ratings.get(motor_id, {})
        by_design.setdefault((*plate, rating.get("run", 0.0), rating.get("start", 0.0)), []).append(motor_id)
    updated = []
    for (volts, hertz, poles, output, current, speed, kind, run_uf, start_uf), ids in by_design.items():
        estimate = estimate_parameters(Nameplate(volts, hertz, poles, output, current, speed, kind, run_uf, start_uf))
        updated.append(Motor.objects.filter(id__in=ids).update(**circuit_fields(estimate)))
    return sum(updated)
