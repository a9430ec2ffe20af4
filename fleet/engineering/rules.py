"""The rulebook of a reading: every check a reading passes before it is stored.

One home for the rules the reading form, the JSON API and the file import apply,
vectorised so a 50,000-row import is checked in one call: arrays in, one array of
messages per field out ("" where the value passes). Thresholds are settings
(`ReadingRules`), each with its source; the page's live hint gets them as JSON.

Order of the checks, per field, first failure wins: parse (decimal comma, finite
numbers), short circuit, unit slip, range; then the checks that only ask for a
confirmation (a voltage far above the motor's, a value far off the trend).
"""

from __future__ import annotations

import functools
import re
import zoneinfo
from dataclasses import asdict, dataclass, field, fields
from decimal import Decimal
from types import MappingProxyType

import numpy as np
import pandas as pd

from .capacitor import capacitance_from_current, dissipation_factor_from_esr, short_circuit_suspected
from .trends import DIELECTRIC_ELECTROLYTIC, DIELECTRIC_FILM

TWO_PI = 2.0 * np.pi

METHOD_METER, METHOD_IN_CIRCUIT = "meter", "in_circuit"
METHODS = (METHOD_METER, METHOD_IN_CIRCUIT)
CONDITION_SOUND = "sound"
CONDITIONS = (CONDITION_SOUND, "bulged", "leaking", "vented")
UNITS = {"uf": "µF", "a": "A", "v": "V", "c": "°C", "ohm": "Ω"}

# One decimal separator, point or comma, ASCII digits, an optional exponent.
NUMBER_TEXT = re.compile(r"[+-]?(?:[0-9]+(?:[.,][0-9]*)?|[.,][0-9]+)(?:[eE][+-]?[0-9]+)?")
# Two separators in one number ("1.234,5", "1,234.5"): a thousands separator, refused rather than guessed.
TWO_SEPARATORS = r"[0-9][.,][0-9]*[.,]"
NOT_FINITE_WORDS = {"nan", "inf", "infinity", "+inf", "-inf", "+infinity", "-infinity", "+nan", "-nan"}

MSG_NOT_A_NUMBER = "not a number"
MSG_NOT_FINITE = "not a finite number"
MSG_SEPARATORS = "use one decimal separator (3.8 or 3,8) and no thousands separators"
MSG_WITH_UNIT = "type the number alone, in the unit the field names (no unit after it)"
MSG_LETTER_FOR_DIGIT = "a letter O or l where a 0 or 1 belongs? type digits only"
# A number with letters or a symbol after it: "28500 nF", "3.9uF", "230 V", "45 °C".
NUMBER_WITH_UNIT = r"[+-]?[0-9][0-9.,]*\s*[^\s0-9.,+-][^0-9]*"
# A number with a letter O (or o) for a zero, or l (or I) for a one, beside its digits ("3O", "1O5", "l2.5"): what a
# gloved thumb types on a phone's letter keys. Read as digits, it would be a number; it is refused, saying so. At
# least one digit: a meter's "OL" (over range) typed as "ol" is no number, not a slip.
LETTERS_FOR_DIGITS = r"[+-]?[0-9oOlI.,]*(?:[0-9][0-9.,]*[oOlI]|[oOlI][0-9oOlI.,]*[0-9])[0-9oOlI.,]*"
LETTERS_AS_DIGITS = str.maketrans("oOlI", "0011")


@dataclass(frozen=True)
class Range:
    """Plausible values of one measured field; `above` refuses the lowest itself."""

    lowest: float
    highest: float
    above: bool
    source: str


def _ranges():
    trade = "common practice of the trade, no single source"
    memory = "from memory, unverified"
    return MappingProxyType(
        {
            # Motor capacitors run from about 1 uF (small fans) to about 1500 uF (large start capacitors); 0 is
            # a meter that shows no capacitance, an open capacitor (recorded once confirmed: `OPEN_CAPACITOR_WORDS`).
            "capacitance_uf": Range(0.0, 5000.0, False, trade),
            # Small single-phase motors draw well under 100 A even while starting.
            "capacitor_current_a": Range(0.0, 100.0, False, memory),
            # Above this no capacitor of a motor of 1000 V or less can be (the register's own limit).
            "capacitor_voltage_v": Range(0.0, 5000.0, True, memory),
            "line_voltage_v": Range(0.0, 1500.0, True, memory),
            "main_current_a": Range(0.0, 200.0, False, memory),
            "aux_current_a": Range(0.0, 200.0, False, memory),
            "line_current_a": Range(0.0, 200.0, False, memory),
            # The range of the usual contact thermometers and thermal cameras; same as the database check.
            "case_temperature_c": Range(-40.0, 150.0, False, trade),
            "ambient_temperature_c": Range(-50.0, 70.0, False, memory),
            # A failed electrolytic can read tens of ohms; a meter reading above this is a slip or an open lead.
            "esr_ohm": Range(0.0, 1000.0, False, memory),
        }
    )


@dataclass(frozen=True)
class ReadingRules:
    """Thresholds of the rulebook. Sources beside each; [mem] ones are settings to revise."""

    ranges: MappingProxyType = field(default_factory=_ranges)
    # A capacitor (or line) voltage above this multiple of the motor's rated voltage is most likely a
    # missed decimal point or the meter across the wrong terminals: ask to confirm. A run capacitor sees about
    # V sqrt(1 + a^2) running, a the auxiliary-to-main turns ratio, up to about 1.5: up to 1.8 times the supply
    # (from memory, unverified; the demo's 230 V motors put 414-421 V across theirs).
    voltage_confirm_factor: float = 2.0
    # A line voltage under this share of the motor's rated one while it was read is a slip (1,200 typed as
    # thousands, read as 1.2 V by the decimal comma) or a supply that was off: ask to confirm (ours; a supply
    # sags by a few percent, not by half: common practice of the trade, no single source).
    line_voltage_low_share: float = 0.5
    # The same share of the motor's voltage across the capacitor: a capacitor sees at least about the supply running
    # (`UNDER_VOLTAGE_WORDS`), so less is a slip or the motor stopped, and the stress clock, which runs on this
    # voltage, would slow many times (an audit: 41.2 V typed for 412 moved a crossing 44 days later; ours).
    # An ESR at or above the capacitor's reactance (a dissipation factor of 1): no working capacitor shows it; most
    # often milliohms typed as ohms (an audit: 850 for 0.85 Ω, 2,502 %, made the capacitor "replace now"; ours).
    esr_confirm_dissipation_factor: float = 1.0
    # A capacitor fitted this recently, read without a trend more than `above_tolerance_fraction` of its rating
    # below its part's tolerance (IEC 60252-1's classes run to -10 % for a run part and -0 % for a start part's
    # marked range), or where the part's tolerance is not given below this share of its rating (under the widest
    # class): the wrong part fitted, or misread (ours; a walk fitted a 30 µF part and read 15 µF, saved without a
    # question; an audit read a new one at 77.5 % of its rating, "replace now" at once, unasked).
    new_capacitor_days: int = 90
    new_capacitor_low_share: float = 0.75
    # Capacitor current under 5 % of the supply voltage while current flows: short circuit (trade).
    short_circuit_fraction: float = 0.05
    # Off the fitted trend by more than this fraction of the rating: confirm or re-measure (trade).
    off_trend_fraction: float = 0.08
    # A case this far above the highest case temperature marked on the part (its IEC 60252-1 category) is
    # a capacitor overheating, or a thermometer set to °F (100 °F, 38 °C, typed as 100 °C): confirm. Unconfirmed,
    # it would age the capacitor 2^(62/10), about 70 times, over the stress clock's interval (ours).
    case_over_rating_k: float = 10.0
    # A capacitor does not gain capacitance as it ages (common practice of the trade, no single source): a value
    # above the top of its tolerance by more than this fraction of the rating is another capacitor on the meter's
    # leads, or in circuit a voltage read across the line instead of the capacitor: confirm (ours). Taken as read,
    # a first reading far above the rating sets the trend's starting level.
    above_tolerance_fraction: float = 0.08
    # A capacitance this many times the rating was typed in nanofarads (refused: no capacitor reads that); more
    # than `wrong_capacitor_ratio` times it is not this capacitor (common practice of the trade, no single source).
    nanofarad_ratio: tuple = (300.0, 3000.0)
    wrong_capacitor_ratio: float = 3.0
    # A capacitance that lands within this band of the rating once multiplied by 1e6 was typed in farads, by 1e3
    # in millifarads (the meter showed the rating in another unit): confirm, as an open capacitor reads near
    # 0 µF too and must stay recordable (0.02 µF on a 30 µF part is open, 0.00003 is 30 µF in farads). The
    # band is a capacitor still in use, its tolerance and some ageing (common practice of the trade, no single
    # source; the band's edges are ours).
    low_unit_slip_band: tuple = (0.75, 1.25)
    # A value under half a nanofarad (a handheld meter's finest capacitance step is 1 nF, 0.001 µF) is a meter
    # showing no capacitance, as 0 is: an open capacitor, confirmed as 0 is (common practice of the trade, no
    # single source; 1e-320 typed was stored unconfirmed and shown as "0.00 µF", a fuzz test found).
    no_capacitance_below_uf: float = 0.0005
    low_unit_slips: tuple = ((1e6, "farads"), (1e3, "millifarads"))
    # A tenth of the rating, within the same band, is the decimal point typed one place to the left (14.3 for a
    # 143 µF part): confirm (ours; a capacitor that has lost 90 % is failed, and confirmed it is kept as read).
    decimal_slip_factor: float = 10.0
    # A capacitor voltage under the short-circuit fraction of the supply that, read as kilovolts, gives with the
    # current a capacitance within `1 / wrong_capacitor_ratio` to `wrong_capacitor_ratio` times the rating was
    # typed in kV (as the nanofarad slip's band; ours).
    kilovolt_factor: float = 1000.0
    # Clocks of phones drift: a reading up to this far in the future is accepted (ours).
    future_tolerance_s: float = 600.0
    # A note is a line or two from the field; a page of text is a paste gone wrong (ours).
    notes_max_chars: int = 2000

    def as_dict(self) -> dict:
        """Plain numbers for the page's live hint (json_script)."""
        out = {f.name: getattr(self, f.name) for f in fields(self) if f.name != "ranges"}
        out["ranges"] = {
            name: asdict(r) | dict(zip(("too_low", "too_high"), range_words(name, r), strict=True))
            for name, r in self.ranges.items()
        }
        out["short_circuit_words"] = SHORT_CIRCUIT_WORDS
        out["open_capacitor_words"] = OPEN_CAPACITOR_WORDS
        # The syntax of a number and why a text is none, as `parse_numbers` says it (patterns match whole texts).
        out["numbers"] = {
            "number": NUMBER_TEXT.pattern,
            "two_separators": TWO_SEPARATORS,
            "with_unit": NUMBER_WITH_UNIT,
            "not_finite_words": sorted(NOT_FINITE_WORDS),
            "not_a_number_words": MSG_NOT_A_NUMBER,
            "not_finite_number_words": MSG_NOT_FINITE,
            "separators_words": MSG_SEPARATORS,
            "with_unit_words": MSG_WITH_UNIT,
            "letters_for_digits": LETTERS_FOR_DIGITS,
            "letter_for_digit_words": MSG_LETTER_FOR_DIGIT,
        }
        out["voltage_confirm_words"] = VOLTAGE_CONFIRM_WORDS
        out["nanofarad_words"] = NANOFARAD_WORDS
        return out


