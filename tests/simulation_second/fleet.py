"""A second, independent simulated fleet of capacitor motors, for a truth check of the life forecast.

Written from the physics and the trade by someone who had not read the product's forecaster (nor the
first simulated fleet), so that it shares neither's assumptions. Ours: invented numbers for a test, not
measurements. Plain numpy/pandas, no Django. `simulate(seed)` returns the world: sites, parts, designs,
motors, every capacitor ever fitted with its truth, and every reading as recorded (slips and strays
included) through READ_END. `files.cut` turns it into import files as known on a cut-off day.

Shapes and sources (each also marked where used):
- Film run capacitors lose capacitance in STEPS: self-healing clearing events, a compound Poisson
  process.  Rate ~ 2^((T_case-60)/10) (10 K doubling; the usual rule for film life, from memory,
  unverified) x (V_cap/V_rated)^8 (voltage-stress exponent 7-9 in film endurance models, from memory,
  unverified) x exp(loss/3 %) (self-excitation: eroded metallisation clears more; from memory,
  unverified).  Step sizes lognormal.  Only while energised (duty cycle, seasonal fans).
- At humid sites a second film mechanism: moisture ingress after a Weibull onset, then a loss growing
  with the square of time since onset (metallisation corrosion; from memory, unverified).
- Electrolytic start capacitors dry out: electrolyte loss w(t) = integral of an Arrhenius rate (10 K
  doubling, the usual aluminium electrolytic rule, from memory) of an equivalent case temperature that
  rises with starts per hour; capacitance 1 - 3 % w until a knee at w = 1, then - 30 % (w-1)^1.5 (wear-out
  knee once electrolyte runs short; from memory, unverified).  Vents when the loss passes 25-35 %.
- Per-unit variation (initial value, stress, rate), duty cycles, seasonal ambient, indoor/outdoor.
- Measured value = C25 x (1 + TC (T - 25)) x noise; film TC -200..-300 ppm/K, electrolytic
  +1500 ppm/K (from memory, unverified); in-circuit C = I / (2 pi f V) at running temperature.
"""

from __future__ import annotations

import os

import numpy as np
import pandas as pd

# FLEET_SECOND_SIMULATION_SEED picks another fleet of the same physics (the figures are tracked on the default).
SEED = int(os.environ.get("FLEET_SECOND_SIMULATION_SEED", "20261204"))
N_MOTORS = 600

DAY0 = pd.Timestamp("2016-01-01")
DAY_END = pd.Timestamp("2045-12-31")  # paths run on past the readings, so late crossings have a truth
READ_END = pd.Timestamp("2026-09-30")  # the last reading: crossings are scored up to here
DAYS = pd.date_range(DAY0, DAY_END, freq="D")
ND = len(DAYS)
DOY = DAYS.day_of_year.to_numpy()

SITES = pd.DataFrame(
    [
        # code, name, tz, mean C, amplitude K, humidity factor, freq, volts, reading habit (invented climates)
        ("NVK", "Nordvik cold store", "Europe/Oslo", 5.5, 9.0, 0.6, 50, 230, "monthly"),
        ("LDN", "Lindenau packing plant", "Europe/Berlin", 10.0, 9.5, 1.0, 50, 230, "quarterly"),
        ("PSL", "Puerto Salina pumping station", "Europe/Madrid", 18.0, 7.0, 2.2, 50, 230, "four_monthly"),
        ("QDN", "Qasr Dune chiller yard", "Asia/Riyadh", 27.0, 9.5, 0.4, 60, 230, "yearly"),
    ],
    columns=["code", "name", "time_zone", "t_mean", "t_amp", "humidity", "freq", "volts", "habit"],
)
SITE_WEIGHTS = np.array([0.25, 0.30, 0.25, 0.20])
IN_CIRCUIT_SHARE = {"PSL": 0.6, "LDN": 0.2, "NVK": 0.0, "QDN": 0.3}  # film readings taken in circuit, per site

