"""What can be fitted instead: candidate parts judged against one motor's model.

For the capacitor of one role in one motor and N candidate parts (singles, and
parallel or series pairs formed by `with_pairs`), one call computes the operating
figures with each candidate fitted beside those with the design's own value, and a
verdict (suitable, marginal, unsuitable) with its reasons in words. Every
threshold is a setting of `SubstituteRules` with its source beside it. Where the
motor has no equivalent circuit, candidates are judged by their ratings alone.
"""

from __future__ import annotations

from dataclasses import dataclass, fields

import numpy as np

from .drift import (
    LIMIT_NAMES,
    ROLE_RUN,
    ROLE_START,
    DriftLimits,
    EstimateResolution,
    OperatingFigures,
    capacitance_limits,
    limit_breaches,
    limit_levels,
)
from .drift import operating_figures as _operating_figures
from .motor import Load, MotorCircuit
from .trends import DIELECTRIC_ELECTROLYTIC, DIELECTRIC_FILM

SUITABLE, MARGINAL, UNSUITABLE = "suitable", "marginal", "unsuitable"
VERDICTS = np.array([SUITABLE, MARGINAL, UNSUITABLE])
SINGLE, PARALLEL, SERIES = "single", "parallel", "series"
CLASS_ORDER = {"A": 0, "B": 1, "C": 2, "D": 3}  # IEC 60252-1 classes of operation, longest life first
# The one role each dielectric serves: film for run (continuous duty), electrolytic for start (short duty),
# never the other way (common practice of the trade, no single source; the duty rule of `advise`).
ROLE_OF_DIELECTRIC = {DIELECTRIC_FILM: ROLE_RUN, DIELECTRIC_ELECTROLYTIC: ROLE_START}

CAUTION_PARALLEL = (
    "Two capacitors in parallel: each must carry the full voltage rating; mount and wire them as one, "
    "both discharged before handling; if one fails the motor runs on the other's value alone."
)
CAUTION_SERIES = (
    "Two equal capacitors in series: half the capacitance at twice the voltage rating, only with two of the "
    "same part; mount and wire them as one, discharge both and the joint between them before handling."
)


@dataclass(frozen=True)
class SubstituteRules:
    """Thresholds of the advice, each with its source."""

    # Rated voltage at least this times the predicted capacitor voltage, else marginal (below the predicted
    # voltage itself: unsuitable). Common practice of the trade, no single source.
    voltage_margin: float = 1.10
    # Run capacitor within this fraction of the design value (either way).
    # Common practice of the trade, no single source (often quoted as +/-5 to 10 %).
    run_band: float = 0.10
    # Start capacitor from this fraction below to `start_band_above` above the design value.
    # Common practice of the trade, no single source ("same value or up to 20 % more").
    start_band_below: float = 0.0
    start_band_above: float = 0.20
    # Marginal when the value sits within this fraction above the lowest capacitance where the motor's
    # limits hold (a new part there reaches the forecast's limit early). From memory, unverified.
    edge_margin: float = 0.10
    # Pairs offered at most (nearest the design value first). A plain setting of ours.
    max_pairs: int = 12


@dataclass(frozen=True)
class Position:
    """The capacitor being replaced: its motor (circuit and load, or None) and its design part."""

    role: str
    motor_kind: str
    frequency_hz: float
    full_load_current_a: float
    design_uf: float
    design_voltage_v: float
    design_dielectric: str
    design_class: str
    design_tolerance_minus_pct: float
    design_tolerance_plus_pct: float
    companion_uf: float = 0.0  # the other role's rated uF (two-value motors), 0 if none
    circuit: MotorCircuit | None = None
    load: Load | None = None
    nameplate_only: bool = False  # the circuit was estimated from the nameplate alone


@dataclass(frozen=True)
class Candidates:
    """Candidate parts (or pairs of parts), an array entry each."""

    code: np.ndarray
    rated_uf: np.ndarray
    rated_voltage_v: np.ndarray
    dielectric: np.ndarray
    frequency_hz: np.ndarray
    class_of_operation: np.ndarray
    tolerance_minus_pct: np.ndarray
    tolerance_plus_pct: np.ndarray
    arrangement: np.ndarray | None = None  # SINGLE, PARALLEL or SERIES
    first: np.ndarray | None = None  # index of each member in the singles they were built from
    second: np.ndarray | None = None

    @classmethod
    def from_arrays(cls, **values) -> Candidates:
        arrays = {name: np.asarray(value) for name, value in values.items()}
        n = len(arrays["code"])
        arrays.setdefault("arrangement", np.full(n, SINGLE, dtype=object))
        arrays.setdefault("first", np.arange(n))
        arrays.setdefault("second", np.full(n, -1))
        return cls(**arrays)

    def __len__(self) -> int:
        return len(self.code)