RULES = ReadingRules()

# Every case in which the rulebook asks to confirm a value rather than refuse it, in words: each `confirm.add` of
# `_check_readings` names its case (tests/engineering/test_rules.py holds the two lists together), and the
# readings import's `confirmed` column lists them all in its help.
CONFIRMATION_CASES = MappingProxyType(
    {
        "off_trend": f"a capacitance more than {RULES.off_trend_fraction * 100:g} % of the rating off the "
        "capacitor's trend",
        "above_tolerance": "a capacitance above the part's tolerance",
        "voltage_high": f"a capacitor or line voltage over {RULES.voltage_confirm_factor:g} times the motor's",
        "line_voltage_low": f"a line voltage under {RULES.line_voltage_low_share * 100:g} % of the motor's",
        "capacitor_voltage_low": f"a capacitor voltage under {RULES.line_voltage_low_share * 100:g} % of the motor's",
        "esr_high": "an ESR at or above the capacitor's own reactance (a dissipation factor of "
        f"{RULES.esr_confirm_dissipation_factor * 100:g} % or more), as milliohms typed as ohms give",
        "new_capacitor_low": f"a capacitor fitted within {RULES.new_capacitor_days} days read more than "
        f"{RULES.above_tolerance_fraction * 100:g} % of its rating below its tolerance",
        "case_hot": f"a case more than {RULES.case_over_rating_k:g} K above the part's highest temperature",
        "unit_slip": "a capacitance that is the rating typed in farads or millifarads, or a tenth of it",
        "open_capacitor": "0 µF by the meter: an open capacitor, to replace now",
    }
)

SHORT_CIRCUIT_WORDS = (
    "current flows with almost no voltage across the capacitor: short circuit suspected. Isolate, lock out, "
    "discharge, check the capacitor with a meter, and record a replacement if it is shorted"
)


# A meter showing no capacitance on an isolated capacitor: an open capacitor (a broken lead or a disconnector
# tripped inside it), judged "open circuit suspected" (under a tenth of the rating, `capacitor.tolerance_verdict`)
# and planned for replacement now; or the leads not on the terminals (common practice of the trade, no single
# source). Asked once, as the slips are, then kept as read.
OPEN_CAPACITOR_WORDS = (
    "0 µF: the meter shows no capacitance. It will be recorded as an open capacitor, to replace now. Check the "
    "meter's leads are on the capacitor's terminals and re-measure, or confirm the value if the meter shows 0 "
    "(or under 1 nF)"
)


# A capacitance typed in nanofarads (refused: no capacitor reads 300 times its rating), with the next step; the live
# hint fills in the same words (each value as `plain_number`).
NANOFARAD_WORDS = (
    "{c} looks like nanofarads: {uf} µF? (rated {r} µF). Type it in µF: {uf} (the meter's nF range shows a thousand "
    "times the µF)"
)
# A voltage far above the motor's: "{v} V is more than {k} times the motor's {s} V" (the live hint fills in the same).
VOLTAGE_CONFIRM_WORDS = (
    "{v:g} V is more than {k:g} times the motor's {s:g} V: a missed decimal point? A run capacitor running sees up "
    "to about 1.8 times the supply, so also check the meter's range and the terminals it was across. Re-measure, or "
    "confirm the value if it is right"
)


TYPED_DIGITS = 9  # a value with this many significant digits or fewer is written back as typed (ours)


def plain_number(value) -> str:
    """A number as the site writes a typed value back: as typed where its shortest form has up to nine significant
    digits (99999999, not 100000000: a walk was told of a value it had not typed), else six significant digits
    (29958.6, not the 29958.577523180298 a current and a voltage give); no exponent (0.00003, not 3e-05) from 1e-12
    to 1e21, outside which the browser's own numbers take one (1e+300, not its 301 digits; 1e-320, not its 320).
    The live hint's `plain` does the same; an integer too large for a float (an API's 401 digits) is written the
    same way, not raised on."""
    try:
        value = float(value)
    except OverflowError:
        return f"{Decimal(value):.6g}"
    if not np.isfinite(value):
        return str(value)
    if abs(value) >= 1e21 or 0 < abs(value) < 1e-12:  # 1e-320, not its 320 digits
        return f"{value:.6g}"
    shortest = np.format_float_positional(value, unique=True, trim="-")
    if len(shortest.lstrip("-").replace(".", "").lstrip("0")) <= TYPED_DIGITS:
        return shortest
    return np.format_float_positional(value, precision=6, unique=False, fractional=False, trim="-")


def microfarad_text(value) -> str:
    """A capacitance as the pages write it: two decimals ("3.95"), but a value too small for them as typed
    ("0.00003", a slip confirmed as read, not "0.00"), so what was stored can be seen."""
    value = float(value)
    return f"{value:.2f}" if value == 0 or not np.isfinite(value) or abs(value) >= 0.005 else plain_number(value)


def decimals_to_tell_apart(value, limit, fewest: int = 2, most: int = 4) -> np.ndarray:
    """Decimals to write each value and its limit with (`fewest` to `most`): where two decimals show them equal
    but they differ ("189.07 against a 189.07 limit", judged below), one more at a time until they do not. Compared
    as written, so the rounding is the text's own."""
    value, limit = np.broadcast_arrays(np.asarray(value, float), np.asarray(limit, float))
    places = np.full(value.shape, fewest)
    with np.errstate(invalid="ignore"):
        # Only values within a unit of the last decimal can be written alike: the rest of a fleet is not formatted.
        differ = np.isfinite(value) & np.isfinite(limit) & (value != limit) & (np.abs(value - limit) < 10.0**-fewest)
    for k in range(fewest, most):
        asked = np.flatnonzero(differ & (places == k))
        same = np.array([f"{value.flat[i]:.{k}f}" == f"{limit.flat[i]:.{k}f}" for i in asked], bool)
        if same.any():
            places.flat[asked[same]] = k + 1
    return places


def fixed_decimals(values, places) -> np.ndarray:
    """Each value written with its own number of decimals (`decimals_to_tell_apart`), as text."""
    values = np.asarray(values, float)
    places = np.broadcast_to(np.asarray(places, int), values.shape)
    return np.array([f"{v:.{k}f}" for v, k in zip(values.ravel(), places.ravel(), strict=True)], dtype=object).reshape(
        values.shape
    )


def reading_time_text(local) -> str:
    """When a reading was taken (a datetime in the site's time), as the pages write it: to the minute
    ("2026-11-02 09:15"), as the form's time box shows it, whatever seconds the reading was stored with (the form
    keeps the second it offered, the API and the imports what they are sent)."""
    return f"{local:%Y-%m-%d %H:%M}"


GENERAL_FORMAT = re.compile(r"\{(\w+):g\}")


def _messages(condition, template, plain=(), **columns):
    """A message where `condition` holds, formatted with that row's values ("{d}" of a datetime64[D] is its ISO
    date; the columns named in `plain` as `plain_number`, "{c}"); "" elsewhere. Only those rows are formatted:
    a column costs nothing where every row passes."""
    condition = np.atleast_1d(np.asarray(condition, bool))
    out = np.full(condition.shape, "", dtype=object)
    rows = np.flatnonzero(condition)
    if len(rows):
        # "{t:g}" writes a number as `plain_number` does too: 1e+20 typed as 100000000000000000000 is said so.
        general = set(GENERAL_FORMAT.findall(template))
        template = GENERAL_FORMAT.sub(r"{\1}", template)
        plain = (*plain, *general)
        arrays = {k: np.atleast_1d(v) for k, v in columns.items()}
        picked = {k: v[rows] if v.size > 1 else np.repeat(v[:1], len(rows)) for k, v in arrays.items()}
        for name in plain:
            picked[name] = np.array([plain_number(v) for v in picked[name]], dtype=object)
        out[rows] = [template.format(**{k: v[j] for k, v in picked.items()}) for j in range(len(rows))]
    return out


# Nameplate bounds for the single-phase capacitor motors this tool tracks (fractional horsepower up to the
# largest single-phase capacitor motors made, about 10 kW; common practice of the trade, no single source).
NAMEPLATE_MAX_OUTPUT_W = 15_000.0
NAMEPLATE_MAX_CURRENT_A = 150.0
# The least efficient small capacitor motors put out about a tenth of the volt-amperes they draw; an output
# under 2 % of them is a slip of unit, kW typed as W (common practice of the trade, no single source).
NAMEPLATE_MIN_OUTPUT_FRACTION_OF_VA = 0.02


def fitting_problems(role, dielectric, part_rated_voltage_v, motor_voltage_v) -> tuple[np.ndarray, np.ndarray]:
    """Per fitting (arrays): (an electrolytic in a run position, a part rated below the motor's supply).

    An aluminium electrolytic is rated for the seconds of a start, not for continuous AC duty; a capacitor
    sees at least the supply voltage (a run capacitor well above it, a start capacitor over it during a
    start): common practice of the trade, no single source. A film start capacitor is unusual, not wrong.
    The register import and the admin's fitted capacitor apply this one rule."""
    electrolytic_run = (np.asarray(role, object) == "run") & (np.asarray(dielectric, object) == "electrolytic")
    with np.errstate(invalid="ignore"):
        under_voltage = np.asarray(part_rated_voltage_v, float) < np.asarray(motor_voltage_v, float)
    return electrolytic_run, under_voltage