# Film parts 5-40 uF, 370/440 V, +/-5 or 6 %; electrolytic start parts with marked ranges, rated at the middle
# (common practice of the trade, no single source).
FILM = [
    ("RUN-5-370", 5, 6, 370),
    ("RUN-7.5-440", 7.5, 5, 440),
    ("RUN-10-370", 10, 6, 370),
    ("RUN-15-440", 15, 5, 440),
    ("RUN-20-370", 20, 6, 370),
    ("RUN-25-440", 25, 5, 440),
    ("RUN-30-370", 30, 5, 370),
    ("RUN-35-440", 35, 6, 440),
    ("RUN-40-370", 40, 5, 370),
]
ELEC = [
    ("START-88-106-330", 88, 106, 330),
    ("START-108-130-250", 108, 130, 250),
    ("START-161-193-250", 161, 193, 250),
    ("START-216-259-250", 216, 259, 250),
    ("START-270-324-250", 270, 324, 250),
]

# Designs: application, motor_type, load_type, poles, output_w, efficiency, power factor, run part,
# start part, duty (fraction energised), starts per hour, self-heating at the capacitor (K),
# capacitor-voltage ratio to line for run capacitor, share of fleet (invented, plausible for the trade).
DESIGNS = pd.DataFrame(
    [
        ("fan-s", "fan", "permanent_split", "fan_law", 4, 120, 0.45, 0.95, "RUN-5-370", None, 0.9, 0.5, 12, 1.55, 0.10),
        ("fan-m", "fan", "permanent_split", "fan_law", 4, 180, 0.50, 0.95, "RUN-7.5-440", None, 0.8, 0.5,
         12, 1.55, 0.12),
        ("fan-l", "fan", "permanent_split", "fan_law", 6, 370, 0.60, 0.95, "RUN-10-370", None, 0.7, 1.0, 14, 1.5, 0.12),
        ("fan-xl", "fan", "permanent_split", "fan_law", 4, 750, 0.68, 0.95, "RUN-20-370", None, 0.6, 1.0,
         15, 1.45, 0.08),
        ("pump-c", "pump", "permanent_split", "fan_law", 2, 550, 0.65, 0.95, "RUN-15-440", None, 0.5, 4.0,
         16, 1.5, 0.10),
        ("comp-p", "compressor", "permanent_split", "constant", 2, 1100, 0.72, 0.95, "RUN-30-370", None, 0.6, 6.0, 20,
         1.45, 0.08),
        ("comp-q", "compressor", "permanent_split", "constant", 2, 1300, 0.72, 0.95, "RUN-35-440", None, 0.6, 6.0, 20,
         1.45, 0.05),
        ("comp-2v", "compressor", "two_value", "constant", 2, 1500, 0.74, 0.95, "RUN-40-370", "START-161-193-250",
         0.6, 6.0, 20, 1.4, 0.08),
        ("comp-2s", "compressor", "two_value", "constant", 2, 750, 0.70, 0.95, "RUN-25-440", "START-88-106-330",
         0.6, 8.0, 18, 1.45, 0.07),
        ("conv-cs", "conveyor", "capacitor_start", "constant", 4, 750, 0.68, 0.75, None, "START-216-259-250",
         0.6, 3.0, 15, 0, 0.09),
        ("conv-xl", "conveyor", "capacitor_start", "constant", 4, 1100, 0.70, 0.75, None, "START-270-324-250",
         0.6, 2.0, 15, 0, 0.04),
        ("pump-j", "pump", "capacitor_start", "constant", 2, 550, 0.62, 0.75, None, "START-108-130-250",
         0.4, 10.0, 15, 0, 0.07),
    ],
    columns=["design", "application", "motor_type", "load_type", "poles", "output_w", "eff", "pf", "run_part",
             "start_part", "duty", "starts_h", "self_k", "vc_ratio", "share"],
).set_index("design")  # fmt: skip


