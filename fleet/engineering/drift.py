"""How a drifting capacitance moves a motor's operating point, and where it fails.

For each motor: the figures as new and with the capacitance measured now, and the
fraction of rated capacitance at which each limit is crossed (starting torque
below what the load needs at break-away, capacitor voltage above its rating,
main-winding current above full-load current, or a stall). The replacement plan
takes the highest such fraction as the capacitor's end of life.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .motor import (
    LOAD_FAN,
    Load,
    MotorCircuit,
    operating_point,
    two_winding_running,
)

CAPACITOR_START = "capacitor_start"
PERMANENT_SPLIT = "permanent_split"
TWO_VALUE = "two_value"

ROLE_RUN = "run"
ROLE_START = "start"

LIMIT_NAMES = ("starting torque", "capacitor voltage", "main-winding current", "stall")


@dataclass(frozen=True)
class DriftLimits:
    """Settings for the operating-point limits (common practice, adjustable)."""

    breakaway_torque_ratio_fan: float = 0.3  # load break-away / rated load torque
    breakaway_torque_ratio_constant: float = 1.25
    capacitor_voltage_ratio: float = 1.0  # of the capacitor's rated voltage
    main_current_ratio: float = 1.15  # of nameplate full-load current (a common service factor)


@dataclass(frozen=True)
class OperatingFigures:
    """Figures of one operating state, an array entry a motor."""

    slip: np.ndarray
    speed_rpm: np.ndarray
    i_main_a: np.ndarray
    i_aux_a: np.ndarray
    i_line_a: np.ndarray
    v_capacitor_v: np.ndarray  # run capacitor while running; start capacitor at standstill
    phase_shift_deg: np.ndarray
    efficiency: np.ndarray
    winding_copper_loss_w: np.ndarray
    backward_ratio: np.ndarray
    starting_torque_nm: np.ndarray
    start_capacitor_voltage_v: np.ndarray

    def as_rows(self) -> list[dict]:
        """One plain dict per motor (for storage as JSON)."""
        names = list(self.__dataclass_fields__)
        columns = [np.atleast_1d(getattr(self, name)).astype(float) for name in names]
        return [
            {name: (None if np.isnan(v) else round(float(v), 6)) for name, v in zip(names, values, strict=True)}
            for values in zip(*columns, strict=True)
        ]


def has_run_capacitor(motor_kind) -> np.ndarray:
    return np.asarray(motor_kind) != CAPACITOR_START


def _running_and_locked(circuit: MotorCircuit, load: Load, run_uf, start_uf, motor_kind):
    """The running point (run capacitor in circuit where the motor type has one) and the
    standstill with every capacitor of the starting circuit in parallel."""
    runs = has_run_capacitor(motor_kind)
    run_uf = np.where(runs, np.asarray(run_uf, float), 0.0)
    start_total_uf = run_uf + np.nan_to_num(np.asarray(start_uf, float))
    point = operating_point(circuit, run_uf, load, aux_in_circuit=runs)
    locked = two_winding_running(circuit, start_total_uf, 1.0)
    return runs, point, locked


def _figures(runs, point, locked) -> OperatingFigures:
    stalled = np.isnan(point.slip)
    copper = point.copper_loss_main_w + point.copper_loss_aux_w
    rpm = point.speed_rad_s * 60.0 / (2.0 * np.pi)
    return OperatingFigures(
        slip=point.slip,
        speed_rpm=rpm,
        i_main_a=np.where(stalled, np.nan, np.abs(point.i_main)),
        i_aux_a=np.where(stalled, np.nan, np.abs(point.i_aux)),
        i_line_a=np.where(stalled, np.nan, np.abs(point.i_line)),
        v_capacitor_v=np.where(runs & ~stalled, np.abs(point.v_capacitor), np.nan),
        phase_shift_deg=point.phase_shift_deg,
        efficiency=point.efficiency,
        winding_copper_loss_w=np.where(stalled, np.nan, copper),
        backward_ratio=np.where(stalled, np.nan, point.backward_ratio),
        starting_torque_nm=locked.torque_nm,
        start_capacitor_voltage_v=np.abs(locked.v_capacitor),
    )


def operating_figures(circuit: MotorCircuit, load: Load, run_uf, start_uf, motor_kind) -> OperatingFigures:
    """Running point (run capacitor in circuit where the motor type has one) and
    standstill torque with every capacitor of the starting circuit in parallel."""
    return _figures(*_running_and_locked(circuit, load, run_uf, start_uf, motor_kind))


@dataclass(frozen=True)
class CapacitorPhasors:
    """Phasors where a capacitor works, complex amperes and volts with the supply at 0 deg:
    the running point for a run capacitor, standstill for a start capacitor (nan if stalled)."""

    supply_v: np.ndarray
    i_main: np.ndarray
    i_aux: np.ndarray
    i_line: np.ndarray
    v_capacitor: np.ndarray


@dataclass(frozen=True)
class CapacitorSweep:
    """A motor's figures as one of its capacitors takes each fraction of its rated value
    (the other capacitor at rated), shape (*motors, fractions)."""

    fraction: np.ndarray
    capacitance_uf: np.ndarray
    figures: OperatingFigures
    capacitor_voltage_v: np.ndarray  # of the swept capacitor, where it works
    phasors: CapacitorPhasors


def _column(values) -> np.ndarray:
    """A per-motor array as a column, to broadcast against a row of fractions."""
    return np.asarray(values)[..., np.newaxis]


def capacitor_sweep(
    circuit: MotorCircuit, load: Load, motor_kind, role, rated_run_uf, rated_start_uf, fractions
) -> CapacitorSweep:
    """Every motor at every fraction in one solve: `fractions` is a row (k,) shared by all
    motors or an array (motors, k) of their own; per-motor inputs have shape (motors,)."""
    per_motor = (circuit.r1m, role, motor_kind, rated_run_uf, rated_start_uf, load.torque_at_rated_nm)
    motors = np.broadcast_shapes(*(np.shape(x) for x in per_motor))

    def column(values):
        return _column(np.broadcast_to(np.asarray(values), motors))

    is_run = column(role) == ROLE_RUN
    fraction = np.broadcast_to(np.asarray(fractions, float), np.broadcast_shapes((*motors, 1), np.shape(fractions)))
    run_uf = np.where(is_run, fraction, 1.0) * column(np.asarray(rated_run_uf, float))
    start_uf = np.where(is_run, 1.0, fraction) * column(np.nan_to_num(np.asarray(rated_start_uf, float)))
    columns = MotorCircuit.from_arrays(
        **{name: column(getattr(circuit, name)) for name in circuit.__dataclass_fields__}
    )
    column_load = Load(column(load.torque_at_rated_nm), column(load.rated_speed_rad_s), column(load.kind))
    runs, point, locked = _running_and_locked(columns, column_load, run_uf, start_uf, column(motor_kind))
    figures = _figures(runs, point, locked)
    at_run = is_run & runs

    def where_it_works(running, standing):
        return np.where(at_run, running, standing)

    phasors = CapacitorPhasors(
        supply_v=np.broadcast_to(columns.voltage_v + 0j, fraction.shape),
        i_main=where_it_works(point.i_main, locked.i_main),
        i_aux=where_it_works(point.i_aux, locked.i_aux),
        i_line=where_it_works(point.i_line, locked.i_line),
        v_capacitor=where_it_works(point.v_capacitor, locked.v_capacitor),
    )
    return CapacitorSweep(
        fraction=fraction,
        capacitance_uf=np.where(is_run, run_uf, start_uf),
        figures=figures,
        capacitor_voltage_v=np.where(is_run, figures.v_capacitor_v, figures.start_capacitor_voltage_v),
        phasors=phasors,
    )


@dataclass(frozen=True)
class LimitLevels:
    """The level each operating-point limit sets, per capacitor (nan where it does not apply)."""

    starting_torque_nm: np.ndarray  # least: the load's break-away torque
    capacitor_voltage_v: np.ndarray  # most, where the capacitor works
    main_current_a: np.ndarray  # most, running; nan for a start capacitor


def limit_levels(
    load: Load, role, full_load_current_a, capacitor_rated_voltage_v, limits: DriftLimits | None = None
) -> LimitLevels:
    """The levels behind LIMIT_NAMES (the stall has none): one rule for the scan and the charts."""
    limits = limits or DriftLimits()
    breakaway_ratio = np.where(
        np.asarray(load.kind) == LOAD_FAN,
        limits.breakaway_torque_ratio_fan,
        limits.breakaway_torque_ratio_constant,
    )
    current = limits.main_current_ratio * np.asarray(full_load_current_a, float)
    return LimitLevels(
        starting_torque_nm=breakaway_ratio * load.torque_at_rated_nm,
        capacitor_voltage_v=limits.capacitor_voltage_ratio * np.asarray(capacitor_rated_voltage_v, float),
        main_current_a=np.where(np.asarray(role) == ROLE_RUN, current, np.nan),
    )


def overloaded_by_the_part(line_current_a, full_load_current_a, stop_gap, limits: DriftLimits | None = None):
    """Per motor: the capacitor was fitted against the substitute advice (`stop_gap`) and, with it, the motor
    running now draws more line current than `main_current_ratio` times its nameplate full-load current. A run
    capacitor far over the design value drives the auxiliary winding past its rating; every operating-point limit
    of a capacitance that falls lies below the rating, so none of them sees it. Only parts fitted against the
    advice are judged so: a design part at its rating draws the nameplate's current by construction of the
    circuit (`nameplate.py`). [trade] a running current over full-load current times the service factor is an
    overload (common practice of the trade, no single source; the factor is the main-current limit's own)."""
    limits = limits or DriftLimits()
    with np.errstate(invalid="ignore"):
        over = np.asarray(line_current_a, float) > limits.main_current_ratio * np.asarray(full_load_current_a, float)
    return over & np.asarray(stop_gap, bool)


def limit_breaches(figures: OperatingFigures, capacitor_voltage_v, levels: LimitLevels, role):
    """Boolean breach per limit, stacked in LIMIT_NAMES order; the arguments broadcast together."""
    is_run = np.asarray(role) == ROLE_RUN
    return np.stack(
        np.broadcast_arrays(
            figures.starting_torque_nm < levels.starting_torque_nm,
            np.nan_to_num(capacitor_voltage_v) > levels.capacitor_voltage_v,
            is_run & (np.nan_to_num(figures.i_main_a) > levels.main_current_a),
            is_run & np.isnan(figures.slip),
        )
    )


@dataclass(frozen=True)
class CapacitanceLimits:
    """Fraction of rated capacitance at which each limit is first crossed.

    `fractions` has shape (len(LIMIT_NAMES), n_motors); nan where the limit is not
    crossed down to the lowest fraction searched. `governing_fraction` is the
    highest of them (the one a falling capacitance meets first) and
    `governing_limit` its index into LIMIT_NAMES (-1 if none).
    """

    fractions: np.ndarray
    governing_fraction: np.ndarray
    governing_limit: np.ndarray


SCAN_POINTS_PER_SOLVE = 20_000


def capacitance_limits(
    circuit: MotorCircuit,
    load: Load,
    motor_kind,
    role,
    rated_run_uf,
    rated_start_uf,
    full_load_current_a,
    capacitor_rated_voltage_v,
    limits: DriftLimits | None = None,
    lowest_fraction=0.2,
    steps=17,
    tolerance=1e-6,
) -> CapacitanceLimits:
    """Scan the capacitor of `role` down from its rated value, whole fleet at once.

    The grid (5 % of rated with the defaults) finds the first fraction that breaches each
    limit; bisection on the same breach rule then narrows that step to `tolerance` of rated,
    so the crossing is where the curve drawn against capacitance meets the limit's level.
    Each solve takes many fractions of every motor at once (the whole grid, then one bisection
    step of every limit): a fleet has few designs, so the number of solves is what costs.
    """
    role = np.asarray(role)
    levels = limit_levels(load, role, full_load_current_a, capacitor_rated_voltage_v, limits)
    column_levels = LimitLevels(*(_column(getattr(levels, name)) for name in levels.__dataclass_fields__))
    fractions_grid = np.linspace(1.0, lowest_fraction, steps)
    per_motor = (circuit.r1m, role, motor_kind, rated_run_uf, rated_start_uf, load.torque_at_rated_nm)
    motors = np.broadcast_shapes(*(np.shape(x) for x in (*per_motor, *vars(levels).values())))
    # Columns per solve: memory stays about that of SCAN_POINTS_PER_SOLVE points at once.
    columns_per_solve = max(1, SCAN_POINTS_PER_SOLVE // max(int(np.prod(motors)), 1))

    def breached_at(fractions):
        """Breach per limit, motor and column of `fractions` (*motors, j): shape (limits, *motors, j).
        Each point is solved on its own (the solver is elementwise), so the blocks change no figure."""
        fractions = np.broadcast_to(np.asarray(fractions, float), (*motors, np.shape(fractions)[-1]))
        blocks = []
        for start in range(0, fractions.shape[-1], columns_per_solve):
            block = fractions[..., start : start + columns_per_solve]
            sweep = capacitor_sweep(circuit, load, motor_kind, role, rated_run_uf, rated_start_uf, block)
            blocks.append(limit_breaches(sweep.figures, sweep.capacitor_voltage_v, column_levels, _column(role)))
        return np.concatenate(blocks, axis=-1)

    breached = breached_at(fractions_grid)
    crossed = breached.any(axis=-1)
    first = np.argmax(breached, axis=-1)
    breaching = fractions_grid[first]
    passing = np.where(first == 0, breaching, fractions_grid[np.maximum(first - 1, 0)])
    narrowing = crossed & (first > 0)
    per_limit = (len(LIMIT_NAMES),) + (1,) * len(motors)
    limit_index = np.arange(len(LIMIT_NAMES))
    while True:
        # A limit is narrowed, all its crossing motors together, until each is within tolerance.
        open_limits = (narrowing & (passing - breaching > tolerance)).reshape(len(LIMIT_NAMES), -1).any(axis=1)
        if not open_limits.any():
            break
        stepping = narrowing & open_limits.reshape(per_limit)
        middle = np.where(stepping, 0.5 * (passing + breaching), 1.0)
        breaches = breached_at(np.moveaxis(middle, 0, -1))[limit_index, ..., limit_index]
        breaching = np.where(stepping & breaches, middle, breaching)
        passing = np.where(stepping & ~breaches, middle, passing)
    crossing = np.where(crossed, 0.5 * (passing + breaching), np.nan)
    with np.errstate(invalid="ignore"):
        governing = np.nanmax(np.where(np.isnan(crossing), -np.inf, crossing), axis=0)
    none = ~np.isfinite(governing)
    governing_index = np.where(none, -1, np.argmax(np.nan_to_num(crossing, nan=-1.0), axis=0))
    return CapacitanceLimits(
        fractions=crossing,
        governing_fraction=np.where(none, np.nan, governing),
        governing_limit=governing_index,
    )


CIRCUIT_ESTIMATED = "estimated"  # a motor's circuit estimated from its nameplate alone (Motor.circuit_source)

FINDING_AT_RATED = "breached at rated"
FINDING_NEAR_RATED = "near rated on a nameplate estimate"
FINDING_VOLTAGE_DISAGREES = "capacitor voltage disagrees with readings"


@dataclass(frozen=True)
class EstimateResolution:
    """How close to a limit's level a circuit estimated from the nameplate alone can place a
    figure with a new capacitor; nearer than this, the limit cannot be told from one already
    breached at rated capacitance (a finding for the engineer, never wear).

    A nameplate gives full-load current and output at rated speed: two numbers for seven
    circuit parameters, the rest from typical ratios (nameplate.py). The estimate cannot know
    a figure better than the motor itself is built to, so these are lower bounds."""

    # IEC 60034-1, tolerances on declared values: locked-rotor torque -15 % to +25 % of the
    # guaranteed torque (as tabled in the Industrial Power Engineering and Applications Handbook,
    # Table 11.9): a motor built to the design may start with 15 % less.
    starting_torque: float = 0.15
    # Ours: the estimated capacitor voltage counts as agreeing with a measured one within 15 %
    # (measured_voltage_disagreement), so it resolves no finer than that.
    capacitor_voltage: float = 0.15
    # None: the main-current limit's level is already 1.15 x the nameplate's full-load current,
    # the datum the estimate reproduces, and no published tolerance says more (ours).
    main_current: float = 0.0
    measured_voltage_disagreement: float = 0.15  # estimated vs measured capacitor voltage, relative (ours)
    at_rated_fraction: float = 0.999  # a crossing this close to rated is breached at rated (the scan's step)


@dataclass(frozen=True)
class LimitFindings:
    """Per operating-point limit (LIMIT_NAMES order) and capacitor: whether it may govern the
    risk, the finding that set it aside ("" if none) and the note shown to the engineer."""

    used: np.ndarray
    finding: np.ndarray
    note: np.ndarray


def _numbers(values, fmt: str) -> np.ndarray:
    return np.array([fmt.format(v) for v in np.ravel(np.asarray(values, float))], dtype=object).reshape(
        np.shape(values)
    )


def judge_limits(
    fractions,
    figures_at_rated: OperatingFigures,
    levels: LimitLevels,
    role,
    nameplate_only,
    estimated_voltage_v,
    measured_voltage_v,
    resolution: EstimateResolution | None = None,
    stop_gap=None,
) -> LimitFindings:
    """Which operating-point limits may govern a capacitor's risk, and why not the others.

    fractions (len(LIMIT_NAMES), n): each limit's crossing as a fraction of rated capacitance
    (nan: not crossed). figures_at_rated: the motor with its capacitors at rated; levels: the
    limits' levels (`limit_levels`). nameplate_only: the circuit was estimated from the
    nameplate alone. estimated_voltage_v / measured_voltage_v: the capacitor voltage the circuit
    gives now and the one the readings measured (nan: none measured).

    Set aside, with a note: a limit breached already at rated capacitance; every limit of a
    circuit whose capacitor voltage disagrees with the measured one; and, for a nameplate-only
    circuit, a limit whose figure with a new capacitor sits within the estimate's resolution of
    its level (starting torque, capacitor voltage, main current): such a limit may lie anywhere
    from rated down, so a capacitor well inside its tolerance could be judged near failing the
    motor. A limit of an entered circuit, or of one refined from measured winding currents,
    keeps governing wherever it lies. The tolerance limit then governs, as it always may.

    stop_gap (n bools, none given: none): the capacitor was fitted against the substitute advice. A limit it
    breaches at its own rated capacitance is no finding about the motor's design but about the part fitted: the
    limit keeps governing (already crossed: replace it, with the design part), with a note saying so.
    """
    resolution = resolution or EstimateResolution()
    fractions = np.asarray(fractions, float)
    n = fractions.shape[1]
    is_run = np.asarray(role) == ROLE_RUN
    crossed = np.isfinite(fractions)
    breached_at_rated = np.nan_to_num(fractions, nan=0.0) >= resolution.at_rated_fraction
    by_the_part = breached_at_rated & (np.zeros(n, bool) if stop_gap is None else np.asarray(stop_gap, bool))
    at_rated = breached_at_rated & ~by_the_part
    estimated_v = np.asarray(estimated_voltage_v, float)
    measured_v = np.asarray(measured_voltage_v, float)
    with np.errstate(invalid="ignore", divide="ignore"):
        disagree = np.isfinite(measured_v) & (
            np.abs(estimated_v / measured_v - 1.0) > resolution.measured_voltage_disagreement
        )
    voltage_new = np.where(is_run, figures_at_rated.v_capacitor_v, figures_at_rated.start_capacitor_voltage_v)
    torque_ratio = figures_at_rated.starting_torque_nm / levels.starting_torque_nm
    voltage_ratio = voltage_new / levels.capacitor_voltage_v
    current_ratio = figures_at_rated.i_main_a / levels.main_current_a
    with np.errstate(invalid="ignore"):
        near = np.stack(
            np.broadcast_arrays(
                torque_ratio * (1.0 - resolution.starting_torque) < 1.0,
                voltage_ratio * (1.0 + resolution.capacitor_voltage) > 1.0,
                is_run & (current_ratio * (1.0 + resolution.main_current) > 1.0),
                np.zeros(n, bool),  # the stall has no level: only "breached at rated" applies
            )
        )
    near = near & crossed & ~breached_at_rated & np.asarray(nameplate_only, bool)
    finding = np.select(
        [at_rated, crossed & disagree, near],
        [FINDING_AT_RATED, FINDING_VOLTAGE_DISAGREES, FINDING_NEAR_RATED],
        default="",
    ).astype(object)
    # Notes are written only where a finding is (few capacitors): text is formatted value by value.
    note = np.full(fractions.shape, "", dtype=object)
    note[finding == FINDING_AT_RATED] = (
        "already breached at rated capacitance: a design or data finding, not wear; limit not used"
    )
    note[by_the_part & (finding == "")] = (
        "already breached at the rated capacitance of this part, fitted against the advice: the part, not the"
        " motor's design; replace it with the design part"
    )
    limit, capacitor = np.nonzero(finding == FINDING_VOLTAGE_DISAGREES)
    note[limit, capacitor] = (
        "estimated capacitor voltage "
        + _numbers(np.broadcast_to(estimated_v, (n,))[capacitor], "{:.0f}")
        + " V, measured "
        + _numbers(np.broadcast_to(measured_v, (n,))[capacitor], "{:.0f}")
        + " V: the motor's estimated circuit disagrees with the readings; limit not used"
    )
    limit, capacitor = np.nonzero(finding == FINDING_NEAR_RATED)
    ratio = np.stack(
        np.broadcast_arrays(torque_ratio, 100.0 * voltage_ratio, 100.0 * current_ratio, np.full(n, np.nan))
    )[limit, capacitor]
    figure_words = np.select(
        [limit == 0, limit == 1, limit == 2],
        [
            "starting torque " + _numbers(ratio, "{:.2f}") + " times the load's break-away torque",
            "capacitor voltage " + _numbers(ratio, "{:.0f}") + " % of its rating",
            "main-winding current " + _numbers(ratio, "{:.0f}") + " % of its limit",
        ],
        default="",
    )
    margin = np.array([resolution.starting_torque, resolution.capacitor_voltage, resolution.main_current, np.nan])
    note[limit, capacitor] = (
        "at "
        + _numbers(100.0 * fractions[limit, capacitor], "{:.0f}")
        + " % of rated, from a circuit estimated from the nameplate alone: a new capacitor gives "
        + figure_words
        + ", within the "
        + _numbers(100.0 * margin[limit], "{:.0f}")
        + " % such an estimate cannot resolve; a design or data finding, not wear: confirm with measured"
        " winding currents; the tolerance limit governs meanwhile"
    )
    return LimitFindings(used=crossed & (finding == ""), finding=finding, note=note)
