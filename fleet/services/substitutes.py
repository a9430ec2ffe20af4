"""Substitute parts for a fitted capacitor: the motor, its design part and the candidates loaded
in bulk, judged by the core (`fleet.engineering.substitutes`), with the site's stock beside each."""

from __future__ import annotations

import hashlib
import pickle
from collections import Counter, defaultdict
from pathlib import Path

import numpy as np
import pandas as pd
from django.core.cache import cache
from django.core.exceptions import ValidationError
from django.db import connection
from django.db.models import Sum

from fleet.engineering.drift import CIRCUIT_ESTIMATED, ROLE_RUN
from fleet.engineering.substitutes import (
    MARGINAL,
    ROLE_OF_DIELECTRIC,
    SINGLE,
    SUITABLE,
    Advice,
    Candidates,
    Position,
    advise,
    with_pairs,
)
from fleet.models import CapacitorPart, DesignCount, FittedCapacitor, SiteStock, WorkOrder
from fleet.roles import scope_to_user, visible_site_ids
from fleet.services.assessments import motor_circuits
from fleet.services.selectors import CIRCUIT_FIELDS, fitted_capacitors_frame

PART_FIELDS = [
    "id",
    "code",
    "rated_uf",
    "rated_voltage_v",
    "dielectric",
    "frequency_hz",
    "class_of_operation",
    "tolerance_minus_pct",
    "tolerance_plus_pct",
]
DESIGN_FIELDS = [
    "motor_type",
    "load_type",
    "rated_voltage_v",
    "frequency_hz",
    "poles",
    "full_load_current_a",
    "rated_speed_rpm",
    *CIRCUIT_FIELDS,
]
VERDICT_ORDER = {"suitable": 0, "marginal": 1, "unsuitable": 2}
# Operating figures shown per candidate: name in the answer (unit in the name) -> OperatingFigures field.
FIGURES = {
    "main_current_a": "i_main_a",
    "aux_current_a": "i_aux_a",
    "line_current_a": "i_line_a",
    "phase_shift_deg": "phase_shift_deg",
    "speed_rpm": "speed_rpm",
    "starting_torque_nm": "starting_torque_nm",
}


def parts_frame(codes: list[str] | None = None) -> pd.DataFrame:
    """The catalogue (or the parts named), one row each (one query); an unknown code is refused by name."""
    parts = CapacitorPart.objects.all()
    if codes is not None:
        parts = parts.filter(code__in=codes)
    frame = pd.DataFrame.from_records(list(parts.order_by("code").values_list(*PART_FIELDS)), columns=PART_FIELDS)
    if codes is not None:
        unknown = sorted(set(codes) - set(frame["code"]))
        if unknown:
            raise ValidationError({"parts": f"Unknown part code: {', '.join(unknown)}."})
    return frame


def candidates_of(frame: pd.DataFrame) -> Candidates:
    return Candidates.from_arrays(
        code=frame["code"].to_numpy(object),
        rated_uf=frame["rated_uf"].to_numpy(float),
        rated_voltage_v=frame["rated_voltage_v"].to_numpy(float),
        dielectric=frame["dielectric"].to_numpy(object),
        frequency_hz=frame["frequency_hz"].to_numpy(float),
        class_of_operation=frame["class_of_operation"].to_numpy(object),
        tolerance_minus_pct=frame["tolerance_minus_pct"].to_numpy(float),
        tolerance_plus_pct=frame["tolerance_plus_pct"].to_numpy(float),
    )


def design_part(fitted_capacitor: FittedCapacitor) -> CapacitorPart:
    """The part this position was designed for: the newest capacitor at this motor and role fitted
    without an override, so a part fitted against the advice never becomes the next one's design."""
    return design_parts([fitted_capacitor])[fitted_capacitor.id]


def design_parts(fitted_capacitors) -> dict[int, CapacitorPart]:
    """`design_part` of each fitted capacitor, by id, in one query for all those fitted against the advice
    (none for the rest: their own part is their position's design)."""
    designs = {fitted.id: fitted.part for fitted in fitted_capacitors}
    overridden = [fitted for fitted in fitted_capacitors if fitted.substitute_override]
    if not overridden:
        return designs
    advised = (
        FittedCapacitor.objects.filter(
            motor_id__in={fitted.motor_id for fitted in overridden},
            role__in={fitted.role for fitted in overridden},
            substitute_override=False,
        )
        .select_related("part")
        .order_by("-fitted_on", "-id")
    )
    by_position = defaultdict(list)  # newest first, as read
    for other in advised:
        by_position[(other.motor_id, other.role)].append(other)
    for fitted in overridden:
        position = by_position[(fitted.motor_id, fitted.role)]
        earlier = next((other for other in position if other.fitted_on <= fitted.fitted_on), None)
        designs[fitted.id] = earlier.part if earlier is not None else fitted.part
    return designs