def make_parts(rng) -> pd.DataFrame:
    """The parts catalogue with each part's temperature coefficient (ppm/K) and lower limit (uF)."""
    parts = []
    for code, uf, tol, volts in FILM:
        parts.append(dict(code=code, rated_uf=uf, tol_minus=tol, tol_plus=tol, rated_voltage_v=volts,
                          dielectric="film", tc_ppm=-rng.uniform(200, 300),
                          description=f"{uf} uF {volts} V film run"))  # fmt: skip
    for code, lo, hi, volts in ELEC:
        mid = (lo + hi) / 2
        tol = round((mid - lo) / mid * 100, 2)
        parts.append(dict(code=code, rated_uf=mid, tol_minus=tol, tol_plus=tol, rated_voltage_v=volts,
                          dielectric="electrolytic", tc_ppm=rng.uniform(1200, 1800),
                          description=f"{lo}-{hi} uF {volts} V start"))  # fmt: skip
    out = pd.DataFrame(parts).set_index("code")
    out["limit_uf"] = out.rated_uf * (1 - out.tol_minus / 100)
    return out


def site_temperature(site, rng) -> np.ndarray:
    """Daily outdoor temperature: a seasonal cosine (peak late July) with weather noise (AR(1), from memory)."""
    phase = 2 * np.pi * (DOY - 205) / 365.25
    noise = np.zeros(ND)
    e = rng.normal(0, 2.5, ND)
    for i in range(1, ND):
        noise[i] = 0.8 * noise[i - 1] + e[i]
    return site.t_mean + site.t_amp * np.cos(phase) + noise


def make_motors(rng, n_motors: int) -> pd.DataFrame:
    """Motors: site, design, commissioning day (65 % in the first year), outdoor or not, per-unit stress."""
    rows = []
    for _ in range(n_motors):
        s = rng.choice(len(SITES), p=SITE_WEIGHTS)
        d = rng.choice(DESIGNS.index, p=DESIGNS.share / DESIGNS.share.sum())
        site = SITES.iloc[s]
        des = DESIGNS.loc[d]
        initial = rng.random() < 0.65
        comm = (
            DAY0 + pd.Timedelta(days=int(rng.integers(0, 365)))
            if initial
            else DAY0 + pd.Timedelta(days=int(rng.integers(365, 365 * 8 + 180)))
        )
        outdoor = rng.random() < (0.5 if des.application in ("fan", "compressor") else 0.2)
        rows.append(dict(site=site.code, design=d, commissioned=comm.normalize(), outdoor=outdoor,
                         duty=float(np.clip(des.duty * rng.lognormal(0, 0.25), 0.1, 1.0)),
                         starts_h=float(des.starts_h * rng.lognormal(0, 0.4)),
                         self_k=float(des.self_k * rng.lognormal(0, 0.2)),
                         vc_ratio=float(des.vc_ratio * rng.normal(1, 0.05)) if des.vc_ratio else 0.0,
                         line_v=float(site.volts * rng.normal(1.0, 0.02))))  # fmt: skip
    m = pd.DataFrame(rows)
    m["asset_tag"] = [f"{r.site}-{i + 1:04d}" for i, r in m.iterrows()]
    return m


def motor_case_temperature(motor, t_out):
    """Daily ambient and capacitor case temperature while energised, and the on-fraction per day."""
    if motor.outdoor:
        amb = t_out + 4 * np.clip(np.cos(2 * np.pi * (DOY - 190) / 365.25), 0, None)  # sun on the box (from memory)
    else:
        amb = 19 + 0.35 * (t_out - 12)  # plant room (from memory, unverified)
    on = np.full(ND, motor.duty)
    des = DESIGNS.loc[motor.design]
    if des.application == "fan":  # cooling fans run harder in warm weather
        on = np.clip(motor.duty * (0.4 + 0.6 * (t_out - t_out.min()) / (np.ptp(t_out) + 1e-9)) * 1.4, 0.05, 1)
    return amb, amb + motor.self_k, on