@dataclass(frozen=True)
class Advice:
    """The verdicts, reasons, cautions and figures, in the order of the candidates."""

    candidates: Candidates
    verdict: np.ndarray
    reasons: list[list[str]]
    concerns: list[list[str]]  # the reasons of the rules that made a candidate marginal or unsuitable
    cautions: list[str]
    figures: OperatingFigures | None  # with each candidate fitted; None without a circuit
    design_figures: OperatingFigures | None  # with the design's own value
    predicted_voltage_v: np.ndarray  # capacitor voltage with each candidate fitted (nan without a circuit)
    lowest_uf: float  # lowest capacitance at which the motor's limits hold (nan without a circuit)


def _band(position: Position, rules: SubstituteRules) -> tuple[float, float]:
    """Capacitance band of the trade around the design value (with a circuit) or the marked tolerance."""
    if position.circuit is None:
        return (
            position.design_uf * (1 - position.design_tolerance_minus_pct / 100),
            position.design_uf * (1 + position.design_tolerance_plus_pct / 100),
        )
    if position.role == ROLE_RUN:
        return position.design_uf * (1 - rules.run_band), position.design_uf * (1 + rules.run_band)
    return position.design_uf * (1 - rules.start_band_below), position.design_uf * (1 + rules.start_band_above)


def with_pairs(singles: Candidates, position: Position, rules: SubstituteRules | None = None) -> Candidates:
    """The singles, then parallel pairs of the same dielectric whose sum falls in the design's band, then
    series pairs of two equal parts whose half falls in it where one alone lacks the voltage rating."""
    rules = rules or SubstituteRules()
    low, high = _band(position, rules)
    uf = singles.rated_uf.astype(float)
    i, j = np.triu_indices(len(singles))
    total = uf[i] + uf[j]
    keep = (singles.dielectric[i] == singles.dielectric[j]) & (total >= low) & (total <= high)
    i, j = i[keep], j[keep]
    order = np.argsort(np.abs(uf[i] + uf[j] - position.design_uf), kind="stable")[: rules.max_pairs]
    i, j = i[order], j[order]
    needed_v = max(position.design_voltage_v, 0.0)
    series = np.flatnonzero(
        (uf / 2 >= low)
        & (uf / 2 <= high)
        & (singles.rated_voltage_v < needed_v)
        & (2 * singles.rated_voltage_v >= needed_v)
    )

    def combined(a, b, kind, join):
        same = kind == SERIES
        worst_class = np.where(
            [
                CLASS_ORDER.get(x, 9) >= CLASS_ORDER.get(y, 9)
                for x, y in zip(singles.class_of_operation[a], singles.class_of_operation[b], strict=True)
            ],
            singles.class_of_operation[a],
            singles.class_of_operation[b],
        )
        return dict(
            code=np.array(
                [f"{x}{join}{y}" for x, y in zip(singles.code[a], singles.code[b], strict=True)], dtype=object
            ),
            rated_uf=uf[a] / 2 if same else uf[a] + uf[b],
            rated_voltage_v=2 * singles.rated_voltage_v[a]
            if same
            else np.minimum(singles.rated_voltage_v[a], singles.rated_voltage_v[b]),
            dielectric=singles.dielectric[a],
            frequency_hz=np.minimum(singles.frequency_hz[a], singles.frequency_hz[b]),
            class_of_operation=worst_class.astype(object),
            tolerance_minus_pct=np.maximum(singles.tolerance_minus_pct[a], singles.tolerance_minus_pct[b]),
            tolerance_plus_pct=np.maximum(singles.tolerance_plus_pct[a], singles.tolerance_plus_pct[b]),
            arrangement=np.full(len(a), kind, dtype=object),
            first=a,
            second=b,
        )

    parts = [
        {name: getattr(singles, name) for name in (f.name for f in fields(Candidates))},
        combined(i, j, PARALLEL, " + "),
        combined(series, series, SERIES, " in series with "),
    ]
    return Candidates(**{name: np.concatenate([p[name] for p in parts]) for name in parts[0]})


def _figures_for(position: Position, capacitance_uf) -> OperatingFigures:
    """Operating figures with `capacitance_uf` fitted in the position's role, an entry per value."""
    capacitance_uf = np.asarray(capacitance_uf, float)
    other = np.full_like(capacitance_uf, position.companion_uf)
    run_uf, start_uf = (capacitance_uf, other) if position.role == ROLE_RUN else (other, capacitance_uf)
    return _operating_figures(position.circuit, position.load, run_uf, start_uf, position.motor_kind)