ELECTROLYTIC_RUN_WORDS = "is an electrolytic (start) capacitor: a run position needs film (continuous duty)"
UNDER_VOLTAGE_WORDS = "supply: a capacitor sees at least the supply voltage"


class ReadsOtherFields(str):
    """A field's name, for a check whose words rest on other fields of the row too (the output against the volts
    and amps, the speed against the frequency and poles): an import names it once the row's other faults are put
    right (it would otherwise call an output too high for a voltage typed as 0); a form shows it as any other."""


def nameplate_problems(rated_voltage_v, full_load_current_a, output_w) -> list[tuple[np.ndarray, str, str]]:
    """(rows, field, message) for nameplate figures no capacitor motor has, vectorised over a register:
    output and full-load current above zero and within the bounds above, and an output below the
    volt-amperes drawn at full load (efficiency times power factor is under one [derived]) but not far below."""
    volts, amps, watts = (np.atleast_1d(np.asarray(v, float)) for v in (rated_voltage_v, full_load_current_a, output_w))
    with np.errstate(invalid="ignore"):
        return [
            (~(watts > 0), "output_w", "must be above zero"),
            (
                watts > NAMEPLATE_MAX_OUTPUT_W,
                "output_w",
                f"over {NAMEPLATE_MAX_OUTPUT_W:,.0f} W: not a capacitor motor",
            ),
            (~(amps > 0), "full_load_current_a", "must be above zero"),
            (
                amps > NAMEPLATE_MAX_CURRENT_A,
                "full_load_current_a",
                f"over {NAMEPLATE_MAX_CURRENT_A:.0f} A: check the unit",
            ),
            (
                (watts > 0) & (amps > 0) & (watts >= volts * amps),
                ReadsOtherFields("output_w"),
                "at or above rated voltage times full-load current: a motor puts out less than it draws",
            ),
            (
                (watts > 0) & (amps > 0) & (watts < NAMEPLATE_MIN_OUTPUT_FRACTION_OF_VA * volts * amps),
                ReadsOtherFields("output_w"),
                f"under {NAMEPLATE_MIN_OUTPUT_FRACTION_OF_VA * 100:g} % of rated voltage times full-load current: "
                "give the output in W, not kW",
            ),
        ]


# Ratings the database holds too (the motor's check constraints): rated voltage above 0 up to 1000 V, the
# supply frequencies of the grid, an even number of poles (a winding has pole pairs) [derived].
MOTOR_MAX_RATED_VOLTAGE_V = 1000.0
# The lowest supply a capacitor motor is built for: 24 V a.c. control circuits (small damper and fan motors); the
# mains ones run on 100 V and more. Under it a rating is a slip (3.8 for 380), for motors and parts alike (from
# memory, unverified).
LOWEST_RATED_VOLTAGE_V = 24.0
MOTOR_FREQUENCIES_HZ = (50, 60)
MOTOR_POLES = (2, 4, 6, 8, 10, 12)
# A small induction motor runs a few per cent below synchronous speed at full load, high-slip fan motors up
# to about a quarter below; under half of synchronous speed is a typing slip, not a motor (common practice
# of the trade, no single source).
MOTOR_MIN_SPEED_FRACTION_OF_SYNCHRONOUS = 0.5
# Equivalent circuit: every resistance and reactance above zero; the nameplate estimator searches a thousandth
# to a hundred times the base impedance (volts / amps), which stays under a megaohm for any motor here [derived].
MOTOR_MAX_CIRCUIT_OHM = 1e6
CIRCUIT_OHM_FIELDS = ("r1m_ohm", "x1m_ohm", "r1a_ohm", "x1a_ohm", "r2_ohm", "x2_ohm", "xm_ohm")
# Auxiliary-to-main effective turns ratio: about 1 to 2 in capacitor motors; the estimator searches 0.3 to 4
# (common practice of the trade, no single source). Rotational loss is a few per cent of output [trade]:
# zero or more, and never above the largest output of a capacitor motor (NAMEPLATE_MAX_OUTPUT_W).
MOTOR_TURNS_RATIO = (0.2, 5.0)
# A site's reading route: places 0 to 99999 (the route page's rule, ours).
ROUTE_ORDER_MAX = 99999


def motor_problems(
    rated_voltage_v,
    frequency_hz,
    poles,
    rated_speed_rpm,
    full_load_current_a,
    output_w,
    circuit: dict | None = None,
    route_order=np.nan,
) -> list[tuple[np.ndarray, str, str]]:
    """(rows, field, message) for a motor no plant has, vectorised over a register: the database's check
    constraints, the nameplate bounds, the speed's floor, the equivalent circuit (optional figures pass where
    missing, nan) and the route order. One rule for the register import and the admin."""
    volts, hertz, poles, rpm, order = (
        np.atleast_1d(np.asarray(v, float))
        for v in (rated_voltage_v, frequency_hz, poles, rated_speed_rpm, route_order)
    )
    circuit = {name: np.atleast_1d(np.asarray(v, float)) for name, v in (circuit or {}).items()}
    low_ratio, high_ratio = MOTOR_TURNS_RATIO
    with np.errstate(invalid="ignore", divide="ignore"):
        synchronous = 120.0 * hertz / np.where(np.isin(poles, MOTOR_POLES), poles, np.nan)
        problems = [
            (
                ~((volts >= LOWEST_RATED_VOLTAGE_V) & (volts <= MOTOR_MAX_RATED_VOLTAGE_V)),
                "rated_voltage_v",
                f"must be from {LOWEST_RATED_VOLTAGE_V:g} to {MOTOR_MAX_RATED_VOLTAGE_V:,.0f} V: "
                "check the decimal point",
            ),
            (~np.isin(hertz, MOTOR_FREQUENCIES_HZ), "frequency_hz", "must be 50 or 60"),
            (~np.isin(poles, MOTOR_POLES), "poles", "must be 2, 4, 6, 8, 10 or 12"),
            (~(rpm > 0), "rated_speed_rpm", "must be above zero"),
            (
                rpm >= synchronous,
                ReadsOtherFields("rated_speed_rpm"),
                "at or above synchronous speed (120 × frequency / poles)",
            ),
            (
                (rpm > 0) & (rpm < MOTOR_MIN_SPEED_FRACTION_OF_SYNCHRONOUS * synchronous),
                ReadsOtherFields("rated_speed_rpm"),
                _messages(
                    (rpm > 0) & (rpm < MOTOR_MIN_SPEED_FRACTION_OF_SYNCHRONOUS * synchronous),
                    "under half of synchronous speed ({sync:g} rpm): a capacitor motor runs a few per cent below it",
                    sync=synchronous,
                ),
            ),
            *nameplate_problems(volts, full_load_current_a, output_w),
            *(
                (
                    ~np.isnan(circuit[name]) & ~((circuit[name] > 0) & (circuit[name] <= MOTOR_MAX_CIRCUIT_OHM)),
                    name,
                    f"must be above 0 and at most {MOTOR_MAX_CIRCUIT_OHM:,.0f} Ω",
                )
                for name in CIRCUIT_OHM_FIELDS
                if name in circuit
            ),
        ]
        if "turns_ratio" in circuit:
            ratio = circuit["turns_ratio"]
            problems.append(
                (
                    ~np.isnan(ratio) & ~((ratio >= low_ratio) & (ratio <= high_ratio)),
                    "turns_ratio",
                    f"must be from {low_ratio:g} to {high_ratio:g} (auxiliary to main turns, about 1 to 2)",
                )
            )
        if "rotational_loss_w" in circuit:
            loss = circuit["rotational_loss_w"]
            problems.append(
                (
                    ~np.isnan(loss) & ~((loss >= 0) & (loss <= NAMEPLATE_MAX_OUTPUT_W)),
                    "rotational_loss_w",
                    f"must be from 0 to {NAMEPLATE_MAX_OUTPUT_W:,.0f} W",
                )
            )
        problems.append(
            (
                ~np.isnan(order) & ~((order >= 0) & (order <= ROUTE_ORDER_MAX) & (order == np.round(order))),
                "route_order",
                f"must be a whole number from 0 to {ROUTE_ORDER_MAX}",
            )
        )
    return problems


def commissioning_problems(commissioned_on, today) -> list[tuple[np.ndarray, str, str]]:
    """(rows, field, message) for a commissioning date no motor has: ahead of `today` or before 1950 (NaT: not
    given). One rule for the register import and the admin."""
    day = np.atleast_1d(np.asarray(commissioned_on, "datetime64[D]"))
    today = np.datetime64(today, "D")
    return [
        (day > today, "commissioned_on", "in the future"),
        (day < EARLIEST_SERVICE_DAY, "commissioned_on", "before 1950: check the date"),
    ]