def count_design_parts(counts: Counter, stop_gaps) -> dict[int, CapacitorPart]:
    """Spares for stop-gaps: move each one's count in `counts` (keyed `(key, part_id)`) from the part it is to
    the design part its replacement brings (`design_parts`), as its label names it; `stop_gaps` is `(key,
    fitted_capacitor)` of each stop-gap counted (its part read with it). Returns the design parts by id, to name
    them. One query where there are any."""
    stop_gaps = list(stop_gaps)
    designs = design_parts([fitted for _, fitted in stop_gaps])
    brought = {}
    for key, fitted in stop_gaps:
        design = designs[fitted.id]
        if design.id != fitted.part_id:
            counts[(key, fitted.part_id)] -= 1
            counts[(key, design.id)] += 1
            brought[design.id] = design
    return brought


def position_of(fitted_capacitor: FittedCapacitor) -> Position:
    """The position of a fitted capacitor: its motor's circuit and load (when it has one) and its design part."""
    return positions_of([fitted_capacitor])[0]


def positions_of(fitted_capacitors: list[FittedCapacitor]) -> list[Position]:
    """The positions of fitted capacitors, in their order: one frame and one circuit computation for all
    (a few queries, whatever their number), the design parts of those fitted against the advice in one more."""
    if not fitted_capacitors:
        return []
    inst = fitted_capacitors_frame([fitted_capacitor.id for fitted_capacitor in fitted_capacitors])
    with_circuit, circuit, load, run_uf, start_uf, kind = motor_circuits(inst)
    in_circuits = np.cumsum(with_circuit) - 1  # each row's place among the rows with a circuit
    row_of = {int(fitted_capacitor_id): k for k, fitted_capacitor_id in enumerate(inst["fitted_capacitor_id"])}
    positions = []
    designs = design_parts(fitted_capacitors)
    for fitted_capacitor in fitted_capacitors:
        k = row_of[fitted_capacitor.id]
        row = inst.iloc[k]
        part = designs[fitted_capacitor.id]
        has_circuit = bool(with_circuit[k])
        j = int(in_circuits[k])
        one = slice(j, j + 1)
        companion = (start_uf if row["role"] == ROLE_RUN else run_uf)[j] if has_circuit else 0.0
        positions.append(
            Position(
                role=row["role"],
                motor_kind=row["motor_type"],
                frequency_hz=float(row["frequency_hz"]),
                full_load_current_a=float(row["full_load_current_a"]),
                design_uf=float(part.rated_uf),
                design_voltage_v=float(part.rated_voltage_v),
                design_dielectric=part.dielectric,
                design_class=part.class_of_operation,
                design_tolerance_minus_pct=float(part.tolerance_minus_pct),
                design_tolerance_plus_pct=float(part.tolerance_plus_pct),
                companion_uf=float(np.nan_to_num(companion)),
                circuit=circuit.take([j]) if has_circuit else None,
                load=load.take(one) if has_circuit else None,
                nameplate_only=has_circuit and row["circuit_source"] == CIRCUIT_ESTIMATED,
            )
        )
    return positions


def _number(value, digits=3):
    value = float(np.asarray(value).ravel()[0]) if np.ndim(value) else float(value)
    return None if not np.isfinite(value) else round(value, digits)


def _figures(figures, index, position: Position) -> dict:
    if figures is None:
        return {name: None for name in [*FIGURES, "capacitor_voltage_v"]}
    voltage = figures.v_capacitor_v if position.role == ROLE_RUN else figures.start_capacitor_voltage_v
    values = {name: _number(np.atleast_1d(getattr(figures, field))[index]) for name, field in FIGURES.items()}
    values["capacitor_voltage_v"] = _number(np.atleast_1d(voltage)[index])
    return values


