"""A simulated plant fleet of capacitor motors, written from the physics and the trade.

Ours, for testing the forecast: it was written without reading the product's
fitter, so it does not share the fitter's assumptions. Plain numpy/pandas, no
Django. Vectorised over capacitors; the only loop is over days.

What is simulated (sources beside each constant, see README.md in this folder):
- sites in four climates, each with a seasonal ambient and day-to-day weather;
- film run capacitors (metallised polypropylene) on permanent-split and
  two-value motors, aluminium electrolytic start capacitors on capacitor-start
  and two-value motors;
- ageing paths that accelerate late in life, different per unit, driven by case
  temperature, capacitor voltage and duty; counted in "reference hours";
- quarterly readings from 2019, meter or in circuit, with the dielectric's
  temperature coefficient at the case temperature of the reading, meter noise
  and resolution, unit slips and stray values;
- replacements after a reading below the tolerance limit, sudden failures in
  service, an occasional removal for other reasons; every successor starts its
  own history;
- ground truth: the day the TRUE capacitance at 25 C first falls below the lower
  tolerance limit, following each unit's own path even past its removal.

Outputs are DataFrames shaped as the product's import files (sites, parts,
register, history, readings) plus a truth frame; `cut` gives what was known at a
cut-off date.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass

import numpy as np
import pandas as pd

START = dt.date(2010, 1, 1)  # ageing starts with the first motors commissioned
READINGS_FROM = dt.date(2019, 1, 1)  # the quarterly reading programme
END = dt.date(2026, 9, 30)  # last simulated day (the span of the truth)

# Sites: climates of our own choosing. Indoor plant-room ambient, degrees C:
# mean, seasonal half-swing, day of year of the warmest ambient (southern
# hemisphere six months out), day-to-day weather spread. Mains: 230 V 50 Hz in
# Europe and Australia, 60 Hz in North America with 120 V and 230 V motors
# (common knowledge).
SITES = pd.DataFrame(
    [
        ("NDY", "Northern dairy", "Europe/Amsterdam", 50, 17.0, 7.0, 200, 2.5),
        ("SPH", "Subtropical packhouse", "Australia/Brisbane", 50, 25.0, 5.0, 20, 2.0),
        ("DDC", "Desert distribution centre", "America/Phoenix", 60, 29.0, 9.0, 196, 2.0),
        ("GCP", "Gulf coast plant", "America/Chicago", 60, 26.0, 7.0, 205, 2.5),
    ],
    columns=["code", "name", "time_zone", "frequency_hz", "mean_c", "swing_k", "warmest_doy", "weather_k"],
)

# Parts. Film run capacitors: IEC-style 450 V parts at 50 Hz, North American
# 370/440 V parts at 60 Hz, tolerance +/-5 or +/-6 % (catalogue practice of the
# trade). Electrolytic start capacitors are marked with a range (88-108 uF and
# so on); we rate them at the middle of the range with a symmetric tolerance so
# that rated x (1 - minus/100) is the bottom of the marked range.
# Simulation-only columns: tempco (film, per K), life scale in reference hours
# (invented, chosen so the fleet's median life to the tolerance limit is several
# years, as the trade experiences it: run capacitors are changed every 5-10
# years, start capacitors about as often; common practice of the trade).
PART_COLUMNS = [  # the parts file's headings: the catalogue's field names
    "code",
    "rated_uf",
    "tolerance_minus_pct",
    "tolerance_plus_pct",
    "rated_voltage_v",
    "dielectric",
    "frequency_hz",
    "class_of_operation",
    "max_case_temperature_c",
    "max_dissipation_factor",
    "unit_cost",
]
PARTS = pd.DataFrame(
    [
        ("RC08-450", 8.0, 5.0, 5.0, 450.0, "film", 50, "B", 70.0, 0.002, "6.40", -230e-6, 9000.0),
        ("RC20-450", 20.0, 5.0, 5.0, 450.0, "film", 50, "B", 70.0, 0.002, "11.80", -220e-6, 10000.0),
        ("RC25-450", 25.0, 5.0, 5.0, 450.0, "film", 50, "A", 85.0, 0.002, "16.50", -210e-6, 14000.0),
        ("RC35-440", 35.0, 6.0, 6.0, 440.0, "film", 60, "B", 70.0, 0.002, "14.90", -240e-6, 20000.0),
        ("RC05-370", 5.0, 6.0, 6.0, 370.0, "film", 60, "C", 70.0, 0.002, "5.20", -250e-6, 5000.0),
        ("SC98-250", 98.0, 10.2, 10.2, 250.0, "electrolytic", 50, "", 65.0, 0.10, "9.90", 0.0, 26000.0),
        ("SC119-330", 119.0, 9.2, 9.2, 330.0, "electrolytic", 50, "", 65.0, 0.10, "12.40", 0.0, 30000.0),
        ("SC177-125", 177.0, 9.0, 9.0, 125.0, "electrolytic", 60, "", 65.0, 0.10, "8.70", 0.0, 32000.0),
    ],
    columns=[*PART_COLUMNS, "tempco_per_k", "life_scale_h"],
)

# Motor designs (nameplates typical of small single-phase motors; common
# practice of the trade). vcap: capacitor voltage / line voltage while running
# (a PSC run capacitor sits above the line: 1.2-1.6 on 230 V, more on 120 V
# motors with a high turns ratio; from memory, unverified). duty: share of
# hours running. starts_h and start_s: starts per hour and seconds per start.
# mount_k: case temperature rise from where the capacitor sits (terminal box,
# condensing unit) over the room.
DESIGNS = pd.DataFrame(
    [
        # key, freq, type, application, load, V, poles, W, FLA, rpm, run, start, vcap lo/hi, duty lo/hi,
        # starts/h lo/hi, start s, mount lo/hi, weight
        ("fan50", 50, "permanent_split", "fan", "fan_law", 230, 4, 250, 1.9, 1380, "RC08-450", "",
         1.35, 1.50, 0.6, 0.98, 0, 0, 0, 3, 9, 3),
        ("pump50", 50, "permanent_split", "pump", "constant", 230, 2, 750, 5.2, 2810, "RC20-450", "",
         1.25, 1.40, 0.3, 0.8, 0, 0, 0, 4, 12, 2),
        ("conv50", 50, "capacitor_start", "conveyor", "constant", 230, 4, 750, 5.6, 1420, "", "SC98-250",
         0, 0, 0.4, 0.9, 1, 6, 1.5, 3, 10, 2),
        ("comp50", 50, "two_value", "compressor", "constant", 230, 2, 1500, 9.6, 2850, "RC25-450", "SC119-330",
         1.30, 1.45, 0.4, 0.8, 4, 10, 1.0, 8, 18, 1),
        ("comp60", 60, "permanent_split", "compressor", "constant", 230, 2, 1100, 7.4, 3450, "RC35-440", "",
         1.40, 1.60, 0.4, 0.8, 0, 0, 0, 8, 18, 2),
        ("fan60", 60, "permanent_split", "fan", "fan_law", 120, 6, 186, 2.6, 1075, "RC05-370", "",
         1.50, 1.85, 0.6, 0.98, 0, 0, 0, 3, 9, 3),
        ("pump60", 60, "capacitor_start", "pump", "constant", 120, 4, 560, 9.8, 1725, "", "SC177-125",
         0, 0, 0.2, 0.6, 2, 8, 1.5, 3, 10, 2),
    ],
    columns=[
        "key", "frequency_hz", "motor_type", "application", "load_type", "rated_voltage_v", "poles", "output_w",
        "full_load_current_a", "rated_speed_rpm", "run_part", "start_part", "vcap_lo", "vcap_hi", "duty_lo",
        "duty_hi", "starts_lo", "starts_hi", "start_s", "mount_lo", "mount_hi", "weight",
    ],
)  # fmt: skip

# Physics constants (sources beside each).
FILM_HALVING_K = 8.0  # film life halves per 8 K: Kong & Lee, IEEE Trans. DEI 11(6), 2004
ELECTROLYTIC_HALVING_K = 10.0  # the 10-K rule of electrolyte loss (Arrhenius): TDK electronics primer, vol. 7
REFERENCE_CASE_C = 40.0  # reference conditions of our "reference hours" (our own choice)
FILM_VOLTAGE_EXPONENT = 4.0  # film voltage acceleration 3-5 (AVX reliability note, as quoted; unverified)
FILM_REFERENCE_STRESS = 0.75  # capacitor voltage / rated voltage at which the film rate is 1
FILM_SELF_HEAT_K = (1.0, 4.0)  # film self-heating while running, K (from memory, unverified)
START_HEAT_K_AT_RATED_DUTY = 15.0  # start capacitor rise at 20 starts/h of 3 s (from memory, unverified)
ELECTROLYTIC_TEMPCO_HOT = 8e-4  # per K above 25 C: about +5 % at 85 C (from memory, unverified)
ELECTROLYTIC_TEMPCO_COLD = 1.5e-3  # per K below 25 C: about -5 % at -8 C (from memory, unverified)
CAPACITOR_VOLTAGE_EXPONENT = 0.3  # V_cap ~ C^-0.3 at a fixed aux current share (from memory, unverified)
GENERATIONS = 10  # capacitors per motor position over the span, at most
# Unit-to-unit spread of the ageing paths (ours): see `simulate`.
INITIAL_SPREAD = {"film": 0.015, "electrolytic": 0.035}  # factory spread of the initial capacitance, one sigma
RATE_SPREAD = 0.35  # lognormal sigma of each unit's life scale
FILM_KNEE = 0.008  # median film a in loss = a (exp(S / scale) - 1)
FILM_KNEE_SPREAD = 0.5  # its lognormal sigma
ELECTROLYTIC_LINEAR = (0.005, 0.02)  # uniform range of b in loss = b x + c x^p
ELECTROLYTIC_DRYING = 0.10  # median c
ELECTROLYTIC_DRYING_SPREAD = 0.2  # its lognormal sigma
ELECTROLYTIC_POWER = (2.5, 4.0)  # uniform range of p
# Instruments (one sigma, relative; from memory, unverified): capacitance meter, clamp, voltmeter.
METER_SD, CLAMP_SD, VOLTMETER_SD = 0.006, 0.012, 0.005


@dataclass(repr=False)
class Fleet:
    """Everything the simulation knows, for the whole span."""

    sites: pd.DataFrame
    parts: pd.DataFrame
    register: pd.DataFrame  # per motor, without the fitted capacitors (see `cut`)
    units: pd.DataFrame  # every capacitor ever fitted, with its truth
    readings: pd.DataFrame  # every reading, with its unit id (dropped in the files)
    end: dt.date
    # With `simulate(..., record_stress=True)`: each unit's reference hours at the end of every
    # day (days since START x units) and the simulation's own truth behind them (see `bound.py`).
    stress_h: np.ndarray | None = None
    latent: dict | None = None

    def __repr__(self):
        return f"Fleet({len(self.register)} motors, {len(self.units)} capacitors, {len(self.readings)} readings)"


def _day(date: dt.date) -> int:
    return (date - START).days


def _date(days) -> np.ndarray:
    return (np.datetime64(START) + np.asarray(days, "int64").astype("timedelta64[D]")).astype("datetime64[D]")


def _lognormal(rng, n, sigma):
    return np.exp(rng.normal(0.0, sigma, n))


def simulate(rng: np.random.Generator, motors: int = 450, end: dt.date = END, record_stress: bool = False) -> Fleet:
    """Simulate the fleet from START to `end` (about 500 capacitors in service at a time).

    `record_stress` keeps every unit's stress history and latent path (about 120 MB at the
    default size) for the information bound; the fleet itself is the same either way."""
    n_days = _day(end) + 1
    sites, parts = SITES, PARTS.set_index("code")

    # Motors: each site gets the designs of its mains frequency.
    site_of = rng.integers(0, len(sites), motors)
    design_of = np.empty(motors, int)
    for s in range(len(sites)):
        allowed = np.flatnonzero(DESIGNS["frequency_hz"].to_numpy() == sites["frequency_hz"].iloc[s])
        weights = DESIGNS["weight"].to_numpy(float)[allowed]
        here = np.flatnonzero(site_of == s)
        design_of[here] = rng.choice(allowed, size=len(here), p=weights / weights.sum())
    design = DESIGNS.iloc[design_of].reset_index(drop=True)
    # Commissioning: most motors before the reading programme, some added later.
    late = rng.random(motors) < 0.12
    commissioned = np.where(
        late,
        rng.integers(_day(dt.date(2019, 6, 1)), _day(dt.date(2023, 6, 1)), motors),
        rng.integers(0, _day(dt.date(2018, 12, 1)), motors),
    )
    supply_v = design["rated_voltage_v"].to_numpy(float)  # each motor on the supply of its nameplate
    frequency = design["frequency_hz"].to_numpy(float)
    tags = (
        pd.Series(sites["code"].to_numpy()[site_of]) + "-" + pd.Series(np.arange(1, motors + 1)).map("{:04d}".format)
    ).to_numpy()

    # Motor positions (slots): one per capacitor role.
    run_part, start_part = design["run_part"].to_numpy(), design["start_part"].to_numpy()
    with_run, with_start = np.flatnonzero(run_part != ""), np.flatnonzero(start_part != "")
    slot_motor = np.concatenate([with_run, with_start])
    slot_role = np.repeat(["run", "start"], [len(with_run), len(with_start)])
    slot_part = np.concatenate([run_part[with_run], start_part[with_start]])
    order = np.lexsort((slot_role, slot_motor))
    slot_motor, slot_role, slot_part = slot_motor[order], slot_role[order], slot_part[order]
    n_slots = len(slot_motor)
    film = parts.loc[slot_part, "dielectric"].to_numpy() == "film"
    rated = parts.loc[slot_part, "rated_uf"].to_numpy(float)
    lower = rated * (1 - parts.loc[slot_part, "tolerance_minus_pct"].to_numpy(float) / 100)
    upper = rated * (1 + parts.loc[slot_part, "tolerance_plus_pct"].to_numpy(float) / 100)
    rated_v = parts.loc[slot_part, "rated_voltage_v"].to_numpy(float)
    tempco = parts.loc[slot_part, "tempco_per_k"].to_numpy(float)
    life_scale = parts.loc[slot_part, "life_scale_h"].to_numpy(float)
    d = design.iloc[slot_motor]
    # Per position: where it sits, how hard it works.
    mount_k = rng.uniform(d["mount_lo"].to_numpy(float), d["mount_hi"].to_numpy(float))
    duty = rng.uniform(d["duty_lo"].to_numpy(float), d["duty_hi"].to_numpy(float))
    vcap_ratio = rng.uniform(d["vcap_lo"].to_numpy(float), d["vcap_hi"].to_numpy(float))
    starts_h = rng.uniform(d["starts_lo"].to_numpy(float), d["starts_hi"].to_numpy(float))
    self_heat = np.where(film, rng.uniform(*FILM_SELF_HEAT_K, n_slots), 0.0)
    start_heat = START_HEAT_K_AT_RATED_DUTY * starts_h * d["start_s"].to_numpy(float) / (20 * 3.0)
    slot_supply = supply_v[slot_motor]
    slot_freq = frequency[slot_motor]
    slot_site = site_of[slot_motor]
    # Capacitor voltage at nominal line voltage and rated capacitance; the film
    # rate's voltage factor uses it (start capacitors are in circuit for seconds).
    vcap_nominal = slot_supply * vcap_ratio
    film_voltage_factor = np.where(
        film, (vcap_nominal / (FILM_REFERENCE_STRESS * rated_v)) ** FILM_VOLTAGE_EXPONENT, 0.0
    )

    # Units: GENERATIONS per slot, drawn up front; unit u = slot * G + generation.
    G = GENERATIONS
    n_units = n_slots * G
    u_slot = np.repeat(np.arange(n_slots), G)
    u_film = film[u_slot]
    # Initial capacitance inside the tolerance (factory spread; from memory, unverified):
    # film about rated with 1.5 % spread; electrolytics about the middle with 3.5 %.
    spread = np.where(u_film, INITIAL_SPREAD["film"], INITIAL_SPREAD["electrolytic"])
    c0 = rated[u_slot] * (1 + rng.normal(0.0, 1.0, n_units) * spread)
    c0 = np.clip(c0, lower[u_slot] * 1.005, upper[u_slot] * 0.995)
    # Film: loss = a (exp(S / tau) - 1): self-healing clears area at a rate that
    # grows with the area already cleared (MDPI Electronics 13(14) 2886, 2024,
    # capacitance loss under cumulative self-healing; form ours).
    # Electrolytic: loss = b S/theta + c (S/theta)^p: slow early loss, then the
    # electrolyte runs short and capacitance falls away (drying out; TDK primer
    # vol. 7; form ours). Unit-to-unit spread of rate and knee (ours).
    scale = life_scale[u_slot] * _lognormal(rng, n_units, RATE_SPREAD)
    film_a = FILM_KNEE * _lognormal(rng, n_units, FILM_KNEE_SPREAD)
    ely_b = rng.uniform(*ELECTROLYTIC_LINEAR, n_units)
    ely_c = ELECTROLYTIC_DRYING * _lognormal(rng, n_units, ELECTROLYTIC_DRYING_SPREAD)
    ely_p = rng.uniform(*ELECTROLYTIC_POWER, n_units)

    def loss(stress_h, idx):
        x = stress_h / scale[idx]
        film_loss = film_a[idx] * np.expm1(np.minimum(x, 30.0))
        ely_loss = ely_b[idx] * x + ely_c[idx] * x ** ely_p[idx]
        return np.minimum(np.where(u_film[idx], film_loss, ely_loss), 0.95)

    # Weather: site ambient per day, seasonal plus AR(1) day-to-day.
    days = np.arange(n_days)
    doy = (_date(days) - _date(days).astype("datetime64[Y]")).astype(int) + 1
    seasonal = sites["mean_c"].to_numpy()[:, None] + sites["swing_k"].to_numpy()[:, None] * np.cos(
        2 * np.pi * (doy[None, :] - sites["warmest_doy"].to_numpy()[:, None]) / 365.25
    )
    weather = np.zeros_like(seasonal)
    shocks = rng.normal(0.0, 1.0, seasonal.shape) * sites["weather_k"].to_numpy()[:, None] * np.sqrt(1 - 0.8**2)
    for t in range(1, n_days):
        weather[:, t] = 0.8 * weather[:, t - 1] + shocks[:, t]
    ambient = seasonal + weather

    # Reading schedule: quarterly rounds per site, each motor on its route day.
    quarters = np.arange(0, (n_days - _day(READINGS_FROM)) // 91 + 1)
    site_offset = rng.integers(0, 20, len(sites))
    route_day = rng.integers(0, 15, motors)
    reading_day = (
        _day(READINGS_FROM)
        + np.round(quarters[None, :] * 91.31).astype(int)
        + site_offset[site_of][:, None]
        + route_day[:, None]
        + rng.integers(-3, 4, (motors, len(quarters)))
    )
    missed = rng.random(reading_day.shape) < 0.05  # no access, motor away (ours)
    reading_day = np.where(missed | (reading_day >= n_days), -1, reading_day)
    rows, cols = np.nonzero(reading_day >= 0)
    order = np.argsort(reading_day[rows, cols], kind="stable")
    day_sorted, motor_sorted = reading_day[rows, cols][order], rows[order]
    first_of_day = np.searchsorted(day_sorted, np.arange(n_days + 1))
    # The other capacitor of a two-value motor (slots are sorted by motor).
    partner = np.full(n_slots, -1)
    pair = np.flatnonzero(slot_motor[1:] == slot_motor[:-1])
    partner[pair], partner[pair + 1] = pair + 1, pair

    # State.
    never = np.iinfo(np.int64).max // 4
    fitted_day = np.full(n_units, never, np.int64)
    removed_day = np.full(n_units, never, np.int64)
    removal_reason = np.full(n_units, "", object)
    crossed_day = np.full(n_units, never, np.int64)
    stress = np.zeros(n_units)
    generation = np.zeros(n_slots, int)
    fitted_day[np.arange(n_slots) * G] = commissioned[slot_motor]
    pending = np.full(n_slots, never, np.int64)  # planned replacement day
    readings = []

    u_lower = lower[u_slot]
    context = dict(
        film=film,
        ambient=ambient,
        slot_site=slot_site,
        c0=c0,
        loss=loss,
        stress=stress,
        tempco=tempco,
        mount_k=mount_k,
        self_heat=self_heat,
        rated=rated,
        slot_supply=slot_supply,
        vcap_ratio=vcap_ratio,
        slot_freq=slot_freq,
        time_zones=sites["time_zone"].to_numpy(),
        slot_motor=slot_motor,
        tags=tags,
        slot_role=slot_role,
    )
    stress_log = np.zeros((n_days, n_units), np.float32) if record_stress else None
    for t in range(n_days):
        active = fitted_day <= t  # every unit ever fitted keeps its latent path
        amb = ambient[slot_site, t]
        # Ageing rate, reference hours per day.
        case_running = amb + mount_k + self_heat
        film_rate = 24 * duty * np.exp2((case_running - REFERENCE_CASE_C) / FILM_HALVING_K) * film_voltage_factor
        case_idle = amb + mount_k * duty + start_heat
        ely_rate = 24 * np.exp2((case_idle - REFERENCE_CASE_C) / ELECTROLYTIC_HALVING_K)
        rate = np.where(film, film_rate, ely_rate)
        stress[active] += rate[u_slot[active]]
        if stress_log is not None:
            stress_log[t] = stress
        idx = np.flatnonzero(active & (crossed_day == never))
        if len(idx):
            c_true = c0[idx] * (1 - loss(stress[idx], idx))
            crossed_day[idx[c_true < u_lower[idx]]] = t

        current = np.arange(n_slots) * G + generation
        on = fitted_day[current] <= t
        # Removals: sudden failures (random, plus wear-out once far gone), planned
        # replacements, other reasons. Rates are ours (from memory, unverified):
        # film random 1 %/yr at reference stress; electrolytic 3 %/yr; far gone
        # (film 12 %, electrolytic 20 % lost): motor stops within months.
        cur_loss = loss(stress[current], current)
        hazard_year = np.where(
            film,
            0.01 * rate / 24 + np.where(cur_loss > 0.12, 2.0, 0.0),
            0.03 * rate / 24 + np.where(cur_loss > 0.20, 3.0, 0.0),
        )
        failed = on & (rng.random(n_slots) < hazard_year / 365.25)
        planned = on & ~failed & (pending <= t)
        other = on & ~failed & ~planned & (rng.random(n_slots) < 0.005 / 365.25)
        remove = failed | planned | other
        # A two-value motor's capacitors are changed together (the register has
        # one fitted date per motor; see README).
        with_partner = remove & (partner >= 0)
        partner_remove = np.zeros(n_slots, bool)
        partner_remove[partner[with_partner]] = True
        partner_remove &= on & ~remove
        for mask, reason in ((failed, "failed"), (planned, "planned"), (other, "other"), (partner_remove, "planned")):
            gone = current[mask]
            removed_day[gone] = t
            removal_reason[gone] = reason
        remove |= partner_remove
        if remove.any():
            generation[remove] = np.minimum(generation[remove] + 1, G - 1)
            fitted_day[np.flatnonzero(remove) * G + generation[remove]] = t
            pending[remove] = never
            current = np.arange(n_slots) * G + generation

        motors_today = motor_sorted[first_of_day[t] : first_of_day[t + 1]]
        if not len(motors_today):
            continue
        slots = np.flatnonzero(np.isin(slot_motor, motors_today))
        units = current[slots]
        slots = slots[fitted_day[units] <= t - 3]  # none in the first days after a change (see README)
        units = current[slots]
        if not len(slots):
            continue
        readings.append(_read(rng, t, slots, units, context))
        low = readings[-1]["technician_uf"].to_numpy() < lower[slots]
        # A reading below the limit raises a work order: replaced 3-60 days later;
        # one in ten is not acted on until the next round (ours).
        act = low & (rng.random(len(slots)) > 0.1) & (pending[slots] == never)
        pending[slots[act]] = t + rng.integers(3, 61, int(act.sum()))

    readings = pd.concat(readings, ignore_index=True) if readings else pd.DataFrame()
    # Units and their truth.
    used = fitted_day < never
    unit_ids = np.flatnonzero(used)
    s = u_slot[unit_ids]
    units = pd.DataFrame(
        {
            "unit": unit_ids,
            "asset_tag": tags[slot_motor[s]],
            "role": slot_role[s],
            "part_code": slot_part[s],
            "dielectric": np.where(film[s], "film", "electrolytic"),
            "rated_uf": rated[s],
            "lower_limit_uf": lower[s],
            "serial": pd.Series(slot_part[s]) + "-" + pd.Series(unit_ids).map("{:05d}".format),
            "fitted_on": _date(fitted_day[unit_ids]),
            "removed_on": pd.to_datetime(
                np.where(removed_day[unit_ids] < never, _date(np.minimum(removed_day[unit_ids], n_days)), None)
            ),
            "removal_reason": removal_reason[unit_ids],
            "crossed_on": pd.to_datetime(
                np.where(crossed_day[unit_ids] < never, _date(np.minimum(crossed_day[unit_ids], n_days)), None)
            ),
            "initial_uf": c0[unit_ids],
        }
    )
    units["fitted_on"] = pd.to_datetime(units["fitted_on"])
    register = pd.DataFrame(
        {
            "asset_tag": tags,
            "site_code": sites["code"].to_numpy()[site_of],
            "location": [f"Bay {1 + r % 12}" for r in route_day],
            "route_order": route_day,
            "application": design["application"],
            "motor_type": design["motor_type"],
            "load_type": design["load_type"],
            "rated_voltage_v": design["rated_voltage_v"].astype(float),
            "frequency_hz": design["frequency_hz"],
            "poles": design["poles"],
            "output_w": design["output_w"].astype(float),
            "full_load_current_a": design["full_load_current_a"],
            "rated_speed_rpm": design["rated_speed_rpm"].astype(float),
            "commissioned_on": pd.to_datetime(_date(commissioned)),
        }
    )
    latent = None
    if record_stress:
        latent = {
            "film": u_film,
            "life_scale_h": life_scale[u_slot],
            "tempco_per_k": tempco[u_slot],
            "initial_uf": c0,
            "scale_h": scale,
            "film_a": film_a,
            "electrolytic_b": ely_b,
            "electrolytic_c": ely_c,
            "electrolytic_p": ely_p,
        }
    return Fleet(
        sites=sites[["code", "name", "time_zone"]].copy(),
        parts=PARTS[PART_COLUMNS].copy(),
        register=register,
        units=units,
        readings=readings,
        end=end,
        stress_h=stress_log,
        latent=latent,
    )


def _read(rng, t, slots, units, v) -> pd.DataFrame:
    """The readings of one day: what the technician's instruments show."""
    n = len(slots)
    film = v["film"][slots]
    amb = v["ambient"][v["slot_site"][slots], t]
    c25 = v["c0"][units] * (1 - v["loss"](v["stress"][units], units))
    # Run capacitors are read in circuit (running: full case temperature) or with a
    # meter after isolating (a few minutes stopped: part of the rise gone); start
    # capacitors always with a meter. Half and half on run capacitors (ours).
    in_circuit = film & (rng.random(n) < 0.5)
    rise = v["mount_k"][slots] + v["self_heat"][slots]
    case = amb + np.where(in_circuit, rise, 0.7 * rise)
    tempco_factor = np.where(
        film,
        1 + v["tempco"][slots] * (case - 25),
        1 + np.where(case > 25, ELECTROLYTIC_TEMPCO_HOT, ELECTROLYTIC_TEMPCO_COLD) * (case - 25),
    )
    c_case = c25 * tempco_factor
    # Meter: about 1 % of reading (one sigma 0.6 %), 0.01 uF resolution below
    # 100 uF, 0.1 uF above (handheld capacitance ranges; from memory, unverified).
    meter = c_case * (1 + rng.normal(0, METER_SD, n))
    meter = np.where(v["rated"][slots] < 100, np.round(meter, 2), np.round(meter, 1))
    # In circuit: line voltage within a few % of nominal; capacitor voltage from
    # the motor's ratio, a little higher as capacitance falls; current I = 2 pi f C V.
    line_v = v["slot_supply"][slots] * (1 + rng.normal(0, 0.02, n))
    vcap = (
        line_v
        * v["vcap_ratio"][slots]
        * (1 + rng.normal(0, 0.015, n))
        * (v["rated"][slots] / c_case) ** CAPACITOR_VOLTAGE_EXPONENT
    )
    current = 2 * np.pi * v["slot_freq"][slots] * c_case * 1e-6 * vcap
    vcap_read = np.round(vcap * (1 + rng.normal(0, VOLTMETER_SD, n)))  # true-RMS meter, 1 V
    current_read = np.round(current * (1 + rng.normal(0, CLAMP_SD, n)), 2)  # clamp, 0.01 A
    with np.errstate(invalid="ignore", divide="ignore"):
        computed_uf = current_read / (2 * np.pi * v["slot_freq"][slots] * vcap_read) * 1e6
    technician_uf = np.where(in_circuit, computed_uf, meter)
    # Stray readings: the wrong capacitor, a poor contact (ours: 1.2 %).
    stray = rng.random(n) < 0.012
    stray_factor = np.where(rng.random(n) < 0.5, rng.uniform(0.55, 0.9, n), rng.uniform(1.1, 1.4, n))
    meter = np.where(stray & ~in_circuit, np.round(meter * stray_factor, 2), meter)
    current_read = np.where(stray & in_circuit, np.round(current_read * stray_factor, 2), current_read)
    # Unit slips (ours: 1 %): nF typed for uF on a meter reading; mA for A in circuit.
    slip = rng.random(n) < 0.01
    meter_typed = np.where(slip & ~in_circuit, np.round(meter * 1000), meter)
    current_typed = np.where(slip & in_circuit, np.round(current_read * 1000), current_read)
    # ESR on a third of the electrolytic readings: DF rises as the electrolyte
    # dries (DF = 0.05 new, x (1 + 20 loss); from memory, unverified).
    loss_now = 1 - c25 / v["c0"][units]
    with_esr = ~film & (rng.random(n) < 0.33)
    esr = 0.05 * (1 + 20 * np.maximum(loss_now, 0)) / (2 * np.pi * v["slot_freq"][slots] * c_case * 1e-6)
    bulged = ~film & (loss_now > 0.15) & (rng.random(n) < 0.3)
    # Readings between 07:00 and 16:00 site time, written in UTC.
    local = pd.Timestamp(_date(t)[()]) + pd.to_timedelta(rng.integers(7 * 60, 16 * 60, n), unit="min")
    zones = pd.Series(v["time_zones"][v["slot_site"][slots]])
    taken = pd.Series(pd.NaT, index=zones.index, dtype="datetime64[ns, UTC]")
    for zone in zones.unique():  # a handful of sites
        here = (zones == zone).to_numpy()
        taken[here] = local[here].tz_localize(zone).tz_convert("UTC")
    motor = v["slot_motor"][slots]
    return pd.DataFrame(
        {
            "unit": units,
            "asset_tag": v["tags"][motor],
            "role": v["slot_role"][slots],
            "taken_at": taken.to_numpy(),
            "method": np.where(in_circuit, "in_circuit", "meter"),
            "capacitance_uf": np.where(in_circuit, np.nan, meter_typed),
            "capacitor_current_a": np.where(in_circuit, current_typed, np.nan),
            "capacitor_voltage_v": np.where(in_circuit, vcap_read, np.nan),
            "line_voltage_v": np.where(in_circuit, np.round(line_v), np.nan),
            "case_temperature_c": np.round((case + rng.normal(0, 1.0, n)) * 2) / 2,  # IR thermometer
            "ambient_temperature_c": np.round(amb + rng.normal(0, 1.0, n)),
            "esr_ohm": np.where(with_esr, np.round(esr, 3), np.nan),
            "condition": np.where(bulged, "bulged", "sound"),
            "true_uf_25c": c25,
            "technician_uf": np.where(stray, technician_uf * stray_factor, technician_uf),
            "slip": slip,
            "stray": stray,
        }
    )


