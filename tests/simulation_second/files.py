"""The five import files (README "Import files") of the second simulated fleet as known on a cut-off day.

Only what was known before the cut-off goes in: motors commissioned before it, capacitors fitted before it
(a removal on or after it is not yet known), readings taken more than a day before it (local times; a day's
margin for the sites' time zones). The capacitors in service at the cut-off go in the register, with the
start capacitor's own fitting day (`start_fitted_on`) where a two-value motor's capacitors were changed apart;
every earlier one goes in the history.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from fleet.imports.columns import READING_COLUMNS

KINDS = ("sites", "parts", "register", "history", "readings")


def _iso(days: pd.Series) -> np.ndarray:
    """ISO dates, empty where there is none."""
    return days.dt.strftime("%Y-%m-%d").fillna("").to_numpy()


def cut(world: dict, cutoff) -> dict[str, pd.DataFrame]:
    """The import files as known on the cut-off day, as DataFrames keyed by KINDS."""
    cut_day = pd.Timestamp(cutoff)
    sites, parts, designs, motors, caps, reads = (
        world[k] for k in ("sites", "parts", "designs", "motors", "caps", "readings")
    )
    out = {"sites": sites[["code", "name", "time_zone"]].copy()}

    p = parts.reset_index()
    film = p.dielectric == "film"
    out["parts"] = pd.DataFrame(
        dict(
            code=p.code,
            rated_uf=p.rated_uf.round(2),
            tolerance_minus_pct=p.tol_minus,
            tolerance_plus_pct=p.tol_plus,
            rated_voltage_v=p.rated_voltage_v,
            dielectric=p.dielectric,
            frequency_hz=50,
            description=p.description,
            class_of_operation=np.where(film, "B", ""),
            duty=np.where(film, "continuous", "20 starts/h of 3 s"),
            max_case_temperature_c=np.where(film, 70, 65),
            unit_cost=np.where(film, 9.5, 14.0),
        )
    )

    m = motors[motors.commissioned < cut_day]
    site_by = sites.set_index("code")
    de = designs.loc[m.design]
    freq = site_by.loc[m.site, "freq"].to_numpy()
    volts = site_by.loc[m.site, "volts"].to_numpy()
    poles = de.poles.to_numpy()
    sync_rpm = 120 * freq / poles
    slip = np.where(poles == 2, 0.05, 0.06)  # typical full-load slip of small motors (from memory, unverified)
    known = caps[caps.fitted < cut_day].copy()
    known.loc[known.removed >= cut_day, ["removed", "reason"]] = [pd.NaT, None]
    last = known.sort_values("fitted").groupby(["asset_tag", "role"]).tail(1)
    run_fitted = last[last.role == "run"].set_index("asset_tag").fitted.reindex(m.asset_tag)
    start_fitted = last[last.role == "start"].set_index("asset_tag").fitted.reindex(m.asset_tag)
    fitted = run_fitted.combine_first(start_fitted)  # the run capacitor's day, else the start's
    start_apart = start_fitted.where(start_fitted.notna() & (start_fitted != fitted))
    out["register"] = pd.DataFrame(
        dict(
            asset_tag=m.asset_tag.to_numpy(),
            site_code=m.site.to_numpy(),
            location=np.where(m.outdoor, "roof / yard", "plant room"),
            application=de.application.to_numpy(),
            motor_type=de.motor_type.to_numpy(),
            load_type=de.load_type.to_numpy(),
            rated_voltage_v=volts,
            frequency_hz=freq,
            poles=poles,
            output_w=de.output_w.to_numpy(),
            full_load_current_a=np.round(de.output_w.to_numpy() / (volts * de.eff.to_numpy() * de.pf.to_numpy()), 2),
            rated_speed_rpm=np.round(sync_rpm * (1 - slip)).astype(int),
            commissioned_on=_iso(m.commissioned),
            run_part_code=de.run_part.fillna("").to_numpy(),
            start_part_code=de.start_part.fillna("").to_numpy(),
            fitted_on=_iso(fitted),
            start_fitted_on=_iso(start_apart),
        )
    )

    hist = known[~known.cap.isin(last.cap)]
    out["history"] = pd.DataFrame(
        dict(
            asset_tag=hist.asset_tag,
            role=hist.role,
            part_code=hist.part,
            fitted_on=_iso(hist.fitted),
            removed_on=_iso(hist.removed),
            removal_reason=hist.reason.fillna(""),
            serial=[f"SN{c:06d}" for c in hist.cap],
        )
    )

    r = reads[reads.taken_at < cut_day - pd.Timedelta(days=1)].copy()
    r["taken_at"] = r.taken_at.dt.strftime("%Y-%m-%d %H:%M")
    out["readings"] = r[[c for c in READING_COLUMNS if c in r.columns]]  # the import's headings, in its order
    return out


def write_files(files: dict[str, pd.DataFrame], directory) -> dict[str, Path]:
    """Write each file as CSV in the directory; the paths keyed by KINDS."""
    paths = {}
    for kind in KINDS:
        paths[kind] = Path(directory) / f"{kind}.csv"
        files[kind].to_csv(paths[kind], index=False)
    return paths