def substitutes_for(fitted_capacitor: FittedCapacitor, *, codes: list[str] | None = None, pairs: bool = True) -> dict:
    """Every candidate (the catalogue, or `codes`) judged for this capacitor's position, suitable first.

    Returns {"design": figures with the design's own value, "lowest_uf", "has_circuit", "items": [...]},
    each item with part_code, part_ids, arrangement, verdict, reasons, caution, ratings, figures and the
    quantity on the motor's site (pairs: the smaller of their members' quantities).
    """
    frame = parts_frame(codes)
    position = position_of(fitted_capacitor)
    singles = candidates_of(frame)
    candidates = with_pairs(singles, position) if pairs else singles
    advice: Advice = advise(position, candidates)
    stock = dict(
        SiteStock.objects.filter(site_id=fitted_capacitor.motor.site_id, part_id__in=frame["id"].tolist()).values_list(
            "part_id", "quantity"
        )
    )
    ids = frame["id"].to_numpy()
    quantity = np.array([stock.get(int(i), 0) for i in ids], int)
    items = []
    for n in range(len(candidates)):
        first, second = int(candidates.first[n]), int(candidates.second[n])
        members = [first] if second < 0 else [first, second]
        needed = 2 if second == first else 1
        on_site = int(min(quantity[m] // needed for m in members))
        items.append(
            {
                "part_code": str(candidates.code[n]),
                "part_ids": [int(ids[m]) for m in members],
                "arrangement": str(candidates.arrangement[n]),
                "verdict": str(advice.verdict[n]),
                "reasons": advice.reasons[n],
                "concerns": advice.concerns[n],
                "caution": advice.cautions[n],
                "rated_uf": _number(candidates.rated_uf[n]),
                "rated_voltage_v": _number(candidates.rated_voltage_v[n], 1),
                "dielectric": str(candidates.dielectric[n]),
                "class_of_operation": str(candidates.class_of_operation[n]),
                "frequency_hz": _number(candidates.frequency_hz[n], 0),
                "on_site": on_site,
                **_figures(advice.figures, n, position),
            }
        )
    items.sort(
        key=lambda item: (
            VERDICT_ORDER[item["verdict"]],
            item["arrangement"] != SINGLE,
            abs(item["rated_uf"] - position.design_uf),
            item["part_code"],
        )
    )
    return {
        "design": {"rated_uf": position.design_uf, **_figures(advice.design_figures, 0, position)},
        "lowest_uf": _number(advice.lowest_uf),
        "has_circuit": position.circuit is not None,
        "items": items,
    }


def verdict_of_part(fitted_capacitor: FittedCapacitor, part: CapacitorPart) -> dict:
    """The advice for one part fitted alone in this capacitor's position."""
    return substitutes_for(fitted_capacitor, codes=[part.code], pairs=False)["items"][0]


def designs_in_service(user=None) -> dict[tuple, int]:
    """The position designs among the capacitors in service at the user's sites (None: every site):
    {(part_id, role, *DESIGN_FIELDS): id of the design's first capacitor in service}. A stop-gap (fitted
    against the advice) is not its position's design and is left out (migration 0063).

    The designs come from the ledger the database keeps on write (`DesignCount`, migration 0033), a few
    rows per design and site. Each design's first capacitor is found by walking its part and role's
    capacitors in service in id order (index `in_service_by_part`), looking each one's motor up by key,
    and stopping at the first on a motor of that design at one of the user's sites: the motor is looked
    up in a scalar subquery so that the database cannot start from the motors (it would read every motor,
    its estimate of a match on 16 columns being one). One query, whatever the fleet's size.
    """
    columns = ["part_id", "role", *DESIGN_FIELDS]
    site_ids = sorted(visible_site_ids(user) or []) if user is not None else []
    at_sites = f" AND m.site_id IN ({', '.join(['%s'] * len(site_ids))})" if site_ids else ""
    motor = ["m.status", *(f"m.{name}" for name in DESIGN_FIELDS)]
    wanted = ["CAST('in_service' AS varchar(20))", *(f"g.{name}" for name in DESIGN_FIELDS)]
    if connection.vendor == "postgresql":  # one record each, equal when every field is (empty ones too)
        motor, wanted, same = f"ROW({', '.join(motor)})", f"ROW({', '.join(wanted)})", "IS NOT DISTINCT FROM"
    else:  # SQLite compares row values
        motor, wanted, same = ", ".join(motor), f"({', '.join(wanted)})", "IS"
    ledger = (
        scope_to_user(DesignCount.objects.all(), user)
        .values(*columns)
        .annotate(capacitors=Sum("n"))
        .filter(capacitors__gt=0)
        .order_by()
    )
    ledger_sql, ledger_params = ledger.query.sql_with_params()
    sql = f"""
        SELECT {", ".join(f"g.{name}" for name in columns)}, (
            SELECT c.id FROM fleet_fittedcapacitor c
            WHERE c.part_id = g.part_id AND c.role = g.role AND c.removed_on IS NULL AND NOT c.substitute_override
              AND (SELECT {motor} FROM fleet_motor m WHERE m.id = c.motor_id{at_sites}) {same} {wanted}
            ORDER BY c.id LIMIT 1
        ) FROM ({ledger_sql}) g"""
    with connection.cursor() as cursor:
        cursor.execute(sql, [*site_ids, *ledger_params])
        return {tuple(row[:-1]): row[-1] for row in cursor.fetchall()}


# The code an advice comes from: a change to the motor model or the advice's rules is a new cache key.
ADVICE_CODE = hashlib.sha256(
    b"".join(
        (Path(__file__).resolve().parents[1] / "engineering" / name).read_bytes()
        for name in ("substitutes.py", "drift.py", "motor.py")
    )
).hexdigest()[:16]
ADVICE_CACHE_SECONDS = 24 * 3600


def cached_advice(position, candidates):
    """`advise(position, candidates)` from Django's cache, keyed by a digest of everything it is computed from
    (the position and candidates as pickled, and the model's code), so a cached advice is never stale: each
    design's motor-model limits take some 80 ms to find, and the stand-in parts page judged every design on
    every load (650 ms at 100,000 motors with 8 designs)."""
    digest = hashlib.sha256(pickle.dumps((position, candidates), protocol=5)).hexdigest()
    key = f"advice:{ADVICE_CODE}:{digest}"
    advice = cache.get(key)
    if advice is None:
        advice = advise(position, candidates)
        cache.set(key, advice, ADVICE_CACHE_SECONDS)
    return advice


def part_families(user=None) -> list[dict]:
    """Fewer part numbers: per dielectric (with the role it serves, `ROLE_OF_DIELECTRIC`), each catalogue
    part with the number of motor designs of its own role (distinct circuit, load and design part among the
    capacitors in service in that role) it would suit as a single substitute, for how many more it would be
    marginal, and how many designs of its role there are: a run part is never counted against a start
    position, nor a start part against a run one.

    One advice call per design (a fleet's motors share designs by the dozen), never per motor; the
    designs read from the ledger kept on write (`designs_in_service`), never by joining the fleet.
    """
    designs = designs_in_service(user)
    frame = parts_frame()
    singles = candidates_of(frame)
    part_roles = frame["dielectric"].map(ROLE_OF_DIELECTRIC).to_numpy(object)
    suits = np.zeros(len(frame), int)
    marginal = np.zeros(len(frame), int)
    of_role = np.zeros(len(frame), int)
    fitted_capacitors = FittedCapacitor.objects.select_related("part", "motor").in_bulk(designs.values())
    for position in positions_of([fitted_capacitors[first_id] for first_id in designs.values()]):
        own_role = part_roles == position.role
        advice = cached_advice(position, singles)
        suits += (advice.verdict == SUITABLE) & own_role
        marginal += (advice.verdict == MARGINAL) & own_role
        of_role += own_role
    frame["designs_suited"] = suits
    frame["designs_marginal"] = marginal
    frame["designs"] = of_role
    return [
        {
            "dielectric": dielectric,
            "role": ROLE_OF_DIELECTRIC.get(dielectric, ""),
            # Most designs suited first; among equals by rating, as the stock page and the dashboard list parts
            # (by code, START-208U came before START-98U).
            "parts": rows.sort_values(
                ["designs_suited", "rated_uf", "code"], ascending=[False, True, True], kind="stable"
            ).to_dict("records"),
        }
        for dielectric, rows in frame.groupby("dielectric", sort=True)
    ]


AGAINST_ADVICE_SHOWN = 100


def stop_gaps_in_service(user=None, site=None):
    """The capacitors in service fitted against the advice at the user's sites (or at `site`): read from the
    partial index `in_service_against_advice`."""
    stop_gaps = scope_to_user(FittedCapacitor.objects.filter(removed_on__isnull=True, substitute_override=True), user)
    return stop_gaps.filter(motor__site=site) if site is not None else stop_gaps


def fitted_against_advice(user=None) -> dict:
    """The capacitors in service fitted against the substitute advice (a ticked override), newest first, at the
    user's sites: each with its design part (`design_parts`), the reason given and its open replacement order (the swap,
    `workorders.order_swap`; None where none is open), for the engineer and the planner to follow up
    (a stop-gap is judged on the motor model against the design, and a label names the design part). The first
    `AGAINST_ADVICE_SHOWN` and the count: a few queries, from a partial index, whatever the fleet's size."""
    in_service = stop_gaps_in_service(user)
    shown = list(in_service.select_related("part", "motor__site").order_by("-fitted_on", "-id")[:AGAINST_ADVICE_SHOWN])
    designs = design_parts(shown)
    swaps = {
        order.fitted_capacitor_id: order
        for order in WorkOrder.objects.filter(
            fitted_capacitor_id__in=[fitted.id for fitted in shown], state__in=WorkOrder.OPEN_STATES
        )
        .exclude(kind=WorkOrder.Kind.READ_AGAIN)
        .select_related("site")
    }
    count = len(shown) if len(shown) < AGAINST_ADVICE_SHOWN else in_service.count()
    return {"count": count, "rows": [(fitted, designs[fitted.id], swaps.get(fitted.id)) for fitted in shown]}