# Catalogue bounds of a motor capacitor part (IEC 60252-1 covers motor capacitors of rated voltages up to
# 660 V; the register's 1000 V motor limit is kept so a part never refuses a motor it is fitted to; from
# memory, unverified). Largest start capacitors are about 1500 uF, and 5000 uF is the reading rulebook's
# own capacitance limit (common practice of the trade, no single source).
PART_MAX_RATED_UF = 5000.0
# The smallest motor capacitors are run capacitors of about 1 uF on small fans; under 0.1 uF is a slip of the
# unit (nF or pF typed as uF) (common practice of the trade, no single source).
PART_MIN_RATED_UF = 0.1
# Ratings motor capacitors are made in, by dielectric and so by role: motor-start aluminium electrolytics from
# roughly 20 uF to about 1,500 uF, motor-run metallised film from roughly 0.5 uF (small fans) to about 100 uF
# (large compressors), with room either side (common practice of the trade, no single source). A rating
# outside its dielectric's span is a slip of the unit or the decimal point (0.25 typed for a 250 uF start
# capacitor) far more often than a part.
PART_RATED_UF_BY_DIELECTRIC = MappingProxyType(
    {
        DIELECTRIC_ELECTROLYTIC: (20.0, 1500.0, "motor-start electrolytics"),
        DIELECTRIC_FILM: (0.4, 150.0, "motor-run film capacitors"),
    }
)
# The slips a rating outside its span is read as, in the order tried: the unit (farads, millifarads or nanofarads
# typed as microfarads: a datasheet's 4.0E-06 F), then the decimal point one place off (ours).
RATING_SLIPS = (
    (1e6, "farads typed as µF"),
    (1000.0, "millifarads typed as µF"),
    (0.001, "nanofarads typed as µF"),
    (10.0, "the decimal point one place off"),
    (0.1, "the decimal point one place off"),
)
PART_MAX_RATED_VOLTAGE_V = 1000.0
# Tolerances in IEC 60252-1 markings run from +/-5 % for run capacitors to -0/+30 % for start ones; old
# electrolytics are marked -20/+80 %. A minus tolerance past 50 % puts the end-of-life limit so low no
# forecast reaches it (from memory, unverified).
PART_MAX_TOLERANCE_MINUS_PCT = 50.0
PART_MAX_TOLERANCE_PLUS_PCT = 100.0
PART_FREQUENCIES_HZ = (50, 60)
# Upper category temperatures marked on motor capacitors: 70, 85 or 100 C; lower: -40 or -25 C (IEC 60252-1
# categories, from memory, unverified). The plausible span of a marking, with room either side.
PART_CASE_TEMPERATURE_C = (0.0, 150.0)
# Film and electrolytic coefficients are a few hundred ppm/K (common practice of the trade, no single source).
PART_MAX_TEMPCO_PPM_PER_K = 5000.0
PART_MAX_UNIT_COST = 100_000.0  # a motor capacitor costs tens, a slip of the decimal point millions (ours)
PART_UNIT_COST_DECIMALS = 2  # a price to the cent, as the register keeps it (its field's decimal places)


def part_problems(
    rated_uf,
    tolerance_minus_pct,
    tolerance_plus_pct,
    rated_voltage_v,
    frequency_hz,
    max_case_temperature_c=np.nan,
    max_dissipation_factor=np.nan,
    unit_cost=np.nan,
    tempco_ppm_per_k=np.nan,
    dielectric=None,
) -> list[tuple[np.ndarray, str, str]]:
    """(rows, field, message) for catalogue figures no motor capacitor has, vectorised over a parts file;
    the optional figures pass where missing (nan), the rating is held to its dielectric's span where the
    dielectric is known (`rating_problems`). One rule for the parts import and the register's form (admin)."""
    rated, minus, plus, volts, hertz, case, factor, cost, tempco = (
        np.atleast_1d(np.asarray(v, float))
        for v in (
            rated_uf,
            tolerance_minus_pct,
            tolerance_plus_pct,
            rated_voltage_v,
            frequency_hz,
            max_case_temperature_c,
            max_dissipation_factor,
            unit_cost,
            tempco_ppm_per_k,
        )
    )
    low_case, high_case = PART_CASE_TEMPERATURE_C
    with np.errstate(invalid="ignore"):
        return [
            rating_problems(rated, dielectric),
            (
                ~((minus >= 0) & (minus <= PART_MAX_TOLERANCE_MINUS_PCT)),
                "tolerance_minus_pct",
                f"must be from 0 to {PART_MAX_TOLERANCE_MINUS_PCT:g} % (5 for a run capacitor marked ±5 %)",
            ),
            (
                ~((plus >= 0) & (plus <= PART_MAX_TOLERANCE_PLUS_PCT)),
                "tolerance_plus_pct",
                f"must be from 0 to {PART_MAX_TOLERANCE_PLUS_PCT:g} %",
            ),
            (
                ~((volts >= LOWEST_RATED_VOLTAGE_V) & (volts <= PART_MAX_RATED_VOLTAGE_V)),
                "rated_voltage_v",
                f"must be from {LOWEST_RATED_VOLTAGE_V:g} to {PART_MAX_RATED_VOLTAGE_V:,.0f} V: "
                "check the decimal point",
            ),
            (~np.isin(hertz, PART_FREQUENCIES_HZ), "frequency_hz", "must be 50 or 60"),
            (
                (case < low_case) | (case > high_case),
                "max_case_temperature_c",
                f"must be from {low_case:g} to {high_case:g} °C",
            ),
            ((factor <= 0) | (factor >= 1), "max_dissipation_factor", "must be a fraction above 0 and below 1"),
            (
                (cost < 0) | (cost > PART_MAX_UNIT_COST),
                "unit_cost",
                f"must be from 0 to {PART_MAX_UNIT_COST:,.0f}: check the decimal point",
            ),
            (
                too_fine := np.isfinite(cost) & (np.round(cost, PART_UNIT_COST_DECIMALS) != cost),
                "unit_cost",
                _messages(too_fine, "two decimals at most: {v:g} has more", v=cost),
            ),
            (
                np.abs(tempco) > PART_MAX_TEMPCO_PPM_PER_K,
                "tempco_ppm_per_k",
                f"must be from -{PART_MAX_TEMPCO_PPM_PER_K:,.0f} to {PART_MAX_TEMPCO_PPM_PER_K:,.0f} ppm/K",
            ),
        ]


def rating_problems(rated_uf, dielectric=None) -> tuple[np.ndarray, str, np.ndarray]:
    """(rows, "rated_uf", messages) for ratings no motor capacitor of its dielectric is made in
    (`PART_RATED_UF_BY_DIELECTRIC`), each naming the span and the likely slip ("0.25 µF ...: 250 µF?") where
    one lands in it; a dielectric not known (nan rating, or none given) is held to the catalogue's bounds."""
    rated = np.atleast_1d(np.asarray(rated_uf, float))
    kind = np.broadcast_to(np.asarray("" if dielectric is None else dielectric, object), rated.shape)
    low = np.full(rated.shape, PART_MIN_RATED_UF)
    high = np.full(rated.shape, PART_MAX_RATED_UF)
    made = np.full(rated.shape, "", dtype=object)
    for name, (lowest, highest, words) in PART_RATED_UF_BY_DIELECTRIC.items():
        rows = kind == name
        low[rows], high[rows], made[rows] = lowest, highest, words
    with np.errstate(invalid="ignore", over="ignore"):
        outside = ~((rated >= low) & (rated <= high))
        likely = np.full(rated.shape, np.nan)
        slip = np.full(rated.shape, "", dtype=object)
        for factor, words in RATING_SLIPS:
            fits = np.isnan(likely) & (rated * factor >= low) & (rated * factor <= high)
            likely[fits], slip[fits] = rated[fits] * factor, words
    general = f"must be at least {PART_MIN_RATED_UF:g} and at most {PART_MAX_RATED_UF:,.0f} µF: check the unit"
    span = "{v:g} µF is not a rating {made} are made in (about {low:,g} to {high:,g} µF)"
    messages = np.where(
        made == "",
        general,
        np.where(
            np.isnan(likely),
            _messages(outside, span + ": check the unit and the decimal point", v=rated, made=made, low=low, high=high),
            _messages(
                outside, span + ": {uf:.4g} µF? ({slip})", v=rated, made=made, low=low, high=high, uf=likely, slip=slip
            ),
        ),
    )
    return outside, "rated_uf", np.where(outside, messages, "")


def first_problem_by_field(problems: list[tuple[np.ndarray, str, str]]) -> dict[str, str]:
    """For one record (row 0): the first problem of each field as a sentence, for a model's clean()."""
    errors: dict[str, str] = {}
    for rows, field_name, message in problems:
        if rows[0] and field_name not in errors:
            text = message if isinstance(message, str) else str(np.atleast_1d(message)[0])
            errors[field_name] = text[0].upper() + text[1:] + "."
    return errors


# The days any date or time sent or typed may name (filters, reading times): wide of every record (nothing is
# recorded before 1950 nor planned past the 30-year horizon), and well inside what Python's dates and pandas'
# timestamps hold (to 2262-04-11), so a day after the last or a column of such days never overflows (ours).
FIRST_ACCEPTED_DAY, LAST_ACCEPTED_DAY = np.datetime64("1900-01-01", "D"), np.datetime64("2199-12-31", "D")
ACCEPTED_DAYS_WORDS = f"from {FIRST_ACCEPTED_DAY} to {LAST_ACCEPTED_DAY}"

# A capacitor fitted before 1950 predates the motors and records this tool keeps (ours); a date ahead of
# today is a slip of the year.
EARLIEST_SERVICE_DAY = np.datetime64("1950-01-01", "D")


def service_date_problems(fitted_on, removed_on, today) -> list[tuple[np.ndarray, str, str]]:
    """(rows, field, message) for a capacitor's service dates no record has: ahead of `today`, before
    1950, removed before fitted (NaT: not given). One rule for the history import and the register's form."""
    fitted, removed = (np.atleast_1d(np.asarray(v, "datetime64[D]")) for v in (fitted_on, removed_on))
    today = np.datetime64(today, "D")
    problems = []
    for name, day in (("fitted_on", fitted), ("removed_on", removed)):
        problems.append((day > today, name, "in the future"))
        problems.append((day < EARLIEST_SERVICE_DAY, name, "before 1950: check the date"))
    problems.append((removed < fitted, "removed_on", "before fitted_on"))
    return problems


# Names the tz database's files answer to that are not a place's zone: the server's own ("localtime"), a
# template ("posixrules"), a zone of no place ("Factory"), and the leap-second ("right/", about 27 s off civil
# time) and duplicate ("posix/") trees.
NOT_A_SITES_ZONE = re.compile(r"^(localtime|posixrules|Factory|right/.*|posix/.*)$")


def known_time_zone(name) -> bool:
    """A time zone name the tz database knows for a place (Europe/Madrid, UTC): one rule for the sites import and
    form; the server's own zone and the leap-second tree are refused (`NOT_A_SITES_ZONE`)."""
    if not isinstance(name, str) or NOT_A_SITES_ZONE.match(name):
        return False
    try:
        zoneinfo.ZoneInfo(name)
    except (zoneinfo.ZoneInfoNotFoundError, ValueError, TypeError):
        return False
    return True


@functools.lru_cache(maxsize=1)
def _zone_names_by_folded_case() -> dict[str, str]:
    return {name.casefold(): name for name in zoneinfo.available_timezones() if not NOT_A_SITES_ZONE.match(name)}