def film_path(c0, rated_v, vcap, tcase, on, t_fit, hum, rng, variant="stepped"):
    """True 25 C capacitance per day from fitting: clearing steps + (humid sites) corrosion."""
    n = ND - t_fit
    tc = tcase[t_fit:]
    # events per energised day at 60 C and rated voltage: from memory, tuned to give 5 % in 3-15 years
    lam_ref = (0.05 if variant != "smooth" else 0.25) * rng.lognormal(0, 0.5)
    lam = lam_ref * 2 ** ((tc - 60) / 10) * (vcap / rated_v) ** 8 * on[t_fit:]
    cum = np.concatenate([[0.0], np.cumsum(lam)])
    mean_step = 0.0010 * rng.lognormal(0, 0.3)  # share of c0 per clearing event (from memory, unverified)
    loss = np.zeros(n)
    s, lost = 0.0, 0.0
    event_days, sizes = [], []
    while True:
        s += rng.exponential() / (np.exp(lost / 0.03) if variant != "smooth" else 1.0)
        k = np.searchsorted(cum, s) - 1
        if k >= n or lost > 0.5:
            break
        step = mean_step * rng.lognormal(-0.5, 1.0)
        lost += step
        event_days.append(k)
        sizes.append(step)
    if event_days:
        np.add.at(loss, np.array(event_days), np.array(sizes))
        loss = np.cumsum(loss)
    # moisture ingress: Weibull onset (years), then quadratic loss (from memory, unverified)
    onset_y = 9.0 / hum * rng.weibull(2.5)
    tyears = np.arange(n) / 365.25
    corr = (variant != "smooth") * 0.004 * rng.lognormal(0, 0.5) * hum * np.clip(tyears - onset_y, 0, None) ** 2
    return c0 * (1 - loss - corr)


def elec_path(c0, tcase_amb, starts_h, on, t_fit, rng, variant="stepped"):
    """True 25 C capacitance per day from fitting: Arrhenius dry-out with a wear-out knee."""
    # equivalent temperature: motor-box ambient plus start heating (from memory, unverified)
    teq = tcase_amb[t_fit:] + 4 + 1.2 * starts_h * on[t_fit:]
    r = (1 / (2.8 * 365.25)) * rng.lognormal(0, 0.35) * 2 ** ((teq - 40) / 10)  # w = 1 after ~6 years at 40 C
    w = np.cumsum(r)
    loss = 0.03 * w + 0.30 * np.clip(w - 1, 0, None) ** 1.5
    if variant == "smooth":
        loss = 0.08 * w
    return c0 * (1 - loss)


def reading_schedule(site, motor, rng) -> list[pd.Timestamp]:
    """Reading times (local wall clock) of one motor from its commissioning to READ_END, by the site's habit."""
    start = max(
        motor.commissioned + pd.Timedelta(days=20),
        pd.Timestamp("2017-01-01") if site.code != "QDN" else pd.Timestamp("2018-01-01"),
    )
    times = []
    if site.habit == "monthly":
        rounds = pd.date_range("2017-01-01", READ_END, freq="MS") + pd.Timedelta(days=2)
        keep = rng.random(len(rounds)) > 0.05
        rounds = rounds[keep]
        miss = 0.12
        jitter = 6
    elif site.habit == "quarterly":
        rounds = pd.DatetimeIndex(
            [
                r + pd.Timedelta(days=int(rng.integers(-10, 30)))
                for r in pd.date_range("2017-01-01", READ_END, freq="QS")
            ]
        )
        miss = 0.15
        jitter = 10
    elif site.habit == "four_monthly":
        q = pd.date_range("2017-01-01", "2019-12-31", freq="QS")
        f = pd.date_range("2020-02-01", READ_END, freq="4MS")
        rounds = q.append(f)
        miss = 0.10
        jitter = 12
    else:  # yearly at the winter shutdown, a mid-year round in some years
        rounds = []
        for y in range(2018, 2027):
            rounds.append(pd.Timestamp(f"{y}-01-15"))
            if rng.random() < 0.5:
                rounds.append(pd.Timestamp(f"{y}-06-10"))
        rounds = pd.DatetimeIndex(rounds)
        miss = 0.10
        jitter = 14
    for r in rounds:
        if rng.random() < miss:
            continue
        d = r + pd.Timedelta(days=int(rng.integers(0, jitter)))
        while d.day_of_week >= 5 or (site.code == "QDN" and d.day_of_week == 4):  # working days; Friday off at QDN
            d += pd.Timedelta(days=1)
        if d < start or d > READ_END:
            continue
        t = d + pd.Timedelta(minutes=int(rng.integers(7 * 60, 15 * 60)))
        times.append(t)
    return sorted(set(times))