def _capacitor_voltage(position: Position, figures: OperatingFigures) -> np.ndarray:
    return figures.v_capacitor_v if position.role == ROLE_RUN else figures.start_capacitor_voltage_v


def shown_volts(voltage_v) -> np.ndarray:
    """Whole volts as the replacement page shows a figure: stored to 0.1 V, then rounded half up (so a reason
    never says 421 V beside a figure of 422 V, both from 421.46 V)."""
    return np.floor(np.round(np.asarray(voltage_v, float), 1) + 0.5)


def _levels_and_reasons(levels: list[np.ndarray], reasons: list[list[str | None]]):
    """Worst level per candidate, every reason given for it and those that count against it (in rule order)."""
    stacked = np.stack(levels)
    per_candidate = [[text for text in texts if text] for texts in zip(*reasons, strict=True)]
    concerns = [
        [text for text, level in zip(texts, column, strict=True) if text and level > 0]
        for texts, column in zip(zip(*reasons, strict=True), stacked.T, strict=True)
    ]
    return VERDICTS[stacked.max(axis=0)], per_candidate, concerns


def advise(
    position: Position,
    candidates: Candidates,
    rules: SubstituteRules | None = None,
    limits: DriftLimits | None = None,
) -> Advice:
    """Judge every candidate for the position in one call (see the module docstring)."""
    rules = rules or SubstituteRules()
    limits = limits or DriftLimits()
    resolution = EstimateResolution()
    n = len(candidates)
    uf = candidates.rated_uf.astype(float)
    volts = candidates.rated_voltage_v.astype(float)
    levels: list[np.ndarray] = []
    reasons: list[list[str | None]] = []

    def rule(level: np.ndarray, texts):
        levels.append(np.asarray(level, int))
        reasons.append(list(texts))

    # Dielectric and duty: film for run, electrolytic for start, never the other way.
    same = candidates.dielectric == position.design_dielectric
    duty = "run (continuous duty)" if position.role == ROLE_RUN else "start (short duty)"
    rule(
        np.where(same, 0, 2),
        [
            None if ok else f"{d} is not the {position.design_dielectric} a {duty} position needs"
            for ok, d in zip(same, candidates.dielectric, strict=True)
        ],
    )
    # Frequency rating.
    freq = candidates.frequency_hz.astype(float)
    rule(
        np.where(freq == position.frequency_hz, 0, np.where(freq > position.frequency_hz, 1, 2)),
        [
            None
            if f == position.frequency_hz
            else f"rated for {f:g} Hz, the motor runs at {position.frequency_hz:g} Hz"
            for f in freq
        ],
    )
    # Class of operation no worse than the original.
    rank = np.array([CLASS_ORDER.get(c or "", 9) for c in candidates.class_of_operation])
    design_rank = CLASS_ORDER.get(position.design_class or "", 9)
    unmarked = (rank == 9) & (design_rank != 9)
    worse = (rank > design_rank) & ~unmarked
    rule(
        np.where(worse, 2, np.where(unmarked, 1, 0)),
        [
            f"class of operation {c} is worse than the original's {position.design_class}"
            if w
            else ("class of operation not marked" if u else None)
            for c, w, u in zip(candidates.class_of_operation, worse, unmarked, strict=True)
        ],
    )
    # Capacitance band: the trade's band around the design value, or the marked tolerance without a circuit.
    low, high = _band(position, rules)
    outside = (uf < low * (1 - 1e-9)) | (uf > high * (1 + 1e-9))
    if position.circuit is None:
        band_words = "the design's marked tolerance"
    elif position.role == ROLE_RUN:
        band_words = f"the run band (the design value {position.design_uf:g} µF ± {rules.run_band:.0%})"
    else:
        band_words = (
            f"the start band (the design value {position.design_uf:g} µF to {rules.start_band_above:.0%} above, "
            "as start capacitors are replaced)"
        )
    rule(
        np.where(outside, 2, 0),
        [
            f"{u:g} µF is outside {band_words}, {low:.3g}-{high:.3g} µF" if o else None
            for u, o in zip(uf, outside, strict=True)
        ],
    )
    # Never a lower voltage rating than the part it replaces.
    lower = volts < position.design_voltage_v
    rule(
        np.where(lower, 2, 0),
        [
            f"rated {v:g} V, lower than the {position.design_voltage_v:g} V part it replaces" if lw else None
            for v, lw in zip(volts, lower, strict=True)
        ],
    )

    figures = design_figures = None
    predicted = np.full(n, np.nan)
    lowest_uf = np.nan
    if position.circuit is None:
        rule(np.zeros(n), ["judged by ratings alone: the motor has no equivalent circuit"] * n)
    else:
        figures = _figures_for(position, uf)
        design_figures = _figures_for(position, np.array([position.design_uf]))
        predicted = _capacitor_voltage(position, figures)
        # Rated voltage at least the predicted capacitor voltage (the forecast's own limit, DriftLimits), and
        # marginal without the margin above it.
        below = volts < limits.capacitor_voltage_ratio * predicted
        tight = ~below & (volts < rules.voltage_margin * predicted)
        # A circuit estimated from the nameplate alone resolves the capacitor voltage no finer than
        # EstimateResolution (the forecast sets such a limit aside the same way, drift.judge_limits):
        # a rating that short of its estimate is marginal (confirm with a measured voltage), not unsuitable.
        unresolved = below & position.nameplate_only & (volts * (1 + resolution.capacitor_voltage) >= predicted)
        # Above such an estimate, a margin finer than it resolves cannot fault a rating the motor's maker chose:
        # at least the design part's rating, it is as designed (the stand-in parts page showed every run part,
        # the design's own included, as marginal on a 450 V part over a 414-421 V estimate).
        as_designed = tight & position.nameplate_only & (volts >= position.design_voltage_v)
        rule(
            np.where(below & ~unresolved, 2, np.where((tight & ~as_designed) | unresolved, 1, 0)),
            [
                f"rated {v:g} V is under the {p:.0f} V a nameplate-only estimate puts across it, within what such "
                "an estimate can resolve: a design finding; confirm with a measured capacitor voltage"
                if u
                else f"rated {v:g} V is below the predicted capacitor voltage {p:.0f} V"
                if b
                else f"rated {v:g} V, as the design part or more: as designed (a nameplate-only estimate puts "
                f"{p:.0f} V across it, too rough to ask for the {rules.voltage_margin - 1:.0%} margin above that)"
                if d
                else f"rated {v:g} V is within the {rules.voltage_margin - 1:.0%} margin above the predicted {p:.0f} V"
                if t
                else f"rated {v:g} V covers the predicted {p:.0f} V with margin"
                for v, p, b, t, u, d in zip(
                    volts, shown_volts(predicted), below, tight, unresolved, as_designed, strict=True
                )
            ],
        )
        # The motor's limits (the forecast's DriftLimits) with the candidate fitted, at its value and at the
        # low end of its own tolerance; the capacitor-voltage limit is the voltage rule above.
        role = np.full(n, position.role)
        low_end = uf * (1 - candidates.tolerance_minus_pct.astype(float) / 100)
        motor_levels = limit_levels(position.load, role, position.full_load_current_a, np.full(n, np.inf), limits)
        breach_at = [
            limit_breaches(f, _capacitor_voltage(position, f), motor_levels, role)
            for f in (figures, _figures_for(position, low_end))
        ]
        names = np.array(LIMIT_NAMES)
        nominal, at_low_end = breach_at
        rule(
            np.where(nominal.any(axis=0), 2, np.where(at_low_end.any(axis=0), 1, 0)),
            [
                "breaks the motor's limit: " + ", ".join(names[b])
                if b.any()
                else ("at the low end of its tolerance it breaks: " + ", ".join(names[e]) if e.any() else None)
                for b, e in zip(nominal.T, at_low_end.T, strict=True)
            ],
        )
        # Near the lowest capacitance where the forecast's limits hold.
        window = capacitance_limits(
            position.circuit,
            position.load,
            position.motor_kind,
            position.role,
            position.design_uf if position.role == ROLE_RUN else position.companion_uf,
            position.design_uf if position.role != ROLE_RUN else position.companion_uf,
            position.full_load_current_a,
            np.inf,
            limits,
        )
        fraction = float(np.nan_to_num(np.ravel(window.governing_fraction)[0], nan=0.0))
        lowest_uf = fraction * position.design_uf
        near = (uf >= lowest_uf) & (uf < lowest_uf * (1 + rules.edge_margin))
        rule(
            np.where(near, 1, 0),
            [
                f"{u:g} µF is within {rules.edge_margin:.0%} of the lowest value where the motor's limits hold "
                f"({lowest_uf:.3g} µF)"
                if e
                else None
                for u, e in zip(uf, near, strict=True)
            ],
        )

    verdict, per_candidate, concerns = _levels_and_reasons(levels, reasons)
    arrangement = candidates.arrangement if candidates.arrangement is not None else np.full(n, SINGLE)
    cautions = [CAUTION_PARALLEL if a == PARALLEL else CAUTION_SERIES if a == SERIES else "" for a in arrangement]
    return Advice(
        candidates=candidates,
        verdict=verdict,
        reasons=per_candidate,
        concerns=concerns,
        cautions=cautions,
        figures=figures,
        design_figures=design_figures,
        predicted_voltage_v=predicted,
        lowest_uf=lowest_uf,
    )