def site_time_zone(name) -> str | None:
    """The tz database's own spelling of a site's time zone name typed in any case ("europe/madrid" is
    Europe/Madrid: no two of its names differ by case alone), or None for a name it does not know
    (`known_time_zone`'s rule). One rule for the sites import and the site's form."""
    if not isinstance(name, str):
        return None
    name = name.strip()
    if known_time_zone(name):
        return name
    return _zone_names_by_folded_case().get(name.casefold())


def capacitance_unit_slip(capacitance_uf, rated_uf, rules: ReadingRules = RULES):
    """Refused: a value 300-3000 times the rating was typed in nanofarads; more than three times the rating is
    not this capacitor (`ReadingRules`; the reading form's live hint applies the same ratios). A value far below
    the rating may be an open capacitor: `capacitance_low_unit_slip` asks to confirm instead."""
    c = np.atleast_1d(np.asarray(capacitance_uf, float))
    rated = np.atleast_1d(np.asarray(rated_uf, float))
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = c / rated
    nano = (ratio > rules.nanofarad_ratio[0]) & (ratio < rules.nanofarad_ratio[1])
    wild = ~nano & (ratio > rules.wrong_capacitor_ratio)
    return np.where(
        nano,
        _messages(nano, NANOFARAD_WORDS, plain=("c", "uf", "r"), c=c, uf=c / 1e3, r=rated),
        _messages(
            wild,
            "{c} µF is over three times the rated {r} µF: wrong capacitor or unit?",
            plain=("c", "r"),
            c=c,
            r=rated,
        ),
    )


def capacitance_low_unit_slip(capacitance_uf, rated_uf, rules: ReadingRules = RULES):
    """To confirm: a value that is the rating typed in farads or millifarads (times 1e6 or 1e3 it lands within
    `low_unit_slip_band` of the rating): "0.00003 looks like farads: 30 µF?", or with its decimal point one
    place to the left (times 10): "14.3 µF is about a tenth of the rated 143 µF". A value near 0 that lands
    nowhere near the rating (an open capacitor, 0.02 µF on a 30 µF part) is not named."""
    c = np.atleast_1d(np.asarray(capacitance_uf, float))
    rated = np.atleast_1d(np.asarray(rated_uf, float))
    low, high = rules.low_unit_slip_band
    out = np.full(np.broadcast(c, rated).shape, "", dtype=object)
    with np.errstate(invalid="ignore", divide="ignore"):
        for factor, unit in rules.low_unit_slips:
            ratio = c * factor / rated
            slip = (out == "") & (c > 0) & (ratio >= low) & (ratio <= high)
            out = np.where(
                slip,
                _messages(
                    slip,
                    "{c} looks like " + unit + ": {uf} µF? (rated {r} µF). Type it in µF, or confirm the value if "
                    "the meter shows {c} µF (an open capacitor reads near 0 µF)",
                    plain=("c", "uf", "r"),
                    c=c,
                    uf=c * factor,
                    r=rated,
                ),
                out,
            )
        ratio = c * rules.decimal_slip_factor / rated
        slip = (out == "") & (c > 0) & (ratio >= low) & (ratio <= high)
        out = np.where(
            slip,
            _messages(
                slip,
                "{c} µF is about a tenth of the rated {r} µF: the decimal point one place off ({uf} µF)? Correct "
                "it, or confirm the value if the meter shows {c} µF (it is then far below its limit: replace it)",
                plain=("c", "uf", "r"),
                c=c,
                uf=c * rules.decimal_slip_factor,
                r=rated,
            ),
            out,
        )
    return out


def current_unit_slip(current_a, voltage_v, rated_uf, frequency_hz):
    """A capacitor current 300-3000 times what the rating draws was typed in mA."""
    i = np.atleast_1d(np.asarray(current_a, float))
    expected = (
        TWO_PI * np.asarray(frequency_hz, float) * np.asarray(rated_uf, float) * 1e-6 * np.asarray(voltage_v, float)
    )
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = i / np.atleast_1d(expected)
    milli = (ratio > 300) & (ratio < 3000)
    return _messages(
        milli,
        "{i} looks like milliamperes: {a} A? (expected about {e:.2f} A)",
        plain=("i", "a"),
        i=i,
        a=i / 1000,
        e=expected,
    )


def voltage_unit_slip(current_a, voltage_v, rated_uf, frequency_hz, rules: ReadingRules = RULES):
    """A capacitor voltage typed in kV: read as volts it is almost none (a short circuit, `short_circuit_suspected`),
    read as kilovolts it gives with the current a capacitance near the rating (the nanofarad slip's band). The
    message names the slip and, should the meter really show that, the short circuit."""
    i = np.atleast_1d(np.asarray(current_a, float))
    v = np.atleast_1d(np.asarray(voltage_v, float))
    rated = np.atleast_1d(np.asarray(rated_uf, float))
    volts = v * rules.kilovolt_factor
    with np.errstate(invalid="ignore", divide="ignore"):
        as_kv = np.atleast_1d(capacitance_from_current(i, volts, frequency_hz))
        ratio = as_kv / rated
    kilo = (
        (v > 0)
        & (i > 0)
        & (volts <= rules.ranges["capacitor_voltage_v"].highest)
        & (ratio > 1.0 / rules.wrong_capacitor_ratio)
        & (ratio < rules.wrong_capacitor_ratio)
    )
    return _messages(
        kilo,
        "{v} looks like kilovolts: {kv} V? (with {i} A that gives {c:.2f} µF, rated {r} µF). If the meter shows "
        "{v} V: " + SHORT_CIRCUIT_WORDS,
        plain=("v", "kv", "i", "r"),
        v=v,
        kv=volts,
        i=i,
        c=as_kv,
        r=rated,
    )


def off_trend(capacitance_uf, predicted_uf, rated_uf, threshold_fraction=ReadingRules.off_trend_fraction):
    """True where a reading sits more than `threshold_fraction` of the rating away
    from the capacitor's fitted trend: ask the technician to confirm or re-measure.
    The threshold is the rulebook's (`ReadingRules.off_trend_fraction`) unless given."""
    c = np.asarray(capacitance_uf, float)
    predicted = np.asarray(predicted_uf, float)
    with np.errstate(invalid="ignore"):
        return np.isfinite(predicted) & (np.abs(c - predicted) > threshold_fraction * np.asarray(rated_uf, float))