def _reading(rng, parts, motor, site, part, method, c_true, amb_k, tcase_k, on_k) -> dict:
    """One recorded reading of a capacitor whose true 25 C capacitance is c_true, with its faults."""
    tc = part.tc_ppm * 1e-6
    rec = dict(method=method, true_c25=c_true)
    if method == "meter":
        # motor locked out: capacitor near ambient, still warm if it had just run
        t_cap = amb_k + rng.uniform(0, 0.6) * motor.self_k * (rng.random() < on_k)
        noise = 0.004 if part.dielectric == "film" else 0.012  # meter spread (from memory, unverified)
        c_meas = c_true * (1 + tc * (t_cap - 25)) * (1 + rng.normal(0, noise))
        rec["capacitance_uf"] = round(c_meas, 2 if c_meas < 20 else 1)
    else:
        t_cap = tcase_k
        c_now = c_true * (1 + tc * (t_cap - 25))
        v_line = motor.line_v * rng.normal(1, 0.015)
        v_cap = v_line * motor.vc_ratio * (part.rated_uf / c_now) ** 0.5  # a little higher as C falls (from memory)
        f = site.freq * rng.normal(1, 0.001)
        i_cap = 2 * np.pi * f * c_now * 1e-6 * v_cap  # I = 2 pi f C V
        i_read = i_cap * (1 + rng.normal(0, 0.012))
        v_read = v_cap * (1 + rng.normal(0, 0.006))
        rec.update(
            capacitor_current_a=round(i_read, 3), capacitor_voltage_v=round(v_read), line_voltage_v=round(v_line)
        )
        c_meas = i_read / (2 * np.pi * site.freq * 1e-6 * round(v_read))
    rec["measured_c"] = c_meas
    if rng.random() < 0.7:
        rec["case_temperature_c"] = round(t_cap + rng.normal(0, 1.5), 1)  # IR thermometer spread
    if rng.random() < 0.5:
        rec["ambient_temperature_c"] = round(amb_k + rng.normal(0, 1.0), 1)
    # recording faults (rates invented, about 1 % in all)
    u = rng.random()
    if method == "meter" and u < 0.003:
        rec["capacitance_uf"] = round(rec["capacitance_uf"] * 1000, 0)  # typed in nF
        rec["fault"] = "nF"
    elif method == "meter" and u < 0.006:
        rec["capacitance_uf"] = round(rec["capacitance_uf"] / 10, 3)  # decimal point slip
        rec["fault"] = "tenth"
    elif method == "meter" and u < 0.010:
        other = parts.sample(1, random_state=int(rng.integers(1 << 30))).iloc[0]
        rec["capacitance_uf"] = round(other.rated_uf * rng.normal(1.0, 0.02), 1)  # wrong capacitor
        rec["fault"] = "stray"
    elif method == "in_circuit" and u < 0.008:
        rec["capacitor_voltage_v"] = rec["line_voltage_v"]  # line voltage read across the capacitor
        rec["fault"] = "line_v"
    return rec


