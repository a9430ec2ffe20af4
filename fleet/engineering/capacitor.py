"""Capacitors in the field: in-circuit capacitance, verdicts, losses, energy, life.

Every function takes scalars or numpy arrays and broadcasts, so one call serves a
whole fleet. Capacitance is in microfarads, everything else in SI units.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

TWO_PI = 2.0 * np.pi

# Verdict codes, stored as small integers so a fleet verdict is one int array.
VERDICT_WITHIN = 0
VERDICT_LOW = 1
VERDICT_HIGH = 2
VERDICT_OPEN = 3
VERDICT_SHORT = 4
VERDICT_NAMES = {
    VERDICT_WITHIN: "within tolerance",
    VERDICT_LOW: "below tolerance",
    VERDICT_HIGH: "above tolerance",
    VERDICT_OPEN: "open circuit suspected",
    VERDICT_SHORT: "short circuit suspected",
}


def capacitance_from_current(current_a, voltage_v, frequency_hz):
    """Capacitance in uF from the capacitor's true-RMS current and voltage.

    C = I / (2 pi f V); about 2652 I/V at 60 Hz and 3183 I/V at 50 Hz.
    A zero voltage gives nan rather than a division error.
    """
    current_a = np.asarray(current_a, dtype=float)
    voltage_v = np.asarray(voltage_v, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        c_uf = 1e6 * current_a / (TWO_PI * np.asarray(frequency_hz, float) * voltage_v)
    c_uf = np.where(voltage_v > 0, c_uf, np.nan)
    return c_uf if c_uf.ndim else float(c_uf)


def reactance_ohm(capacitance_uf, frequency_hz):
    """Capacitive reactance Xc = 1 / (2 pi f C), ohms."""
    c_f = np.asarray(capacitance_uf, dtype=float) * 1e-6
    with np.errstate(divide="ignore"):
        return 1.0 / (TWO_PI * np.asarray(frequency_hz, float) * c_f)


def dissipation_factor_from_esr(esr_ohm, capacitance_uf, frequency_hz):
    """Dissipation factor (tan delta) from a measured ESR: DF = ESR / Xc; nan where no capacitance was read (an
    open capacitor's 0 µF has no reactance to compare with: its 0 would pull a dissipation trend down)."""
    capacitance_uf = np.asarray(capacitance_uf, float)
    with np.errstate(invalid="ignore"):
        factor = np.asarray(esr_ohm, float) / reactance_ohm(capacitance_uf, frequency_hz)
        return np.where(capacitance_uf > 0, factor, np.nan)


def stored_energy_j(capacitance_uf, voltage_rms_v):
    """Energy held at the peak of an RMS voltage: C V_peak^2 / 2, joules."""
    v_peak = np.sqrt(2.0) * np.asarray(voltage_rms_v, float)
    return 0.5 * np.asarray(capacitance_uf, float) * 1e-6 * v_peak**2


def normalise_to_25c(capacitance_uf, temperature_c, tempco_ppm_per_k=-200.0):
    """Capacitance referred to 25 C with a linear temperature coefficient.

    Polypropylene film is about -200 ppm/K (a setting, from memory). A missing
    temperature (nan) leaves the value as measured.
    """
    temperature_c = np.asarray(temperature_c, float)
    delta_k = np.where(np.isnan(temperature_c), 0.0, temperature_c - 25.0)
    return np.asarray(capacitance_uf, float) / (1.0 + tempco_ppm_per_k * 1e-6 * delta_k)


def short_circuit_suspected(capacitor_current_a, capacitor_voltage_v, supply_voltage_v, threshold_fraction=0.05):
    """In circuit, current through the capacitor with almost no voltage across it.

    A healthy run capacitor sits near or above the supply voltage; under 5 % of
    it while current flows means the dielectric has broken down (common practice
    of the trade, no single source). Missing values are not suspected.
    """
    current = np.asarray(capacitor_current_a, float)
    voltage = np.asarray(capacitor_voltage_v, float)
    with np.errstate(invalid="ignore"):
        return (current > 0) & (voltage < threshold_fraction * np.asarray(supply_voltage_v, float))


@dataclass(frozen=True)
class ToleranceVerdict:
    """Verdict of measured capacitances against their parts' marked tolerance."""

    code: np.ndarray  # VERDICT_* integers
    lower_uf: np.ndarray
    upper_uf: np.ndarray
    margin_uf: np.ndarray  # distance above the lower limit (negative: below it)
    margin_pct: np.ndarray  # margin as percent of rated capacitance
    deviation_pct: np.ndarray  # (measured - rated) / rated, percent


# A handheld meter's AC voltage reads within about 1 % of the truth, and the supply moves by as much between readings
# (common practice of the trade, no single source): a reading less than this share over the rating says nothing.
VOLTAGE_READING_UNCERTAINTY = 0.02


def over_rated_voltage(voltage_v, rated_voltage_v, uncertainty=VOLTAGE_READING_UNCERTAINTY):
    """True where a voltage measured across a capacitor is above its rated voltage by more than a reading's
    uncertainty. A motor capacitor is rated for continuous operation at its rated voltage, higher ones for limited
    periods only (IEC 60252-1 [mem]), and it ages much faster above it. A missing voltage (nan) is never over."""
    v = np.asarray(voltage_v, float)
    with np.errstate(invalid="ignore"):
        return v > np.asarray(rated_voltage_v, float) * (1.0 + uncertainty)


def tolerance_verdict(
    capacitance_uf,
    rated_uf,
    tolerance_minus_pct,
    tolerance_plus_pct,
    open_fraction=0.1,
    short=False,
) -> ToleranceVerdict:
    """Judge capacitances against a marked tolerance (film) or range (electrolytic).

    An electrolytic marked 88-108 uF is rated 88 uF with -0 / +22.7 %, or any
    equivalent pair; the limits are rated x (1 - minus/100) and rated x
    (1 + plus/100). Below `open_fraction` of rated is reported as an open
    circuit (a tripped disconnector or a broken lead), not merely low; `short`
    (from short_circuit_suspected) overrides every other verdict.
    """
    c = np.asarray(capacitance_uf, float)
    rated = np.asarray(rated_uf, float)
    lower = rated * (1.0 - np.asarray(tolerance_minus_pct, float) / 100.0)
    upper = rated * (1.0 + np.asarray(tolerance_plus_pct, float) / 100.0)
    code = np.select(
        [np.asarray(short, bool), c < open_fraction * rated, c < lower, c > upper],
        [VERDICT_SHORT, VERDICT_OPEN, VERDICT_LOW, VERDICT_HIGH],
        default=VERDICT_WITHIN,
    )
    margin = c - lower
    return ToleranceVerdict(
        code=np.atleast_1d(code),
        lower_uf=np.atleast_1d(lower),
        upper_uf=np.atleast_1d(upper),
        margin_uf=np.atleast_1d(margin),
        margin_pct=np.atleast_1d(100.0 * margin / rated),
        deviation_pct=np.atleast_1d(100.0 * (c - rated) / rated),
    )


def acceleration_factor(
    temperature_c,
    voltage_v,
    reference_temperature_c,
    reference_voltage_v,
    doubling_k=10.0,
    voltage_exponent=10.0,
):
    """Ageing rate relative to reference conditions.

    AF = 2^((T - T_ref)/dT) x (V / V_ref)^n. dT = 10 K and n are settings (see the
    primer): the 10-K rule is published for electrolytics, n for film is 7-17
    depending on source. A missing temperature or voltage counts as reference.
    """
    t = np.asarray(temperature_c, float)
    v = np.asarray(voltage_v, float)
    t = np.where(np.isnan(t), reference_temperature_c, t)
    v = np.where(np.isnan(v) | (v <= 0), reference_voltage_v, v)
    thermal = np.exp2((t - reference_temperature_c) / doubling_k)
    electrical = (v / np.asarray(reference_voltage_v, float)) ** voltage_exponent
    return thermal * electrical


# Class of operation per IEC 60252-1 (A, B, C published; D from memory).
CLASS_LIFE_HOURS = {"A": 30000.0, "B": 10000.0, "C": 3000.0, "D": 1000.0}