def neighbours_line(
    capacitor, taken_at, capacitance_uf, rated_uf, agree_fraction=0.08, taken_on=None, removed_on=None
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per reading of a file, the value on the straight line between the readings of the same capacitor just
    before and just after it in the file, at its time, where those two agree (within `agree_fraction` of the
    rating); nan where it is the first or last of its capacitor's, or they disagree, or a value is missing.

    What the import holds a reading to where its capacitor has no stored trend (a whole history brought in
    at once): a wrong capacitor read or a poor contact between two readings that agree is the stray
    `off_trend` asks to confirm; a real fall shows again in the next reading, and a last one is never held.
    A reading on its capacitor's removal day (`taken_on`, `removed_on`: site days, datetime64[D]) is never the
    one after: a file that does not name the capacitor gives the new one's first reading of that day to the
    removed one, and the low reading that brought the replacement would look like a stray before it.
    Arrays per reading: `capacitor` (any id; negative: not matched), `taken_at` (datetime64), the rest floats.
    Returns (line, before, after): the line's value and the two readings it runs between (nan where no line).
    """
    frame = pd.DataFrame(
        {
            "capacitor": np.asarray(capacitor, np.int64),
            "hours": np.asarray(taken_at, "datetime64[s]").astype("int64") / 3600.0,
            "value": np.asarray(capacitance_uf, float),
            "rated": np.asarray(rated_uf, float),
            "removal_day": np.zeros(len(np.asarray(capacitor)), bool)
            if taken_on is None or removed_on is None
            else np.asarray(taken_on, "datetime64[D]") == np.asarray(removed_on, "datetime64[D]"),
        }
    )
    usable = (frame["capacitor"] >= 0) & np.isfinite(frame["value"]) & np.isfinite(frame["rated"])
    usable &= ~np.isnat(np.asarray(taken_at, "datetime64[s]"))
    ordered = frame[usable].sort_values(["capacitor", "hours"], kind="stable")
    before_value, after_value = ordered["value"].shift(1), ordered["value"].shift(-1)
    before_hours, after_hours = ordered["hours"].shift(1), ordered["hours"].shift(-1)
    # Neighbours strictly before and after: rows at one time are the same reading given twice (refused as such).
    same_before = ordered["capacitor"].eq(ordered["capacitor"].shift(1)) & (before_hours < ordered["hours"])
    same_after = ordered["capacitor"].eq(ordered["capacitor"].shift(-1)) & (after_hours > ordered["hours"])
    same_after &= ~ordered["removal_day"].shift(-1, fill_value=False).astype(bool)
    with np.errstate(invalid="ignore", divide="ignore"):
        share = ((ordered["hours"] - before_hours) / (after_hours - before_hours)).clip(0.0, 1.0).fillna(0.5)
    agree = same_before & same_after & ((before_value - after_value).abs() <= agree_fraction * ordered["rated"])
    line = np.where(agree, before_value + share * (after_value - before_value), np.nan)
    result = np.full((3, len(frame)), np.nan)
    result[:, ordered.index.to_numpy()] = [
        line,
        np.where(agree, before_value, np.nan),
        np.where(agree, after_value, np.nan),
    ]
    return result[0], result[1], result[2]


def in_circuit_capacitance_uf(current_a, voltage_v, frequency_hz) -> np.ndarray:
    """The capacitance an in-circuit reading stores, worked out from its current and voltage (C = I / (2 pi f V),
    `capacitor.capacitance_from_current`) to a thousandth of a µF: the form, the API, the import and the demo
    alike, so an export imported again finds each reading stored already."""
    return np.round(np.atleast_1d(capacitance_from_current(current_a, voltage_v, frequency_hz)), 3)


def trend_slope_uf_per_hour(slope_pct_per_1000h, stress_rate, rated_uf) -> np.ndarray:
    """An assessment's slope (% of rated per 1000 stress-hours, at its newest reading) in µF per calendar hour at
    its long-run stress rate; 0 where either is unknown (no trend: the value stays)."""
    slope = np.asarray(slope_pct_per_1000h, float) / 1e5 * np.asarray(rated_uf, float)
    return np.nan_to_num(slope * np.asarray(stress_rate, float), nan=0.0)


def trend_value_held_to(capacitance_now_uf, fitted_through, taken_at, slope_uf_per_hour=0.0) -> np.ndarray:
    """Per reading, the trend value `off_trend` holds it to (`predicted_uf`): its capacitor's current assessment's
    capacitance now, the trend at the newest reading it used (`fitted_through`, datetime64 UTC), carried on to
    the reading's time along the trend's slope there (`slope_uf_per_hour` in calendar hours: the assessment's
    slope times its long-run stress rate), for a reading taken at or after that one (a re-read in the same
    minute as the newest reading, meter after in circuit, is held to the trend's value then); nan for a reading
    taken before it (the trend's value then is not stored, so a back-filled reading is not held to today's
    value) or without an assessment (NaT). A year after the newest reading the
    trend has moved on: held to its old value, the reading a "read again" order asked for was called far off the
    trend the order said had reached its limit. One rule for the reading form, the API, the admin and the import."""
    now_uf = np.atleast_1d(np.asarray(capacitance_now_uf, float))
    through = np.atleast_1d(np.asarray(fitted_through, "datetime64[s]"))
    taken = np.atleast_1d(np.asarray(taken_at, "datetime64[s]"))
    hours = (taken - through).astype("timedelta64[s]").astype(float) / 3600.0
    slope = np.nan_to_num(np.atleast_1d(np.asarray(slope_uf_per_hour, float)), nan=0.0)
    return np.where(taken >= through, now_uf + slope * np.where(taken > through, hours, 0.0), np.nan)


def _as_objects(raw, n: int | None = None) -> pd.Series:
    """Values as a Series: a text column (an import file's) stays text, anything else becomes objects."""
    if isinstance(raw, pd.Series):
        raw = raw.reset_index(drop=True)
        return raw if _is_text_column(raw) else raw.astype(object)
    if isinstance(raw, str) or not np.iterable(raw):
        raw = [raw] * (n or 1)
    return pd.Series(list(raw), dtype=object)


def _is_text_column(series: pd.Series) -> bool:
    """A column of text dtype: every cell is text (or missing), so no value needs a look of its own."""
    return isinstance(series.dtype, pd.StringDtype)


def _given_text(value) -> str:
    """A value as given, for a message: "" for nothing (None, NaN, blank), else its text, cut to 20 characters."""
    if value is None or (isinstance(value, float) and np.isnan(value)):
        return ""
    return (plain_number(value) if isinstance(value, (int, float)) else str(value)).strip()[:20]


def _texts(raw, n: int | None, other: str) -> pd.Series:
    """Text values; `other` in place of anything that is not text."""
    series = _as_objects(raw, n)
    if _is_text_column(series):
        return series.fillna(other)
    return series.map(lambda v: v if isinstance(v, str) else other).astype(object)


def _number_or_code(value):
    """A non-text value: (float, "") or (nan, why not)."""
    if value is None:
        return np.nan, ""
    if isinstance(value, bool) or not isinstance(value, int | float | np.integer | np.floating):
        return np.nan, MSG_NOT_A_NUMBER
    try:
        number = float(value)
    except OverflowError:
        return np.nan, MSG_NOT_FINITE
    return (number, "") if np.isfinite(number) else (np.nan, MSG_NOT_FINITE)


def _why_not_a_number(given: pd.Series, ok: np.ndarray) -> np.ndarray:
    """Why each text (not blank) gives no finite number; `ok`: it has the syntax of one (so it overflowed)."""
    return np.where(
        given.str.lower().isin(NOT_FINITE_WORDS).to_numpy() | ok,
        MSG_NOT_FINITE,
        np.where(
            given.str.contains(TWO_SEPARATORS, regex=True).to_numpy(),
            MSG_SEPARATORS,
            np.where(
                given.str.fullmatch(LETTERS_FOR_DIGITS).to_numpy(bool)
                & given.str.translate(LETTERS_AS_DIGITS).str.fullmatch(NUMBER_TEXT.pattern).to_numpy(bool),
                MSG_LETTER_FOR_DIGIT,
                np.where(given.str.fullmatch(NUMBER_WITH_UNIT).to_numpy(bool), MSG_WITH_UNIT, MSG_NOT_A_NUMBER),
            ),
        ),
    )


def parse_numbers(raw) -> tuple[np.ndarray, np.ndarray]:
    """Numbers typed, sent or imported -> (floats with nan where missing or bad, messages).

    Text takes a decimal point or one decimal comma ("3,8" is 3.8), the same in the
    form, the API and the import; "1,234.5" and "1.234,5" are refused, not guessed.
    NaN and infinity are refused in any spelling; empty text or null is missing.
    """
    series = _as_objects(raw)
    values = np.full(len(series), np.nan)
    messages = np.full(len(series), "", dtype=object)
    if _is_text_column(series):
        is_text = series.notna().to_numpy(bool)
    else:
        is_text = series.map(lambda v: isinstance(v, str)).to_numpy(bool)
    if is_text.any():
        text = (series if is_text.all() else series[is_text]).astype(str).str.strip()
        filled = text.ne("").to_numpy(bool)
        numbers = np.full(len(text), np.nan)
        why_not = np.full(len(text), "", dtype=object)
        if filled.any():  # empty text is missing: only the filled cells are parsed
            given = text if filled.all() else text[filled]
            ok = given.str.fullmatch(NUMBER_TEXT.pattern)
            parsed = pd.to_numeric(given.where(ok, "").str.replace(",", ".", regex=False), errors="coerce").to_numpy(
                float
            )
            finite = ok.to_numpy(bool) & np.isfinite(parsed)
            numbers[filled] = np.where(finite, parsed, np.nan)
            if not finite.all():  # words only for the cells refused
                refused = np.flatnonzero(filled)[~finite]
                why_not[refused] = _why_not_a_number(given[~finite], ok.to_numpy(bool)[~finite])
        values[is_text] = numbers
        messages[is_text] = why_not
    if (~is_text).any():
        pairs = [_number_or_code(v) for v in series[~is_text]]
        values[~is_text] = [p[0] for p in pairs]
        messages[~is_text] = [p[1] for p in pairs]
    return values, messages


# A whole number typed (a count, a place on a route): ASCII digits, as NUMBER_TEXT's; Python's int() also
# takes other scripts' digits ("\u0663", full-width "\uff13") and "1_000", which no other field takes. At most 18
# digits: every count and place is far below that, and int() refuses a string of over 4300 digits with an error.
WHOLE_NUMBER_TEXT = re.compile(r"\+?[0-9]{1,18}")


def whole_number(text) -> int | None:
    """A whole number as typed (spaces around it allowed), or None where the text is not one (empty included)."""
    text = str(text).strip()
    return int(text) if WHOLE_NUMBER_TEXT.fullmatch(text) else None


def _unit(name: str) -> str:
    return UNITS.get(name.rsplit("_", 1)[-1], "")


def range_words(name: str, r: Range) -> tuple[str, str]:
    """What a value below and above the field's range is told (after the value itself), for the
    server's messages and the page's live check alike."""
    unit = _unit(name)
    below = f"must be above {r.lowest:g} {unit}" if r.above else f"must be {r.lowest:g} {unit} or more"
    return below, f"is above {r.highest:g} {unit}, the most a reading of a small motor shows"


def range_messages(name: str, values, rules: ReadingRules = RULES) -> np.ndarray:
    """Messages for values outside the field's plausible range (missing values pass)."""
    r = rules.ranges[name]
    v = np.atleast_1d(np.asarray(values, float))
    low = (v <= r.lowest) if r.above else (v < r.lowest)
    high = v > r.highest
    below, above = range_words(name, r)
    return np.where(low, _messages(low, "{v:g} " + below, v=v), _messages(high, "{v:g} " + above, v=v))


@dataclass(frozen=True)
class RuleResult:
    """Parsed values (nan where missing; in-circuit capacitance computed) and messages by field."""

    values: dict
    errors: dict  # field -> messages: the value is refused
    confirm: dict  # field -> messages: the value is kept only when confirmed
    asked: np.ndarray | None = None  # per reading: a confirmation was asked (given or not), for the record's mark

    @property
    def bad(self) -> np.ndarray:
        return np.logical_or.reduce([m != "" for m in self.errors.values()])

    @property
    def needs_confirmation(self) -> np.ndarray:
        if not self.confirm:
            return np.zeros_like(self.bad)
        return np.logical_or.reduce([m != "" for m in self.confirm.values()])

    def row(self, i: int, which: str = "errors") -> dict[str, str]:
        """The messages of one row, by field."""
        return {name: str(m[i]) for name, m in getattr(self, which).items() if m[i]}


class _Collector:
    """First message per field and row wins."""

    def __init__(self, n: int):
        self.n = n
        self.by_field: dict[str, np.ndarray] = {}
        self.flagged: dict[str, np.ndarray] = {}  # by_field[name] != "", kept as it changes (no text compared)

    def add(self, name: str, mask, message, case: str = "") -> None:
        """The message on the rows of `mask` where the field has none yet; `case`: a key of CONFIRMATION_CASES
        where a value is asked to be confirmed."""
        if case and case not in CONFIRMATION_CASES:
            raise KeyError(case)
        mask = np.broadcast_to(np.asarray(mask, bool), (self.n,))
        if name not in self.by_field:
            self.by_field[name] = np.full(self.n, "", dtype=object)
            self.flagged[name] = np.zeros(self.n, bool)
        fresh = mask & ~self.flagged[name]
        if isinstance(message, np.ndarray):
            self.by_field[name][fresh] = message[fresh]
            self.flagged[name][fresh] = message[fresh] != ""
        elif message:
            self.by_field[name][fresh] = message
            self.flagged[name][fresh] = True

    def clear(self, name: str, mask) -> None:
        """No message for these rows (a field the rows do not use)."""
        self.by_field[name][mask] = ""
        self.flagged[name][mask] = False

    def has(self, name: str) -> np.ndarray:
        return self.flagged[name].copy() if name in self.flagged else np.zeros(self.n, bool)


def _column(values, n, dtype=float):
    return np.broadcast_to(np.asarray(values, dtype), (n,)) if np.ndim(values) == 0 else np.asarray(values, dtype)


def check_readings(raw: dict, **kwargs) -> RuleResult:
    """Check many readings at once (see `_check_readings`); overflow in a hostile value is a message, not a warning."""
    with np.errstate(all="ignore"):
        return _check_readings(raw, **kwargs)


def _check_readings(
    raw: dict,
    *,
    method,
    rated_uf,
    frequency_hz,
    motor_voltage_v,
    full_load_current_a,
    fitted_on,
    removed_on,
    taken_at,
    now,
    taken_on=None,
    time_zone=None,
    condition=None,
    notes=None,
    predicted_uf=None,
    max_case_temperature_c=None,
    tolerance_plus_pct=None,
    tolerance_minus_pct=None,
    confirmed=False,
    rules: ReadingRules = RULES,
) -> RuleResult:
    """Check many readings at once.

    `raw` maps measured field names to values as typed or sent (text, numbers,
    None); the capacitor's and motor's figures are per reading (arrays) or shared
    (scalars). Dates: `taken_at` as datetime64 (UTC, NaT where unreadable),
    `fitted_on`/`removed_on` as datetime64[D] (NaT: not removed), `now` one instant;
    `taken_on` the reading's calendar day at its site (datetime64[D]; None: the UTC day), `time_zone` the site's
    zone name (per reading or shared; None: UTC), in which a time in the future is told. A capacitor's
    window is whole days: from its fitting day to the end of its removal day, so a reading taken
    during the removal day is the removed capacitor's.
    """
    n = len(np.atleast_1d(method)) if np.ndim(method) else max((len(_as_objects(v)) for v in raw.values()), default=1)
    errors, confirm = _Collector(n), _Collector(n)
    values = {}
    for name in rules.ranges:
        number, why = parse_numbers(_as_objects(raw.get(name), n))
        errors.add(name, why != "", why)
        values[name] = number

    method = _texts(method, n, "").str.strip().str.lower()
    method = method.where(method != "", METHOD_METER).to_numpy(object)
    errors.add("method", ~np.isin(method, METHODS), "must be meter or in_circuit")
    if condition is not None:
        text = _texts(condition, n, "?").str.strip().str.lower()
        text = text.where(text != "", CONDITION_SOUND).to_numpy(object)
        errors.add("condition", ~np.isin(text, CONDITIONS), f"must be {', '.join(CONDITIONS[:-1])} or {CONDITIONS[-1]}")
        values["condition"] = text
    values["method"] = method

    rated = _column(rated_uf, n)
    frequency = _column(frequency_hz, n)
    supply = _column(motor_voltage_v, n)
    full_load = _column(full_load_current_a, n)
    in_circuit = method == METHOD_IN_CIRCUIT
    current, voltage = values["capacitor_current_a"], values["capacitor_voltage_v"]
    missing_current = in_circuit & np.isnan(current) & ~errors.has("capacitor_current_a")
    missing_voltage = in_circuit & np.isnan(voltage) & ~errors.has("capacitor_voltage_v")
    errors.add("capacitor_current_a", missing_current, "in-circuit reading: enter the capacitor current in A")
    errors.add(
        "capacitor_voltage_v", missing_voltage, "in-circuit reading: enter the voltage across the capacitor in V"
    )
    # A voltage typed in kV first (it names the short circuit too), then the short circuit: a healthy current
    # over a near-zero voltage would otherwise read as a unit slip of the current.
    errors.add("capacitor_voltage_v", in_circuit, voltage_unit_slip(current, voltage, rated, frequency, rules))
    shorted = (
        in_circuit & (voltage >= 0) & short_circuit_suspected(current, voltage, supply, rules.short_circuit_fraction)
    )
    errors.add("capacitor_voltage_v", shorted, SHORT_CIRCUIT_WORDS)
    line = values["line_voltage_v"]
    line_kv = (line * rules.kilovolt_factor >= 0.5 * supply) & (
        line * rules.kilovolt_factor <= rules.voltage_confirm_factor * supply
    )
    errors.add(
        "line_voltage_v",
        line_kv,
        _messages(
            line_kv,
            "{v} looks like kilovolts: {kv} V? (motor {s} V)",
            plain=("v", "kv", "s"),
            v=line,
            kv=line * rules.kilovolt_factor,
            s=supply,
        ),
    )
    errors.add("capacitor_current_a", in_circuit & ~shorted, current_unit_slip(current, voltage, rated, frequency))
    for name in ("main_current_a", "aux_current_a", "line_current_a"):
        ratio = values[name] / full_load
        milli = (ratio > 300) & (ratio < 3000)
        errors.add(
            name,
            milli,
            _messages(
                milli, "{i} looks like milliamperes: {a} A?", plain=("i", "a"), i=values[name], a=values[name] / 1e3
            ),
        )

    errors.clear("capacitance_uf", in_circuit)
    computed = in_circuit_capacitance_uf(current, voltage, frequency)
    # In circuit, the capacitance is computed: another value given too (a file's column, an API body) would not be
    # saved, so it is refused, never dropped unsaid; the computed value itself (an export imported again) is kept.
    typed = _as_objects(raw.get("capacitance_uf"), n).map(_given_text).to_numpy(object)
    with np.errstate(invalid="ignore"):
        agrees = np.isclose(values["capacitance_uf"], computed, rtol=1e-3, atol=1e-3)
    meter_value_too = in_circuit & (typed != "") & ~agrees
    errors.add(
        "capacitance_uf",
        meter_value_too,
        _messages(
            meter_value_too,
            "in circuit the capacitance is worked out from the current and the voltage, so {c} µF from a meter "
            "would not be saved: leave the capacitance empty, or make the method meter to save it instead",
            c=typed,
        ),
    )
    capacitance = np.where(in_circuit, computed, values["capacitance_uf"])
    meter_missing = ~in_circuit & np.isnan(capacitance) & ~errors.has("capacitance_uf")
    errors.add("capacitance_uf", meter_missing, "enter the capacitance in µF")
    errors.add("capacitance_uf", ~in_circuit & (capacitance > 0), capacitance_unit_slip(capacitance, rated))
    # Ranges after the slips, so a value typed in another unit is named as such.
    for name in rules.ranges:
        skip = in_circuit if name == "capacitance_uf" else np.zeros(n, bool)
        errors.add(name, ~skip, range_messages(name, values[name], rules))
    circuit_ok = in_circuit & ~errors.has("capacitor_current_a") & ~errors.has("capacitor_voltage_v")
    derived = range_messages("capacitance_uf", capacitance, rules)
    # No current through a capacitor with voltage across it: an open capacitor (or the clamp on the wrong
    # lead), not a capacitance of 0 µF (common practice of the trade, no single source).
    no_current = circuit_ok & (current == 0) & (voltage > 0)
    errors.add(
        "capacitor_current_a",
        no_current,
        "0 A with voltage across the capacitor: the clamp is not on the capacitor's lead, or the capacitor "
        "is open (isolate and discharge it and read it with the meter: an open capacitor reads near 0 µF)",
    )
    judged = circuit_ok & ~no_current
    outside = judged & (derived != "")
    errors.add("capacitor_current_a", outside, _messages(outside, "gives a capacitance of {d}", d=derived))
    # Computed, a capacitance far above the rating is no slip of its unit but of the current's or the voltage's,
    # or a current and voltage of another part of the circuit (as `capacitance_unit_slip`'s wrong capacitor).
    far = judged & (capacitance > rules.wrong_capacitor_ratio * rated)
    errors.add(
        "capacitor_current_a",
        far,
        _messages(
            far,
            "current and voltage give {c} µF, over three times the rated {r} µF: are they in A and V, the current "
            "on this capacitor's lead and the voltage across it?",
            plain=("c", "r"),
            c=capacitance,
            r=rated,
        ),
    )
    values["capacitance_uf"] = np.where(np.isfinite(capacitance), capacitance, np.nan)

    for name in ("capacitor_voltage_v", "line_voltage_v"):
        v = values[name]
        far = (v > rules.voltage_confirm_factor * supply) & ~errors.has(name)  # above the range: refused, not asked
        confirm.add(
            name,
            far,
            _messages(
                far,
                VOLTAGE_CONFIRM_WORDS,
                v=v,
                k=rules.voltage_confirm_factor,
                s=supply,
            ),
            case="voltage_high",
        )
    line = values["line_voltage_v"]
    low_line = (line > 0) & (line < rules.line_voltage_low_share * supply) & ~errors.has("line_voltage_v")
    confirm.add(
        "line_voltage_v",
        low_line,
        _messages(
            low_line,
            "{v:g} V is under half the motor's {s:g} V: a thousands separator (1,200 is read as 1.2), or was the "
            "supply off? Type the volts without a separator, or confirm the value if the meter shows it",
            v=line,
            s=supply,
        ),
        case="line_voltage_low",
    )
    across = values["capacitor_voltage_v"]
    low_across = (across > 0) & (across < rules.line_voltage_low_share * supply) & ~errors.has("capacitor_voltage_v")
    confirm.add(
        "capacitor_voltage_v",
        low_across,
        _messages(
            low_across,
            "{v:g} V across the capacitor is under half the motor's {s:g} V, and a capacitor sees at least about the "
            "supply with the motor running: a decimal point or a thousands separator, or was the motor stopped? "
            "Type the running volts, or confirm the value if the meter shows it",
            v=across,
            s=supply,
        ),
        case="capacitor_voltage_low",
    )
    esr = values["esr_ohm"]
    factor = dissipation_factor_from_esr(esr, values["capacitance_uf"], frequency)
    with np.errstate(invalid="ignore"):
        esr_high = (factor >= rules.esr_confirm_dissipation_factor) & ~errors.has("esr_ohm")
    esr_high &= ~errors.has("capacitance_uf") & ~errors.has("capacitor_current_a")
    confirm.add(
        "esr_ohm",
        esr_high,
        _messages(
            esr_high,
            "{e:g} Ω gives a dissipation factor of {f:.0f} %: more resistance than the capacitor's own reactance "
            "({x:.3g} Ω), which no working capacitor shows. In milliohms it would be {m:g} Ω: type the ohms, or "
            "confirm the value if the meter shows ohms",
            e=esr,
            f=factor * 100.0,
            x=esr / np.where(factor > 0, factor, np.nan),
            m=esr / 1000.0,
        ),
        case="esr_high",
    )

    low_slip = ~in_circuit & ~errors.has("capacitance_uf")
    unit_slip = capacitance_low_unit_slip(values["capacitance_uf"], rated, rules)
    no_capacitance = (values["capacitance_uf"] >= 0) & (values["capacitance_uf"] < rules.no_capacitance_below_uf)
    confirm.add(
        "capacitance_uf", low_slip & no_capacitance & (unit_slip == ""), OPEN_CAPACITOR_WORDS, case="open_capacitor"
    )
    confirm.add("capacitance_uf", low_slip, unit_slip, case="unit_slip")
    if tolerance_plus_pct is not None:
        top = rated * (1.0 + _column(tolerance_plus_pct, n) / 100.0)
        checked = (
            ~errors.has("capacitance_uf") & ~errors.has("capacitor_current_a") & ~errors.has("capacitor_voltage_v")
        )
        high = checked & (values["capacitance_uf"] > top + rules.above_tolerance_fraction * rated)
        confirm.add(
            "capacitance_uf",
            high & ~in_circuit,
            _messages(
                high & ~in_circuit,
                "{c:g} µF is above this capacitor's tolerance ({t:.2f} µF at most), and a capacitor does not gain "
                "capacitance as it ages: is the meter on this capacitor alone? Re-measure, or confirm the value if "
                "it is right",
                c=values["capacitance_uf"],
                t=top,
            ),
            case="above_tolerance",
        )
        confirm.add(
            "capacitor_voltage_v",
            high & in_circuit,
            _messages(
                high & in_circuit,
                "current and voltage give {c:.2f} µF, above this capacitor's tolerance ({t:.2f} µF at most): was "
                "{v:g} V read across the capacitor (a run capacitor sits above the line voltage), and the current "
                "on the capacitor's own lead? Re-measure, or confirm the values if they are right",
                c=values["capacitance_uf"],
                t=top,
                v=values["capacitor_voltage_v"],
            ),
            case="above_tolerance",
        )
    if max_case_temperature_c is not None:
        case = values["case_temperature_c"]
        highest = _column(max_case_temperature_c, n)
        hot = (case > highest + rules.case_over_rating_k) & ~errors.has("case_temperature_c")
        confirm.add(
            "case_temperature_c",
            hot,
            _messages(
                hot,
                "{t:g} °C is above this capacitor's highest case temperature of {m:g} °C; read in °F it would be "
                "{c:.0f} °C. Re-measure in °C, or confirm the value if the capacitor is that hot",
                t=case,
                m=highest,
                c=(case - 32.0) * 5.0 / 9.0,
            ),
            case="case_hot",
        )

    _check_dates(errors, n, taken_at, taken_on, fitted_on, removed_on, now, rules, time_zone)
    if notes is not None:
        _check_notes(errors, n, notes, rules)
        values["notes"] = _texts(notes, n, "").str.strip().to_numpy(object)

    if predicted_uf is not None:
        # The trend is judged at the reading's time: a time refused (a far-future day) has no trend value to say.
        drift = off_trend(values["capacitance_uf"], _column(predicted_uf, n), rated, rules.off_trend_fraction)
        drift &= ~errors.has("taken_at")
        predicted = _column(predicted_uf, n)
        # A capacitance that jumped up towards the rating is most often a capacitor changed and not recorded:
        # confirmed as a reading, the new capacitor's value would bend the old one's trend (trade).
        jumped = drift & (values["capacitance_uf"] > predicted)
        drift_words = _messages(
            drift,
            "{c:g} µF is far from this capacitor's trend ({p:.2f} µF at this reading's time). Re-measure, or confirm "
            "the value if it is right",
            c=values["capacitance_uf"],
            p=predicted,
        ) + np.where(
            jumped,
            ". If the capacitor was changed, record the replacement instead: the new one starts its own trend",
            "",
        )
        # In circuit the capacitance is computed: the message goes where the tolerance's does, on the voltage
        # read across the capacitor (the meter's field is not in use, nor shown on the form).
        confirm.add("capacitance_uf", drift & ~in_circuit, drift_words, case="off_trend")
        confirm.add("capacitor_voltage_v", drift & in_circuit, drift_words, case="off_trend")
    no_trend = np.full(n, True) if predicted_uf is None else np.isnan(_column(predicted_uf, n))
    taken_day = _column(taken_at, n, "datetime64[s]").astype("datetime64[D]")
    fitted_day = _column(fitted_on, n, "datetime64[D]")
    known = ~np.isnat(taken_day) & ~np.isnat(fitted_day)
    days_in = np.where(known, (taken_day - fitted_day).astype("timedelta64[D]").astype(float), np.inf)
    capacitance = values["capacitance_uf"]
    if tolerance_minus_pct is None:
        lowest_new = rules.new_capacitor_low_share * rated
    else:
        lowest_new = rated * (1.0 - _column(tolerance_minus_pct, n) / 100.0 - rules.above_tolerance_fraction)
    low_new = (
        no_trend
        & (days_in <= rules.new_capacitor_days)
        & (capacitance > 0)
        & (capacitance < lowest_new)
        & ~errors.has("capacitance_uf")
        & ~errors.has("capacitor_current_a")
        & ~errors.has("capacitor_voltage_v")
    )
    low_new_words = _messages(
        low_new,
        "{c:.3g} µF on a capacitor fitted {d} and rated {r:g} µF: far below a new capacitor's tolerance (under "
        "{m:.2f} µF). Is the right part fitted (check its marking) or was it misread? Re-measure, or confirm the "
        "value if it is right",
        c=capacitance,
        d=fitted_day,
        r=rated,
        m=np.broadcast_to(lowest_new, (n,)),
    )
    confirm.add("capacitance_uf", low_new & ~in_circuit, low_new_words, case="new_capacitor_low")
    confirm.add("capacitor_voltage_v", low_new & in_circuit, low_new_words, case="new_capacitor_low")
    confirmed = _column(confirmed, n, bool)
    kept_confirm = {name: np.where(confirmed, "", m) for name, m in confirm.by_field.items()}
    asked = np.logical_or.reduce([*confirm.flagged.values(), np.zeros(n, bool)])
    return RuleResult(values=values, errors=errors.by_field, confirm=kept_confirm, asked=asked)


# The start of the rulebook's message for a reading after its capacitor's removal day.
AFTER_REMOVAL = "after this capacitor was removed"


def _check_dates(
    errors: _Collector, n, taken_at, taken_on, fitted_on, removed_on, now, rules: ReadingRules, time_zone=None
) -> None:
    taken = _column(taken_at, n, "datetime64[s]")
    day = taken.astype("datetime64[D]") if taken_on is None else _column(taken_on, n, "datetime64[D]")
    fitted = _column(fitted_on, n, "datetime64[D]")
    removed = _column(removed_on, n, "datetime64[D]")
    latest = np.datetime64(now, "s") + np.timedelta64(int(rules.future_tolerance_s), "s")
    errors.add("taken_at", np.isnat(taken), "not a date and time")
    before = day < fitted
    errors.add("taken_at", before, _messages(before, "before this capacitor was fitted on {d}", d=fitted))
    after = ~np.isnat(removed) & (day > removed)
    removal = AFTER_REMOVAL + " on {d} (site time: readings of that day are still its own)"
    errors.add("taken_at", after, _messages(after, removal, d=removed))
    future = taken > latest
    errors.add("taken_at", future, _future_words(future, taken, now, time_zone))


def _future_words(future, taken, now, time_zone) -> np.ndarray:
    """For a reading taken after now: both times as the site's clock shows them, and its time zone (UTC where
    none is given or known), so the date or the hour typed wrong shows at a glance."""
    out = np.full(future.shape, "", dtype=object)
    rows = np.flatnonzero(future)
    if not len(rows):
        return out
    zones = np.broadcast_to(np.asarray("UTC" if time_zone is None else time_zone, object), future.shape)
    stamps = pd.Series(taken[rows]).dt.tz_localize("UTC")
    now_utc = pd.Timestamp(np.datetime64(now, "s")).tz_localize("UTC")
    for zone in pd.unique(zones[rows]):
        name = zone if known_time_zone(zone) else "UTC"
        picked = zones[rows] == zone
        local = stamps[picked].dt.tz_convert(name).dt.strftime("%Y-%m-%d %H:%M").to_numpy(object)
        site_now = f"{now_utc.tz_convert(name):%Y-%m-%d %H:%M}, {name}"
        out[rows[picked]] = [
            f"taken at {at} is after now at the site ({site_now}): check the date and the time" for at in local
        ]
    return out


# Characters that make a text show otherwise than it is stored: the bidirectional overrides, embeddings and isolates
# (Unicode 15, UAX #9) and the tag characters (U+E0000 to U+E007F); an audit of inputs stored "U+202E" in a note,
# which reversed what the page showed after it (the "Trojan Source" pattern, CVE-2021-42574, from memory, unverified).
HIDDEN_CHARACTERS = "[\u202a-\u202e\u2066-\u2069\U000e0000-\U000e007f]"


def _check_notes(errors: _Collector, n, notes, rules: ReadingRules) -> None:
    series = _as_objects(notes, n)
    if _is_text_column(series):
        is_text = np.ones(len(series), bool)
    else:
        is_text = series.map(lambda v: v is None or isinstance(v, str)).to_numpy(bool)
    text = _texts(series, n, "")
    errors.add("notes", ~is_text, "must be text")
    length = text.str.len().to_numpy()
    too_long = length > rules.notes_max_chars
    errors.add(
        "notes",
        too_long,
        _messages(too_long, "{k} characters: notes take at most {m}", k=length, m=rules.notes_max_chars),
    )
    errors.add("notes", text.str.contains("\x00", regex=False).to_numpy(bool), "contains a NUL character: remove it")
    errors.add(
        "notes",
        text.str.contains(HIDDEN_CHARACTERS).to_numpy(bool),
        "contains an invisible character that reverses or hides text (a direction override or a tag character): "
        "the note would read otherwise than it is stored; remove it",
    )