def simulate(seed: int = SEED, n_motors: int = N_MOTORS, variant: str = "stepped") -> dict:
    """The world: sites, parts, designs, motors, capacitors (with truth_cross) and readings as recorded.

    variant "smooth" drops the self-excitation, the corrosion and the knee (a check of the scoring only).
    """
    rng = np.random.default_rng(seed)
    parts = make_parts(rng)
    motors = make_motors(rng, n_motors)
    t_out = {s.code: site_temperature(s, rng) for s in SITES.itertuples()}
    caps, reads = [], []
    cap_id = 0
    for _, motor in motors.iterrows():
        site = SITES[SITES.code == motor.site].iloc[0]
        amb, tcase, on = motor_case_temperature(motor, t_out[motor.site])
        des = DESIGNS.loc[motor.design]
        sched = reading_schedule(site, motor, rng)
        for role, part_code in (("run", des.run_part), ("start", des.start_part)):
            if not isinstance(part_code, str):
                continue
            part = parts.loc[part_code]
            t_fit = int((motor.commissioned - DAY0).days)
            while t_fit < ND - 1:
                # initial value: a new part sits above its rating, within its tolerance (from memory, unverified)
                if part.dielectric == "film":
                    c0 = part.rated_uf * (1 + np.clip(rng.normal(0.012, 0.015), -0.03, part.tol_plus / 100 - 0.005))
                    vcap = motor.line_v * motor.vc_ratio * rng.normal(1, 0.03)
                    path = film_path(c0, part.rated_voltage_v, vcap, tcase, on, t_fit, site.humidity, rng, variant)
                    vent_at = None
                    h_fail = 0.004  # open-circuit failures per year, film (from memory, unverified)
                else:
                    c0 = part.rated_uf * (1 + np.clip(rng.normal(0.03, 0.03), -0.05, part.tol_plus / 100 - 0.01))
                    path = elec_path(c0, amb, motor.starts_h, on, t_fit, rng, variant)
                    below = np.nonzero(path < c0 * (1 - rng.uniform(0.25, 0.35)))[0]  # vents (from memory)
                    vent_at = t_fit + below[0] if len(below) else None
                    h_fail = 0.008 * (1 + motor.starts_h / 10)  # start-switch and overstart failures per year
                full = np.full(ND, np.nan)
                full[t_fit:] = path
                lim = part.limit_uf
                cross = np.nonzero(full < lim)[0]
                truth = DAYS[cross[0]] if len(cross) else pd.NaT
                fail_day = t_fit + int(rng.exponential(365.25 / h_fail))
                if vent_at is not None:
                    fail_day = min(fail_day, vent_at)
                end, reason = None, None
                cap_reads = []
                for t in sched:
                    k = int((t.normalize() - DAY0).days)
                    if k < t_fit or k >= min(fail_day, ND):
                        continue
                    if end is not None and k > end:
                        break
                    method = "meter"
                    if part.dielectric == "film" and rng.random() < IN_CIRCUIT_SHARE[motor.site]:
                        method = "in_circuit"
                    rec = dict(cap=cap_id, asset_tag=motor.asset_tag, role=role, taken_at=t, site=motor.site)
                    rec.update(_reading(rng, parts, motor, site, part, method, full[k], amb[k], tcase[k], on[k]))
                    cap_reads.append(rec)
                    if end is None and rec["measured_c"] < lim:  # technician sees it below its marked limit
                        end = k + int(rng.integers(1, 22))  # changed 1-21 days later
                        reason = "planned"
                if (end is None or fail_day < end) and fail_day < ND:
                    end, reason = fail_day, "failed"
                if end is not None and end >= ND:
                    end, reason = None, None
                caps.append(dict(cap=cap_id, asset_tag=motor.asset_tag, site=motor.site, role=role, part=part_code,
                                 dielectric=part.dielectric, fitted=DAYS[t_fit],
                                 removed=DAYS[end] if end is not None else pd.NaT, reason=reason,
                                 truth_cross=truth, c0=c0, limit=lim))  # fmt: skip
                reads.extend(cap_reads)
                cap_id += 1
                if end is None:
                    break
                t_fit = end
    return dict(sites=SITES, parts=parts, designs=DESIGNS, motors=motors, caps=pd.DataFrame(caps),
                readings=pd.DataFrame(reads))  # fmt: skip