HISTORY_COLUMNS = ["asset_tag", "role", "part_code", "fitted_on", "removed_on", "removal_reason", "serial", "notes"]
READING_FILE_COLUMNS = [
    "asset_tag",
    "role",
    "taken_at",
    "method",
    "capacitance_uf",
    "capacitor_current_a",
    "capacitor_voltage_v",
    "line_voltage_v",
    "case_temperature_c",
    "ambient_temperature_c",
    "esr_ohm",
    "condition",
    "notes",
]
KINDS = ("sites", "parts", "register", "history", "readings")


def _iso(dates: pd.Series) -> pd.Series:
    return dates.dt.strftime("%Y-%m-%d").fillna("")


def cut(fleet: Fleet, cutoff: dt.date) -> dict[str, pd.DataFrame]:
    """The import files as known on `cutoff`: fittings, removals and readings before that day."""
    day = pd.Timestamp(cutoff)
    units = fleet.units
    known = units[units["fitted_on"] < day]
    removed = known["removed_on"] < day
    current = known[~removed]
    history = known[removed].copy()
    # One fitted date per motor in the register: a two-value motor's pair is changed together.
    fitted = current.groupby("asset_tag")["fitted_on"].max()
    parts = current.pivot_table(index="asset_tag", columns="role", values="part_code", aggfunc="first")
    register = fleet.register[fleet.register["asset_tag"].isin(fitted.index)].copy()
    register["run_part_code"] = register["asset_tag"].map(parts.get("run", pd.Series(dtype=str))).fillna("")
    register["start_part_code"] = register["asset_tag"].map(parts.get("start", pd.Series(dtype=str))).fillna("")
    register["fitted_on"] = _iso(register["asset_tag"].map(fitted))
    register["commissioned_on"] = _iso(register["commissioned_on"])
    register = register.drop(columns=["route_order"])
    history["fitted_on"] = _iso(history["fitted_on"])
    history["removed_on"] = _iso(history["removed_on"])
    history["notes"] = np.where(history["removal_reason"] == "failed", "stopped in service", "")
    readings = fleet.readings[fleet.readings["taken_at"] < day.tz_localize("UTC")].copy()
    readings["taken_at"] = readings["taken_at"].dt.strftime("%Y-%m-%dT%H:%M:%S+00:00")
    readings["notes"] = ""
    return {
        "sites": fleet.sites.copy(),
        "parts": fleet.parts.copy(),
        "register": register.reset_index(drop=True),
        "history": history[HISTORY_COLUMNS].reset_index(drop=True),
        "readings": readings[READING_FILE_COLUMNS].sort_values(["taken_at", "asset_tag"]).reset_index(drop=True),
    }


def truth(fleet: Fleet) -> pd.DataFrame:
    """Per capacitor: fitted and removed dates and the true crossing of its lower tolerance limit at 25 C."""
    frame = fleet.units.drop(columns=["unit"]).copy()
    frame["span_end"] = pd.Timestamp(fleet.end)
    return frame


def write_files(files: dict[str, pd.DataFrame], directory) -> dict[str, str]:
    """CSV files (UTF-8, empty cells for missing values) in `directory`; kind -> path."""
    paths = {}
    for kind in KINDS:
        path = f"{directory}/{kind}.csv"
        files[kind].to_csv(path, index=False, na_rep="", float_format="%.6g")
        paths[kind] = path
    return paths
