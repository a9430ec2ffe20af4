"""Import checks that need the register, and the writes: each kind's rows checked against
the database (sites, parts, motors, fitted capacitors, readings already stored) and inserted in
bulk inside the caller's transaction. Parsing and column rules are in fleet/imports/."""

from __future__ import annotations

import datetime as dt
import re
from dataclasses import dataclass
from decimal import Decimal

import numpy as np
import pandas as pd
from django.conf import settings
from django.utils import timezone

from fleet.engineering.planning import PlanningSettings, day_off_problems
from fleet.engineering.rules import (
    AFTER_REMOVAL,
    ELECTROLYTIC_RUN_WORDS,
    MSG_NOT_A_NUMBER,
    MSG_NOT_FINITE,
    MSG_SEPARATORS,
    MSG_WITH_UNIT,
    UNDER_VOLTAGE_WORDS,
    ReadsOtherFields,
    _messages,
    commissioning_problems,
    fitting_problems,
    motor_problems,
    neighbours_line,
    parse_numbers,
    part_problems,
    service_date_problems,
    site_time_zone,
    trend_slope_uf_per_hour,
    trend_value_held_to,
)
from fleet.engineering.rules import check_readings as reading_rules
from fleet.imports.columns import (
    CHUNK_ROWS,
    DAY_OFF_REQUIRED,
    HISTORY_REQUIRED,
    OPEN_END,
    PART_NUMBERS,
    PART_REQUIRED,
    READING_REQUIRED,
    REGISTER_COLUMNS,
    REGISTER_NUMBERS,
    REGISTER_REQUIRED,
    SITE_REQUIRED,
    CheckResult,
    _numbers,
    _Problems,
    _refuse_overlaps,
    _result,
    finite_numbers,
    local_days,
    parse_dates,
    parse_times,
    reading_keys,
    repeated_in_file,
    shown,
    yes_or_no,
)
from fleet.models import (
    CODE_CHARACTERS,
    CODE_PATTERN,
    Assessment,
    CapacitorPart,
    FittedCapacitor,
    Motor,
    Reading,
    Site,
    SiteDayOff,
)
from fleet.roles import scope_to_user, visible_site_ids
from fleet.services.bulk import insert_frame
from fleet.services.readings import hold_reading_saves

READING_NUMBERS = list(Reading.MEASURED_FIELDS)
# The register's numbers in the order `rules.motor_problems` takes them.
MOTOR_NUMBERS = ["rated_voltage_v", "frequency_hz", "poles", "rated_speed_rpm", "full_load_current_a", "output_w"]


def outside_sites(frame: pd.DataFrame, user, column: str) -> _Problems:
    """Rows for a motor (by `asset_tag`) or a site (by `site`) outside the sites `user` works at.

    A user limited to some sites imports only there; `user=None` (a command) and unlimited users
    are never refused here.
    """
    problems = _Problems(frame)
    if not column or user is None or visible_site_ids(user) is None:
        return problems
    mine = set(scope_to_user(Site.objects.all(), user).values_list("code", flat=True))
    if column == "site":
        codes = frame["site"]
        messages = codes.map("site {}, which you do not work at".format).to_numpy(dtype=object)
        problems.add(codes.ne("") & ~codes.str.upper().isin({code.upper() for code in mine}), "site", messages)
        return problems
    tags = frame[column].str.upper()
    wanted = sorted(t for t in set(tags) - {""} if "\x00" not in t)
    site_of = {}
    for start in range(0, len(wanted), 5000):
        site_of |= {
            tag.upper(): code
            for tag, code in Motor.objects.filter(asset_tag__in=wanted[start : start + 5000])
            .exclude(site__code__in=mine)
            .values_list("asset_tag", "site__code")
        }
    if not site_of:
        return problems
    elsewhere = tags.map(site_of).astype(object)
    messages = (
        "motor " + frame[column] + " is at site " + elsewhere.fillna("") + ", which you do not work at"
    ).to_numpy(dtype=object)
    problems.add(elsewhere.notna().to_numpy(), column, messages)
    return problems


FITTED_COLUMNS = {
    "id": "fitted_capacitor_id",
    "motor__asset_tag": "tag",
    "role": "role",
    "fitted_on": "fitted_on",
    "removed_on": "removed_on",
    "part__rated_uf": "rated_uf",
    "part__max_case_temperature_c": "max_case_c",
    "part__tolerance_plus_pct": "plus_pct",
    "part__tolerance_minus_pct": "minus_pct",
    "motor__frequency_hz": "frequency_hz",
    "motor__rated_voltage_v": "voltage_v",
    "motor__full_load_current_a": "full_load_a",
    "motor__site__time_zone": "time_zone",
}


def _fitted_of_tags(tags: np.ndarray) -> pd.DataFrame:
    """Every capacitor ever fitted to the motors named (upper-case tags), one query; `position_id` names
    its motor position (motor and role) by the position's first capacitor's id, so that a reading has one
    key for its position whichever of its capacitors holds it."""
    return _fitted_where(motor__asset_tag__any_of=tags)


def _fitted_where(**lookup) -> pd.DataFrame:
    """Every capacitor ever fitted to the motors `lookup` selects, as `_fitted_of_tags` gives them."""
    rows = FittedCapacitor.objects.filter(**lookup).values_list(*FITTED_COLUMNS)
    fitted = pd.DataFrame.from_records(list(rows), columns=list(FITTED_COLUMNS.values()))
    fitted["tag"] = fitted["tag"].astype(str).str.upper()
    fitted["role"] = fitted["role"].astype(str)
    fitted["fitted_on"] = pd.to_datetime(fitted["fitted_on"]).astype("datetime64[s]")
    fitted["removed_on"] = pd.to_datetime(fitted["removed_on"]).astype("datetime64[s]")
    fitted["position_id"] = fitted.groupby(["tag", "role"])["fitted_capacitor_id"].transform("min")
    return fitted


def _fitted_on_the_day(
    tag: pd.Series, role: pd.Series, day: np.ndarray, fitted: pd.DataFrame, named: np.ndarray
) -> pd.DataFrame:
    """For each row, the capacitor in that role on that motor that day (`day`: the site's calendar day), NaN if none.

    On a replacement day two capacitors held the position; the reading is the one removed that day's
    (its window runs to the end of its removal day) unless the row names the new one. A row that names
    its capacitor (`named`: an id of that position, -1 for none) gets that one whatever the day: the
    rulebook then holds the day to its fitting and removal dates."""
    rows = pd.DataFrame(
        {"i": np.arange(len(tag)), "tag": tag.astype(str).array, "role": role.astype(str).array, "day": day}
    )
    candidates = rows.merge(fitted, on=["tag", "role"], how="inner")  # text keys both sides: merged without objects
    in_window = (candidates["fitted_on"] <= candidates["day"]) & (
        candidates["removed_on"].isna() | (candidates["day"] <= candidates["removed_on"])
    )
    wanted = named[candidates["i"].to_numpy()]
    chosen = np.where(wanted >= 0, candidates["fitted_capacitor_id"].to_numpy() == wanted, in_window.to_numpy(bool))
    match = candidates[chosen].sort_values(["i", "fitted_on", "fitted_capacitor_id"]).drop_duplicates("i", keep="first")
    return match.set_index("i").reindex(np.arange(len(tag)))


def _named_capacitors(
    chunk: pd.DataFrame, tag: pd.Series, role: pd.Series, fitted: pd.DataFrame, problems
) -> np.ndarray:
    """The capacitor each row names in `fitted_capacitor_id` (the readings export's column; -1 where the cell
    is empty), refused at that field unless it is a whole number naming a capacitor of the row's motor and role."""
    ids, unread = _file_ids(
        chunk["fitted_capacitor_id"], "the fitted capacitor's id from the readings export, or empty"
    )
    if not (ids >= 0).any() and not (unread != "").any():  # the usual file: no such column
        return ids
    problems.add(unread != "", "fitted_capacitor_id", unread)
    held = pd.MultiIndex.from_frame(fitted[["fitted_capacitor_id", "tag", "role"]].astype({"tag": object}))
    known = pd.MultiIndex.from_arrays([ids, tag.to_numpy(object), role.to_numpy(object)]).isin(held)
    elsewhere = (ids >= 0) & ~known
    if elsewhere.any():
        problems.add(
            elsewhere,
            "fitted_capacitor_id",
            (
                "fitted capacitor " + pd.Series(ids).astype(str) + " has never been the " + role
                + " capacitor of motor " + chunk["asset_tag"].reset_index(drop=True)
                + ": give one that was, or leave it empty"
            ).to_numpy(object),
        )  # fmt: skip
    return np.where(elsewhere, -1, ids)


def _named_by_fitting_day(
    chunk: pd.DataFrame, tag: pd.Series, role: pd.Series, fitted: pd.DataFrame, problems, named: np.ndarray
) -> np.ndarray:
    """`named` (`_named_capacitors`) with the capacitor each row names by its fitting day (`capacitor_fitted_on`,
    the readings export's column): the one of the row's motor and role fitted that day. Ids are each database's
    own; the fitting day is not: a round-trip audit moved a replacement day's reading, exported with its id
    emptied, onto the capacitor removed that day, and one kept with its id onto whichever capacitor had that id
    in the new database. Refused at the field where no capacitor was fitted that day, or where the row's id names
    a capacitor fitted on another day."""
    texts = chunk["capacitor_fitted_on"].reset_index(drop=True).str.strip()
    given = texts.ne("").to_numpy()
    if not given.any():  # the usual file: no such column
        return named
    days = parse_dates(texts)  # the one reading of a date the imports have
    unreadable = given & days.isna().to_numpy()
    problems.add(unreadable, "capacitor_fitted_on", "not a date (use 2026-03-14), or empty")
    fitted_days = pd.to_datetime(fitted["fitted_on"]).to_numpy("datetime64[ns]")
    by_day = pd.Series(
        fitted["fitted_capacitor_id"].to_numpy(np.int64),
        index=pd.MultiIndex.from_arrays([fitted["tag"].astype(object), fitted["role"].astype(object), fitted_days]),
    )
    by_day = by_day[~by_day.index.duplicated(keep="last")]
    asked = pd.MultiIndex.from_arrays([tag.to_numpy(object), role.to_numpy(object), days.to_numpy("datetime64[ns]")])
    found = by_day.reindex(asked).to_numpy(float)
    read = given & ~unreadable
    missing = read & np.isnan(found)
    if missing.any():
        problems.add(
            missing,
            "capacitor_fitted_on",
            (
                "no " + role.reset_index(drop=True) + " capacitor of motor "
                + chunk["asset_tag"].reset_index(drop=True) + " was fitted on " + texts
                + ": give the day it was fitted, or leave it empty"
            ).to_numpy(object),
        )  # fmt: skip
    other = read & ~missing & (named >= 0) & (named != np.nan_to_num(found, nan=-1))
    if other.any():
        fitted_on_of = pd.Series(fitted_days, index=fitted["fitted_capacitor_id"].to_numpy(np.int64))
        named_day = pd.Series(fitted_on_of.reindex(named).to_numpy()).dt.strftime("%Y-%m-%d")
        problems.add(
            other,
            "fitted_capacitor_id",
            (
                "fitted capacitor " + pd.Series(named).astype(str) + " was fitted on " + named_day
                + ", the row's capacitor_fitted_on says " + texts
                + ": ids are each installation's own; empty this column when moving readings to another one"
            ).to_numpy(object),
        )  # fmt: skip
    return np.where(read & ~missing & (named < 0), np.nan_to_num(found, nan=-1), named).astype(np.int64)


def _trend_values_held_to(fitted_capacitor_ids: pd.Series, taken_utc: np.ndarray) -> np.ndarray:
    """Per row, the trend value the rulebook holds the reading to, from the current assessments of the
    capacitors the rows resolved to (NaN: none), as the reading form reads it (`rules.trend_value_held_to`):
    one query for the chunk."""
    given = fitted_capacitor_ids.to_numpy(float)
    ids = np.where(np.isfinite(given), given, -1).astype(np.int64)
    wanted = np.unique(ids[ids >= 0])
    current = (
        Assessment.objects.filter(is_current=True, fitted_capacitor_id__any_of=wanted)
        .order_by()
        .values_list(
            "fitted_capacitor_id",
            "capacitance_now_uf",
            "fitted_through",
            "slope_pct_per_1000h",
            "stress_rate",
            "fitted_capacitor__part__rated_uf",
        )
    )
    columns = ["fitted_capacitor_id", "capacitance_now_uf", "fitted_through", "slope", "stress_rate", "rated_uf"]
    stored = pd.DataFrame.from_records(list(current) if len(wanted) else [], columns=columns)
    of_row = stored.set_index("fitted_capacitor_id").reindex(ids)
    through = pd.to_datetime(of_row["fitted_through"], utc=True).dt.tz_localize(None)
    slope = trend_slope_uf_per_hour(
        of_row["slope"].to_numpy(float), of_row["stress_rate"].to_numpy(float), of_row["rated_uf"].to_numpy(float)
    )
    return trend_value_held_to(
        of_row["capacitance_now_uf"].to_numpy(float), through.to_numpy("datetime64[s]"), taken_utc, slope
    )


# What the rulebook says of a cell on its own, named on a row even where the row has no capacitor to judge it by.
UNREADABLE_WORDS = (MSG_NOT_A_NUMBER, MSG_NOT_FINITE, MSG_SEPARATORS, MSG_WITH_UNIT)
CELL_ALONE_FIELDS = ("method", "condition", "notes")


def check_readings(frame: pd.DataFrame, *, on_progress=None, default_tz: str = "UTC") -> CheckResult:
    """Validate mapped reading rows; resolve each to the capacitor fitted at the time.

    Vectorised over the whole file (chunks of CHUNK_ROWS for the progress bar), with the
    rulebook the form and the API use. A time without an offset is in the time zone of the
    motor's site (`default_tz` for a tag not in the register, whose row is refused anyway).
    """
    upper_tags = frame["asset_tag"].str.upper()
    # A NUL cannot reach PostgreSQL, not even in a lookup: such a tag is simply unknown.
    wanted = pd.unique(upper_tags[upper_tags.ne("") & ~upper_tags.str.contains("\x00", regex=False)].to_numpy(object))
    fitted = _fitted_of_tags(np.asarray(wanted, dtype=object))
    zone_of_tag = fitted.drop_duplicates("tag").set_index("tag")["time_zone"]
    first_fitted = fitted.groupby(["tag", "role"])["fitted_on"].min()
    now = np.datetime64(timezone.now().replace(tzinfo=None), "s")
    starts = range(0, len(frame), CHUNK_ROWS)

    def progress(passes_done: int, start: int) -> None:
        """Two passes over the file: placing its rows, then judging them; each counts for half its rows."""
        if on_progress:
            on_progress((passes_done * len(frame) + min(start + CHUNK_ROWS, len(frame))) // 2)

    placed = []
    for start in starts:
        placed.append(
            _place_readings(
                frame.iloc[start : start + CHUNK_ROWS].reset_index(drop=True),
                upper_tags.iloc[start : start + CHUNK_ROWS].reset_index(drop=True),
                zone_of_tag,
                fitted,
                first_fitted,
                default_tz,
            )
        )
        progress(0, start)
    links = _corrections_in_file(frame, _placed_capacitors(placed))
    # A reading without a stored trend is held to the line between its capacitor's readings just before and
    # after it in the whole file, not in its part: a history sorted by date has a capacitor's in every part. A
    # reading corrected in the file is no neighbour: it was put right because it was wrong.
    lines = _neighbours_in_file(placed, corrected=links.corrected_by >= 0)
    good_parts, asked_parts, errors = [], [], []
    for start, part in zip(starts, placed, strict=True):
        between, before_uf, after_uf = (values[start : start + len(part.chunk)] for values in lines)
        chunk, problems, zones, match, confirmed = part.chunk, part.problems, part.zones, part.match, part.confirmed
        here = slice(start, start + len(chunk))
        for name, messages in (("id", links.id_problems[here]), ("supersedes", links.supersedes_problems[here])):
            problems.add(messages != "", name, messages, of_cell=True)
        # A reading corrected by another row is kept as it was typed and never judged again: nothing asks to
        # confirm it (the trend does not use it), and its own confirmed column is what is stored.
        judged_confirmed = confirmed | (links.corrected_by[here] >= 0)
        taken, taken_utc, taken_on = part.taken, part.taken_utc, part.taken_on
        from_file = np.isnan(part.predicted) & np.isfinite(between)
        predicted = np.where(from_file, between, part.predicted)
        # Every rule of a reading, from the one rulebook the form and the API use.
        result = reading_rules(
            {name: chunk[name] for name in READING_NUMBERS},
            method=chunk["method"],
            condition=chunk["condition"],
            notes=chunk["notes"],
            rated_uf=match["rated_uf"].to_numpy(float),
            frequency_hz=match["frequency_hz"].to_numpy(float),
            max_case_temperature_c=match["max_case_c"].to_numpy(float),
            tolerance_plus_pct=match["plus_pct"].to_numpy(float),
            tolerance_minus_pct=match["minus_pct"].to_numpy(float),
            motor_voltage_v=match["voltage_v"].to_numpy(float),
            full_load_current_a=match["full_load_a"].to_numpy(float),
            fitted_on=pd.to_datetime(match["fitted_on"]).to_numpy("datetime64[D]"),
            removed_on=pd.to_datetime(match["removed_on"]).to_numpy("datetime64[D]"),
            taken_at=taken_utc,
            taken_on=taken_on,
            time_zone=zones.fillna(default_tz).to_numpy(object),
            now=now,
            predicted_uf=predicted,
            confirmed=judged_confirmed,
        )
        _point_past_a_removal(result.errors, chunk)
        said = result.confirm.get("capacitance_uf")
        # Say which readings it was held to, on the rows asked to confirm only: formatting the file's every
        # neighbour pair cost 0.26 s of a 50,000-row check's 1.3 s (measured 2026-12-05).
        held = from_file & (said != "") if said is not None else np.zeros(len(chunk), bool)
        if held.any():
            neighbours = _messages(
                held,
                "the readings just before and after it in this file ({b:g} and {a:g} µF; between them ",
                b=before_uf,
                a=after_uf,
            )
            said[held] = [
                text.replace("this capacitor's trend (", words, 1)
                for text, words in zip(said[held], neighbours[held], strict=True)
            ]
        # The rulebook names each field's problem, as the form shows them all at once; on a row not placed on a
        # capacitor (an unknown tag, no capacitor that day) only what rests on the cell alone is named (a cell that
        # is no number, a method or condition not among the choices, notes): any other words would rest on a
        # rating or a date the row does not have.
        placed = ~problems.bad
        for name, messages in result.errors.items():
            of_the_cell_alone = np.isin(messages, UNREADABLE_WORDS) | (name in CELL_ALONE_FIELDS)
            problems.add((placed | of_the_cell_alone) & (messages != ""), name, messages, of_cell=True)
        asked = np.zeros(len(chunk), bool)
        for messages in result.confirm.values():
            asked |= messages != ""
        # Rows asked to confirm only: one stored already as it is (an export imported again, a reading saved
        # unconfirmed before a rule asked) is already imported, not refused (held to what is stored below).
        if (asked & ~problems.bad).any():
            asked_parts.append(_checked_rows(chunk, match, taken, result, confirmed, asked & ~problems.bad))
        for name, messages in result.confirm.items():
            problems.add(
                placed & (messages != ""),
                name,
                messages + "; the import cannot confirm it unless the row's confirmed column says yes",
                of_cell=True,
            )
        good_parts.append(_checked_rows(chunk, match, taken, result, confirmed, ~problems.bad))
        errors += problems.items
        progress(1, start)
    good = (
        pd.concat(good_parts, ignore_index=True)
        if good_parts
        else pd.DataFrame(columns=["row", "import_key", "position_key"])
    )
    repeated = good["position_key"].duplicated(keep="first").to_numpy()
    if repeated.any():
        first_row = good[~repeated].set_index("position_key")["row"]
        later = good[repeated]
        errors += [
            (int(row), "taken_at", f"the same reading as row {first}")
            for row, first in zip(later["row"], first_row.reindex(later["position_key"]).to_numpy(), strict=True)
        ]
        good = good[~repeated].reset_index(drop=True)
    good, against_stored, duplicates = _against_stored(good, fitted)
    errors += against_stored
    if asked_parts:
        asked = pd.concat(asked_parts, ignore_index=True)
        still_new, differs, _ = _against_stored(asked, fitted)
        stored_as_it_is = set(asked["row"]) - set(still_new["row"]) - {row for row, _, _ in differs}
        errors = [error for error in errors if error[0] not in stored_as_it_is]
        duplicates += len(stored_as_it_is)
    # The same capacitor, time and method with another value, neither stored yet: a row edited and added again,
    # never two readings (a reading and its correction, exported and imported again, are both stored already).
    moment = good.reindex(columns=["fitted_capacitor_id", "taken_at", "method"])  # no rows left: no columns either
    corrected = links.corrected_rows(good["row"])
    # Neither row is kept: the file does not say which value is right (with good rows only the first was imported).
    clash = moment[~corrected].duplicated(keep=False).reindex(moment.index, fill_value=False).to_numpy()
    if clash.any():
        clashing = good[clash]
        for _, group in clashing.groupby(["fitted_capacitor_id", "taken_at", "method"], sort=False):
            rows, values = group["row"].to_numpy(), group["capacitance_uf"].to_numpy(float)
            errors += [
                (
                    int(row),
                    "taken_at",
                    f"row {int(rows[k - 1] if k else rows[1])} has a reading of this capacitor at the same time "
                    f"({values[k - 1] if k else values[1]:g} µF): keep the right one of the rows",
                )
                for k, row in enumerate(rows)
            ]
        good = good[~clash].reset_index(drop=True)
    good, unpaired = links.kept_together(good, refused={row for row, _, _ in errors})
    errors += unpaired
    errors.sort()
    return CheckResult(good=good, errors=errors, duplicates=duplicates, total=len(frame))


@dataclass
class _Corrections:
    """The rows of a readings file that correct other rows of it (the readings export's `id` and `supersedes`),
    by position in the file: the row each corrects and the row that corrects it (-1: none), and the two columns'
    problems ("": none). Moving readings to another installation, a corrected reading and its correction come
    as two rows; imported as two plain readings, the value put right came back into the trend (at one time, the
    correction was refused, and with good rows only the wrong value was imported alone)."""

    rows: np.ndarray
    corrects: np.ndarray
    corrected_by: np.ndarray
    id_problems: np.ndarray
    supersedes_problems: np.ndarray
    named: np.ndarray  # the id each row's `supersedes` names (-1: none)

    def corrected_rows(self, rows: pd.Series) -> np.ndarray:
        """Per row number, whether another row of the file corrects it."""
        return self._of_rows(self.corrected_by, rows) >= 0

    def _of_rows(self, positions: np.ndarray, rows: pd.Series) -> np.ndarray:
        return pd.Series(positions, index=self.rows).reindex(rows.to_numpy()).fillna(-1).to_numpy(np.int64)

    def kept_together(self, good: pd.DataFrame, refused: set[int]) -> tuple[pd.DataFrame, list[tuple]]:
        """The good rows, each with `corrects_row` (the row number of the good row it corrects, -1: none, stored as
        a reading of its own), less each corrected row whose correction was refused: it goes with its correction
        or not at all (a chain of corrections from its far end down); and less each correction of a row stored
        already (neither good nor `refused`): the import never changes a stored reading, and beside it the
        correction would leave the value it puts right in the trend. Returns (rows kept, their problems)."""
        if not (self.named >= 0).any():  # the usual file
            return good.assign(corrects_row=np.full(len(good), -1, np.int64)), []
        # A new row naming a reading that is not in the file: the reading it corrects is stored here already (an
        # export from a date on, imported where the rest came before), or not at all; beside it, or alone, the
        # value it puts right would stay in the trend unseen (a walk imported one so, both values then in the trend).
        position = self._of_rows(np.arange(len(self.rows)), good["row"])
        named = np.where(position >= 0, self.named[np.maximum(position, 0)], -1)
        dangling = (named >= 0) & (self._of_rows(self.corrects, good["row"]) < 0)
        problems = [
            (
                int(row),
                "supersedes",
                f"reading {int(name)}, which this row corrects, is not in this file: a correction is imported with "
                "the reading it corrects (export the two together, from before the corrected reading's day), or, "
                "leaving supersedes empty, as a reading of its own",
            )
            for row, name in zip(good["row"][dangling], named[dangling], strict=True)
        ]
        good = good[~dangling].reset_index(drop=True)
        corrects = self._of_rows(self.corrects, good["row"])
        corrects_row = np.where(corrects >= 0, self.rows[np.maximum(corrects, 0)], -1)
        of_stored = (
            (corrects_row >= 0) & ~np.isin(corrects_row, good["row"].to_numpy()) & ~np.isin(corrects_row, list(refused))
        )
        problems += [
            (
                int(row),
                "supersedes",
                f"row {int(named)}, which this row corrects, is stored already: an import never changes a stored "
                "reading; correct it from the capacitor's page",
            )
            for row, named in zip(good["row"][of_stored], corrects_row[of_stored], strict=True)
        ]
        kept_out = set(good["row"][of_stored].tolist())
        good = good[~of_stored].reset_index(drop=True)
        while True:
            kept = pd.Series(True, index=good["row"].to_numpy())
            correction = self._of_rows(self.corrected_by, good["row"])
            correction_row = np.where(correction >= 0, self.rows[np.maximum(correction, 0)], -1)
            orphaned = (correction >= 0) & ~kept.reindex(correction_row).fillna(False).to_numpy(bool)
            if not orphaned.any():
                break
            problems += [
                (
                    int(row),
                    "supersedes",
                    f"row {int(by)} corrects this reading and is refused: a corrected reading is imported with its "
                    "correction or not at all"
                    if by in refused or by in kept_out
                    else f"row {int(by)} corrects this reading and is stored already, without it: an import never "
                    "changes a stored reading, so this one would be a reading of its own, the value put right back in "
                    "the trend",
                )
                for row, by in zip(good["row"][orphaned], correction_row[orphaned], strict=True)
            ]
            kept_out |= set(good["row"][orphaned].tolist())
            good = good[~orphaned].reset_index(drop=True)
        corrects = self._of_rows(self.corrects, good["row"])
        corrects_row = np.where(corrects >= 0, self.rows[np.maximum(corrects, 0)], -1)
        good["corrects_row"] = np.where(np.isin(corrects_row, good["row"].to_numpy()), corrects_row, -1)
        return good, problems


CORRECTION_CHAIN_MAX = 64  # links followed looking for a loop of corrections; a real chain has a few


def _corrections_in_file(frame: pd.DataFrame, capacitor: np.ndarray) -> _Corrections:
    """Which rows of a readings file correct which (`_Corrections`), from its `id` and `supersedes` columns,
    with each row's capacitor as placed (-1: not placed). A correction names a row of the file by its id: of the
    same capacitor, corrected once, and no loop; a repeated id names no row. A `supersedes` naming no row of the
    file is no link (the row is a reading of its own)."""
    n = len(frame)
    rows = frame["row"].to_numpy(np.int64)
    positions = np.arange(n)
    named, supersedes_problems = _file_ids(frame["supersedes"], "the id of the reading this row corrects, or empty")
    corrects = np.full(n, -1, np.int64)
    corrected_by = np.full(n, -1, np.int64)
    if not (named >= 0).any():  # the usual file: ids name nothing, and are not read
        return _Corrections(rows, corrects, corrected_by, np.full(n, "", object), supersedes_problems, named)
    ids, id_problems = _file_ids(frame["id"], "the reading's id from the readings export, or empty")
    given = ids >= 0
    repeated = given & pd.Series(ids).duplicated(keep=False).to_numpy()
    first_of = pd.Series(rows[given], index=ids[given])
    first_of = first_of[~first_of.index.duplicated(keep="first")]
    id_problems = np.where(
        repeated & pd.Series(ids).duplicated(keep="first").to_numpy() & (id_problems == ""),
        "the same id as row " + first_of.reindex(ids).fillna(0).astype(np.int64).astype(str).to_numpy(object)
        + ": a correction could not tell which row it names",
        id_problems,
    )  # fmt: skip
    unique = given & ~repeated
    position_of = pd.Series(positions[unique], index=ids[unique])
    corrects = position_of.reindex(named).fillna(-1).to_numpy(np.int64)
    corrects[named < 0] = -1
    linked = corrects >= 0
    target = np.maximum(corrects, 0)
    itself = linked & (target == positions)
    elsewhere = linked & ~itself & (capacitor >= 0) & (capacitor[target] >= 0) & (capacitor[target] != capacitor)
    named_before = pd.Series(np.where(linked, corrects, -positions - 1)).duplicated().to_numpy()
    twice = linked & ~itself & ~elsewhere & named_before
    looped = _in_a_loop(np.where(itself | elsewhere | twice, -1, corrects))
    named_row = rows[target].astype(str)
    for mask, words in (
        (itself, np.full(n, "a reading cannot correct itself", object)),
        (elsewhere, "row " + named_row + " is a reading of another capacitor: a correction is of the same one"),
        (twice, "row " + named_row + " is corrected by an earlier row already: correct the newest of the two"),
        (looped, "row " + named_row + " is in a loop of corrections, each correcting the next: none is the newest"),
    ):
        supersedes_problems = np.where(mask & (supersedes_problems == ""), words, supersedes_problems)
    corrects[itself | elsewhere | twice | looped] = -1
    valid = corrects >= 0
    corrected_by[corrects[valid]] = positions[valid]
    return _Corrections(rows, corrects, corrected_by, id_problems, supersedes_problems, named)


def _file_ids(texts: pd.Series, what: str) -> tuple[np.ndarray, np.ndarray]:
    """A column of ids as the readings export writes them: (ids, -1 where empty or unreadable; messages)."""
    texts = texts.reset_index(drop=True).str.strip()
    given = texts.ne("").to_numpy()
    if not given.any():
        return np.full(len(texts), -1, np.int64), np.full(len(texts), "", object)
    whole = texts.str.fullmatch(r"[0-9]{1,18}(?:\.0*)?").to_numpy(bool)  # ASCII digits, as a spreadsheet writes
    ids = pd.to_numeric(texts.where(whole), errors="coerce").fillna(-1).astype(np.int64).to_numpy()
    return ids, np.where(given & ~whole, f"not a whole number: {what}", "").astype(object)


def _in_a_loop(corrects: np.ndarray) -> np.ndarray:
    """Per row, whether following the rows it corrects comes back round (a loop has no newest reading)."""
    step = corrects.copy()
    for _ in range(CORRECTION_CHAIN_MAX):
        going = step >= 0
        if not going.any():
            break
        step = np.where(going, corrects[np.maximum(step, 0)], -1)
    return step >= 0


def _checked_rows(chunk, match, taken, result, confirmed, mask) -> pd.DataFrame:
    """The rows of a checked chunk under `mask`, as the import stores them, with their keys."""
    rows = pd.DataFrame(
        {
            "row": chunk["row"].to_numpy()[mask],
            "fitted_capacitor_id": match["fitted_capacitor_id"].to_numpy()[mask].astype(np.int64),
            "position_id": match["position_id"].to_numpy()[mask].astype(np.int64),
            "taken_at": taken[mask].reset_index(drop=True),
            "method": result.values["method"][mask],
            "condition": result.values["condition"][mask],
            "condition_given": chunk["condition"].str.strip().ne("").to_numpy()[mask],
            "notes": result.values["notes"][mask],
            # Confirmed where the rulebook asked (as the form and the API store it), not wherever it says yes.
            "outlier_confirmed": (confirmed & result.asked)[mask],
            **{name: result.values[name][mask] for name in READING_NUMBERS},
            # As read, as the form stores it (the keys round to 0.0001 µF themselves): rounded here, a
            # confirmed 0.00003 µF became 0, an open capacitor.
            "capacitance_uf": result.values["capacitance_uf"][mask],
        }
    )
    rows["import_key"] = reading_keys(
        rows["fitted_capacitor_id"], rows["taken_at"], rows["method"], rows["capacitance_uf"]
    )
    rows["position_key"] = reading_keys(rows["position_id"], rows["taken_at"], rows["method"], rows["capacitance_uf"])
    return rows


def _against_stored(good: pd.DataFrame, fitted: pd.DataFrame) -> tuple[pd.DataFrame, list[tuple], int]:
    """The good rows held to the readings stored (`_already_stored`): (the rows still new, the problems of rows
    that a stored reading makes wrong, how many rows are stored already). The check's rule, and the import's
    again inside its write (`readings_stored_meanwhile`)."""
    errors = []
    stored, stored_uf, stored_fields = _already_stored(good, fitted)
    # The same reading stored already, but the file gives another condition, note or measurement: edited since.
    changed = _edited_fields(good, stored_fields, stored)
    if changed:
        errors += changed
        edited_rows = good["row"].isin([row for row, _, _ in changed]).to_numpy()
        good = good[~edited_rows].reset_index(drop=True)
        stored, stored_uf = stored[~edited_rows], stored_uf[~edited_rows]
    # Another value at the time and method of a stored reading of the capacitor: a row edited and imported again
    # (the stored value would stay in the trend beside it). A correction is made from the capacitor's page.
    edited = ~stored & ~np.isnan(stored_uf)
    if edited.any():
        errors += [
            (
                int(row),
                "taken_at",
                f"a reading of this capacitor at this time is stored already with {uf:g} µF, this row gives "
                f"{mine:g} µF: to put it right, correct that reading from the capacitor's page (both are kept, the "
                "trend uses the correction)",
            )
            for row, uf, mine in zip(
                good["row"][edited], stored_uf[edited], good["capacitance_uf"][edited].astype(float), strict=True
            )
        ]
    if stored.any() or edited.any():
        good = good[~stored & ~edited].reset_index(drop=True)
    return good, errors, int(stored.sum())


# Readings saved this long before an import's check began are held to it again as well: a save whose clock runs
# behind the importer's, or whose commit came after the check had read (its time is taken before it commits).
STORED_MEANWHILE_MARGIN = dt.timedelta(minutes=5)


def readings_stored_meanwhile(good: pd.DataFrame, checked_from: dt.datetime) -> CheckResult:
    """The good rows of a readings import checked again, inside the import's transaction, against what the
    reading form and the API stored since the check began (`checked_from`). Two imports take turns, but a reading
    typed on the form meanwhile was saved beside the imported one: the same reading twice in the trend. Single
    saves are held off first (`readings.hold_reading_saves`), so whichever of the two comes second finds the other:
    the form refuses its reading naming the stored one, the import counts such a row already imported (another
    value at that time: refused by row, as the check refuses it). Only where a reading of the rows' capacitors was
    saved since (an index range of the readings' save times, a few rows) are the rows held to the stored ones again:
    doing that every time cost a 50,000-row import about a tenth of its time."""
    if not len(good):
        return CheckResult(good=good, total=0)
    hold_reading_saves(bulk=True)
    ids = np.unique(good["fitted_capacitor_id"].to_numpy(np.int64))
    saved_since = (
        Reading.objects.filter(created_at__gte=checked_from - STORED_MEANWHILE_MARGIN)
        .exclude(source=Reading.Source.IMPORT)  # another readings import waits for this one, or came before its check
        .values_list("fitted_capacitor_id", flat=True)
        .distinct()
    )
    touched = np.intersect1d(ids, np.fromiter(saved_since, np.int64))
    if not len(touched):
        return CheckResult(good=good, total=len(good))
    motor_ids = np.unique(
        np.fromiter(FittedCapacitor.objects.filter(id__any_of=touched).values_list("motor_id", flat=True), np.int64)
    )
    fitted = _fitted_where(motor_id__any_of=motor_ids)
    # The rows of other capacitors were held to what was stored by the check already; nothing was saved since.
    held = good["fitted_capacitor_id"].isin(fitted["fitted_capacitor_id"]).to_numpy()
    still_new, errors, duplicates = _against_stored(good[held].reset_index(drop=True), fitted)
    kept = ~held | good["row"].isin(still_new["row"]).to_numpy()
    return CheckResult(
        good=good[kept].reset_index(drop=True), errors=sorted(errors), duplicates=duplicates, total=len(good)
    )


@dataclass(frozen=True)
class _PlacedReadings:
    """A part of a readings file placed on its capacitors, with the problems found on the way: what the
    rulebook and the in-file neighbours read."""

    chunk: pd.DataFrame
    problems: _Problems
    zones: pd.Series
    taken: pd.Series
    taken_utc: np.ndarray
    taken_on: np.ndarray
    match: pd.DataFrame
    confirmed: np.ndarray
    predicted: np.ndarray  # the stored trend carried to the reading's time (nan: no trend)
    capacitor: np.ndarray  # the fitted capacitor's id, -1 where none matched
    typed_uf: np.ndarray  # a meter reading's value (nan otherwise)


def _place_readings(chunk, tag, zone_of_tag, fitted, first_fitted, default_tz: str) -> _PlacedReadings:
    """Each row's time in its site's zone, its site day and the capacitor fitted in its position that day."""
    problems = _Problems(chunk)
    for name in READING_REQUIRED:
        problems.add(chunk[name].eq(""), name, "required", of_cell=True)
    zones = zone_of_tag.reindex(tag.to_numpy(object))
    unknown_tag = zones.isna().to_numpy()
    if unknown_tag.any():  # the words are built for every row: only when one needs them
        problems.add(unknown_tag, "asset_tag", _unknown("asset tag", chunk["asset_tag"], "not in the register"))
    role = chunk["role"].str.lower()
    problems.add(~role.isin(FittedCapacitor.Role.values), "role", "must be start or run", of_cell=True)
    taken, unplaced = parse_times(chunk["taken_at"], pd.Series(zones.fillna(default_tz).to_numpy(object)))
    problems.add(unplaced != "", "taken_at", unplaced)
    problems.add(taken.isna(), "taken_at", "not a date and time (use 2026-03-14 09:30)")
    taken_utc = taken.dt.tz_localize(None).to_numpy("datetime64[s]")
    taken_on = local_days(taken_utc, zones.fillna(default_tz).to_numpy(object), fallback=settings.TIME_ZONE)
    named = _named_by_fitting_day(
        chunk, tag, role, fitted, problems, _named_capacitors(chunk, tag, role, fitted, problems)
    )
    match = _fitted_on_the_day(tag, role, taken_on.astype("datetime64[s]"), fitted, named)
    unmatched = match["fitted_capacitor_id"].isna().to_numpy() & taken.notna().to_numpy()
    # A motor that has had a capacitor in this role: the date is what is wrong; one that never had: the role.
    position = pd.MultiIndex.from_arrays([tag, role])
    first = first_fitted.reindex(position).to_numpy("datetime64[s]")
    known_position = ~np.isnat(first)
    before_first = known_position & (taken_on.astype("datetime64[s]") < first)
    problems.add(unmatched & ~known_position, "role", "this motor has had no capacitor in this role")
    early = unmatched & before_first
    problems.add(
        early,
        "taken_at",
        _messages(
            early,
            "before the first capacitor in this role was fitted to this motor ({d})",
            d=first.astype("datetime64[D]"),
        ),
    )
    problems.add(
        unmatched & known_position & ~before_first,
        "taken_at",
        "no capacitor in this role was fitted to this motor on that date",
    )
    confirmed, unreadable = yes_or_no(chunk["confirmed"])
    problems.add(
        unreadable,
        "confirmed",
        of_cell=True,
        message=(
            chunk["confirmed"].str.slice(0, 20) + " is not yes or no (true or false, 1 or 0; empty is no)"
        ).to_numpy(object),
    )
    meter = chunk["method"].str.strip().str.lower().isin(["", "meter"]).to_numpy()
    return _PlacedReadings(
        chunk=chunk,
        problems=problems,
        zones=zones,
        taken=taken,
        taken_utc=taken_utc,
        taken_on=taken_on,
        match=match,
        confirmed=confirmed,
        predicted=_trend_values_held_to(match["fitted_capacitor_id"], taken_utc),
        capacitor=np.nan_to_num(match["fitted_capacitor_id"].to_numpy(float), nan=-1).astype(np.int64),
        typed_uf=np.where(meter, parse_numbers(chunk["capacitance_uf"])[0], np.nan),
    )


def _placed_capacitors(placed: list[_PlacedReadings]) -> np.ndarray:
    """Each row's capacitor as placed (-1: none), over the whole file."""
    return np.concatenate([part.capacitor for part in placed]) if placed else np.zeros(0, np.int64)


def _neighbours_in_file(
    placed: list[_PlacedReadings], corrected: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """`rules.neighbours_line` over every part of the file at once: (line, before, after) per row; a `corrected`
    row is no one's neighbour."""
    if not placed:
        return np.array([]), np.array([]), np.array([])

    def joined(values) -> np.ndarray:
        return np.concatenate([values(part) for part in placed])

    return neighbours_line(
        joined(lambda part: part.capacitor),
        joined(lambda part: part.taken_utc),
        np.where(corrected, np.nan, joined(lambda part: part.typed_uf)),
        joined(lambda part: part.match["rated_uf"].to_numpy(float)),
        taken_on=joined(lambda part: np.asarray(part.taken_on, "datetime64[D]")),
        removed_on=joined(lambda part: pd.to_datetime(part.match["removed_on"]).to_numpy("datetime64[D]")),
    )


def _already_stored(good: pd.DataFrame, fitted: pd.DataFrame) -> tuple[np.ndarray, np.ndarray, pd.DataFrame]:
    """Per good row: the database holds the same reading (motor position, time, method, value), whether it
    came by an earlier import (its key) or by the form, the API or the demo (the same content;
    times compared to the second, as a spreadsheet cell keeps them), and on whichever capacitor of that
    position (`fitted`'s `position_id`) it is stored: a readings export imported again adds nothing, even
    a new capacitor's reading taken on the day it replaced the old one. Also, per good row, the value stored
    on its capacitor at its second and method (NaN where none is): another value there is a row edited since.
    Last, per good row, the stored reading's other fields (`COMPARED_FIELDS`; NaN where it is not stored):
    a row stored already whose condition, notes or another measurement differs was edited since too."""
    if not len(good):
        return np.zeros(0, bool), np.zeros(0), pd.DataFrame(columns=COMPARED_FIELDS)
    keyed = _among(
        good["import_key"].to_numpy(object),
        list(
            Reading.objects.filter(import_key__any_of=good["import_key"].to_numpy(object)).values_list(
                "import_key", flat=True
            )
        ),
    )
    times = pd.to_datetime(good["taken_at"], utc=True)
    position_of = fitted.set_index("fitted_capacitor_id")["position_id"]
    same_span = (
        Reading.objects.filter(
            fitted_capacitor_id__any_of=position_of.index[position_of.isin(good["position_id"])].to_numpy(np.int64),
            taken_at__gte=times.min().floor("s"),
            taken_at__lt=times.max().floor("s") + pd.Timedelta(seconds=1),
        )
        .order_by()
        .values_list("fitted_capacitor_id", "taken_at", "method", "capacitance_uf", *COMPARED_FIELDS)
    )
    stored = pd.DataFrame.from_records(
        list(same_span), columns=["fitted_capacitor_id", "taken_at", "method", "uf", *COMPARED_FIELDS]
    )
    if not len(stored):
        return keyed, np.full(len(good), np.nan), pd.DataFrame(index=range(len(good)), columns=COMPARED_FIELDS)

    def to_the_second(ids, when, methods, uf):
        return reading_keys(ids, pd.to_datetime(when, utc=True).dt.floor("s"), methods, np.round(uf, 4))

    positions, methods = (
        position_of.reindex(stored["fitted_capacitor_id"]).to_numpy(),
        stored["method"].to_numpy(object),
    )
    unkeyed = to_the_second(positions, stored["taken_at"], methods, stored["uf"].to_numpy(float))
    mine = to_the_second(
        good["position_id"], times, good["method"].to_numpy(object), good["capacitance_uf"].to_numpy(float)
    )
    # The value stored on each row's capacitor at its second and method, whatever it is (the newest where several
    # are). By capacitor, not position: the old and the new capacitor may both be read at one time on the day.
    moments = to_the_second(stored["fitted_capacitor_id"], stored["taken_at"], methods, np.zeros(len(stored)))
    mine_moments = to_the_second(
        good["fitted_capacitor_id"], times, good["method"].to_numpy(object), np.zeros(len(good))
    )
    value_at = pd.Series(stored["uf"].to_numpy(float), index=moments)
    value_at = value_at[~value_at.index.duplicated(keep="last")]
    fields = stored[COMPARED_FIELDS].set_axis(unkeyed)
    fields = fields[~fields.index.duplicated(keep="last")].reindex(mine).reset_index(drop=True)
    return keyed | _among(mine, unkeyed), value_at.reindex(mine_moments).to_numpy(float), fields


# What else a reading holds besides its capacitor, time, method and value: a row stored already that differs in
# any of these was edited since, and the import never changes a stored reading (the form's correction does).
COMPARED_FIELDS = ["condition", "notes", *(name for name in READING_NUMBERS if name != "capacitance_uf")]


def _edited_fields(good: pd.DataFrame, stored_fields: pd.DataFrame, stored: np.ndarray) -> list[tuple]:
    """(row, field, message) for every field of a row stored already that the file gives otherwise (a field
    the file leaves empty, or has no column for, says nothing: a file of fewer columns is the same reading)."""
    found = []
    if not stored.any():
        return found
    for name in COMPARED_FIELDS:
        mine, theirs = good[name], stored_fields[name]
        if name in ("condition", "notes"):
            mine = mine.fillna("").astype(str).str.strip().to_numpy(object)
            theirs = theirs.fillna("").astype(str).str.strip().to_numpy(object)
            given = good["condition_given"].to_numpy(bool) if name == "condition" else mine != ""
            differs = given & (mine != theirs)
        else:
            mine, theirs = pd.to_numeric(mine, errors="coerce").to_numpy(float), theirs.astype(float).to_numpy(float)
            with np.errstate(invalid="ignore"):
                differs = ~np.isnan(mine) & ~(np.abs(mine - theirs) <= 1e-9 * np.maximum(np.abs(theirs), 1.0))
        for i in np.flatnonzero(stored & differs):  # the words for the rows edited only
            found.append(
                (
                    int(good["row"].iloc[i]),
                    name,
                    f"this reading is stored already with {name} {shown(theirs[i])}, the file says "
                    f"{shown(mine[i])}: an import never changes a stored reading; to put it right, correct that "
                    "reading from the capacitor's page (both are kept, the trend uses the correction)",
                )
            )
    return found


def _among(texts, known) -> np.ndarray:
    """Per text, whether it is among `known`, by a hash table. (numpy's isin compares every pair when
    either side holds Python objects: 50,000 keys against 50,000 took 20 minutes.)"""
    return pd.Series(texts, dtype=object).isin(pd.Series(known, dtype=object)).to_numpy(bool)


NAMED_AFTER_REMOVAL_WORDS = (
    "; the row names this capacitor in fitted_capacitor_id: leave that empty and the reading goes to the capacitor "
    "fitted in this position that day"
)


def _point_past_a_removal(errors: dict, chunk: pd.DataFrame) -> None:
    """A reading after its capacitor's removal, on a row that named that capacitor by id (a readings export
    edited, or a row copied): the rulebook's words, and the way to the capacitor fitted then. Without an id the
    import places a reading on the capacitor fitted that day, so only a named one can land after a removal."""
    said = errors.get("taken_at")
    if said is None:
        return
    named = chunk["fitted_capacitor_id"].ne("").to_numpy() & pd.Series(said).str.startswith(AFTER_REMOVAL).to_numpy()
    if named.any():
        said = said.copy()
        said[named] = said[named] + NAMED_AFTER_REMOVAL_WORDS
        errors["taken_at"] = said


def insert_readings(good: pd.DataFrame) -> list[int]:
    """Write checked readings (caller holds the transaction); returns the capacitors touched.

    An imported reading has no taker (`taken_by`): whoever imports the file did not measure it.

    One `insert_frame` (COPY on PostgreSQL; the row triggers of fleet_reading run on each row as
    for any insert). A reading whose key another import wrote meanwhile is skipped. A row that corrects another
    of the file (`corrects_row`, `_Corrections`) goes in after it, naming its id in `supersedes`: one more
    `insert_frame` for each link of the longest chain, none in a file without corrections.
    """
    if not len(good):
        return []
    corrects_row = good["corrects_row"].to_numpy(np.int64) if "corrects_row" in good else np.full(len(good), -1)
    # A row whose corrected row left the file's good rows after its check (stored meanwhile) is a reading of its own.
    written = (corrects_row < 0) | ~np.isin(corrects_row, good["row"].to_numpy())
    _insert_reading_rows(good[written], supersedes_id=None)
    while not written.all():
        stored_ids = pd.Series(
            dict(
                Reading.objects.filter(import_key__any_of=good["import_key"].to_numpy(object)[written]).values_list(
                    "import_key", "id"
                )
            ),
            dtype="Int64",
        )
        id_of_row = pd.Series(stored_ids.reindex(good["import_key"][written]).to_numpy(), index=good["row"][written])
        ready = ~written & np.isin(corrects_row, good["row"].to_numpy()[written])
        if not ready.any():  # the check lets no loop of corrections through: rolled back, never half-written
            raise RuntimeError(f"readings import: {int((~written).sum())} corrections name no reading written")
        _insert_reading_rows(good[ready], supersedes_id=id_of_row.reindex(corrects_row[ready]).array)
        written |= ready
    return sorted(set(good["fitted_capacitor_id"].astype(int).tolist()))


def _insert_reading_rows(good: pd.DataFrame, supersedes_id) -> None:
    """One `insert_frame` of checked readings, each correcting the reading `supersedes_id` gives (None: none)."""
    if not len(good):
        return
    rows = pd.DataFrame(
        {
            "fitted_capacitor_id": good["fitted_capacitor_id"].to_numpy(np.int64),
            "taken_at": good["taken_at"].array,
            "taken_by_id": pd.array(np.full(len(good), None), dtype="Int64"),
            "method": good["method"].to_numpy(object),
            **{name: good[name].to_numpy(float) for name in READING_NUMBERS},
            "condition": good["condition"].to_numpy(object),
            "notes": good["notes"].fillna("").to_numpy(object),
            "outlier_confirmed": good["outlier_confirmed"].to_numpy(bool),
            "source": Reading.Source.IMPORT.value,
            "import_key": good["import_key"].to_numpy(object),
            "supersedes_id": pd.array(np.full(len(good), None) if supersedes_id is None else supersedes_id, "Int64"),
        }
    )
    insert_frame(Reading, rows, skip_conflicts_on="import_key")


def _unknown(what: str, typed: pd.Series, hint: str) -> np.ndarray:
    """Per row, "unknown part code RUN-9X: add the part first": what was typed, so a near miss shows."""
    return ("unknown " + what + " " + typed.astype(str).str.slice(0, 40) + ": " + hint).to_numpy(object)


def _wrong_dielectric(role: np.ndarray, part_code: pd.Series, dielectrics: dict) -> tuple[np.ndarray, np.ndarray]:
    """Rows that put a known electrolytic part in a run position, with the message for each: an aluminium
    electrolytic is rated for the seconds of a start, not for continuous AC duty (common practice of the
    trade, no single source). A film capacitor in a start position is unusual, not wrong, and is taken."""
    dielectric = part_code.map(dielectrics).fillna("").to_numpy(object)
    wrong, _ = fitting_problems(role, dielectric, np.nan, np.nan)
    return wrong, part_code.astype(str).to_numpy(object) + " " + ELECTROLYTIC_RUN_WORDS


def code_problems(problems: _Problems, codes: pd.Series, field_name: str) -> None:
    """Codes (asset tags, site and part codes) outside the admin's character rule (models.CODE_PATTERN)."""
    problems.add(codes.ne("") & ~codes.str.fullmatch(CODE_PATTERN), field_name, f"use {CODE_CHARACTERS}", of_cell=True)


def refuse_changed(problems: _Problems, already: np.ndarray, given: pd.DataFrame, stored: pd.DataFrame, what: str):
    """A row stored already that gives a field otherwise than it is stored is refused at that field, with both
    values: an import never changes what is stored (the admin does), and counting the row "already imported"
    lost the change without a word. A field the file leaves empty says nothing. `given` and `stored` hold, row
    for row of the file, each compared field as the import would store it. Column by column; words are built
    for the rows that differ only (a register of 100,000 motors imported again compares in well under a second)."""
    already = np.asarray(already, bool)
    for name in given.columns:
        mine, theirs = _comparable_column(given[name]), _comparable_column(stored[name])
        mine_missing, theirs_missing = pd.isna(mine), pd.isna(theirs)
        with np.errstate(invalid="ignore"):
            differs = already & ~mine_missing & (theirs_missing | (mine != theirs))
        messages = np.full(len(given), "", dtype=object)
        for i in np.flatnonzero(differs):
            messages[i] = (
                f"this {what} is stored already with {name} {shown(theirs[i])}, the file says {shown(mine[i])}: an "
                f"import never changes a stored {what}; change it in the admin, or make the file agree"
            )
        problems.add(differs, name, messages, of_cell=True)  # every field that differs, in one round


def _comparable_column(values: pd.Series) -> np.ndarray:
    """A column as stored, for comparing a file's with the register's (`_comparable` value by value, but
    whole numeric and date columns at once): None for nothing."""
    values = pd.Series(values).reset_index(drop=True)
    if pd.api.types.is_datetime64_any_dtype(values):
        return values.dt.strftime("%Y-%m-%d").astype(object).where(values.notna(), None).to_numpy(object)
    if pd.api.types.is_numeric_dtype(values) and not pd.api.types.is_bool_dtype(values):
        numbers = values.astype(float)
        # Rounded where rounding can change a value: 1e308 rounded to 9 places overflows (a warning on the
        # command's terminal, and inf, read as nothing); a number that large has no decimals to round.
        with np.errstate(over="ignore", invalid="ignore"):
            numbers = numbers.where(numbers.abs() >= 1e15, numbers.round(9))
        return numbers.astype(object).where(np.isfinite(numbers), None).to_numpy(object)
    return values.map(_comparable).to_numpy(object)


def _comparable(value):
    """A value as stored, for comparing a file's with the register's: None for nothing (empty, NaN, NaT)."""
    if value is None or (isinstance(value, float) and not np.isfinite(value)) or value is pd.NaT:
        return None
    if isinstance(value, (int, float, np.integer, np.floating, Decimal)) and not isinstance(value, bool):
        return round(float(value), 9)
    if isinstance(value, (dt.date, pd.Timestamp)):
        return pd.Timestamp(value).date().isoformat()
    text = str(value).strip()
    return text or None


def codes_in_any_case(problems: _Problems, codes: pd.Series, stored, what: str) -> np.ndarray:
    """Codes unique in any case (the database's `*_unique_any_case`): a repeat in the file in any case, or a
    code the register holds in another case, is refused at `code`; one it holds exactly is already there
    (returned, to skip)."""
    upper = codes.str.upper()
    repeated_in_file(problems, upper.where(codes.ne("")), "code", f"the same {what}")
    stored_by_upper = {code.upper(): code for code in stored}
    held = upper.map(stored_by_upper)
    other_case = held.notna() & held.ne(codes)
    problems.add(
        other_case.to_numpy(bool),
        "code",
        (held.astype(object).fillna("") + f" is in the register already: {what}s are unique in any case").to_numpy(
            object
        ),
    )
    return (held.notna() & ~other_case).to_numpy(bool)


def site_ids_in_any_case(codes: pd.Series) -> pd.Series:
    """Per row, the id of the site its code names in any case (codes are unique in any case, and a site's pages
    find theirs so: `cst` is CST); NaN where no site has it. One query."""
    by_upper = {code.upper(): pk for code, pk in Site.objects.values_list("code", "id")}
    return codes.str.upper().map(by_upper)


def check_register(frame: pd.DataFrame, *, on_progress=None) -> CheckResult:
    """Validate a motor register: sites (by code in any case) and parts must exist; tags already there are
    skipped."""
    site_id = site_ids_in_any_case(frame["site"])
    parts = dict(CapacitorPart.objects.values_list("code", "id"))
    existing = {t.upper() for t in Motor.objects.values_list("asset_tag", flat=True)}
    problems = _Problems(frame)
    for name in REGISTER_REQUIRED:
        problems.add(frame[name].eq(""), name, "required", of_cell=True)
    for name in REGISTER_COLUMNS:
        problems.add(
            frame[name].str.contains("\x00", regex=False), name, "contains a NUL character: remove it", of_cell=True
        )
    too_long = frame["asset_tag"].str.len() > Motor._meta.get_field("asset_tag").max_length
    code_problems(problems, frame["asset_tag"], "asset_tag")
    problems.add(too_long, "asset_tag", "longer than 40 characters", of_cell=True)
    problems.add(frame["location"].str.len() > 120, "location", "longer than 120 characters", of_cell=True)
    numbers = _numbers(frame, REGISTER_NUMBERS, problems)
    problems.add(
        site_id.isna().to_numpy(),
        "site",
        _unknown("site code", frame["site"], "add the site first"),
        of_cell=True,
    )
    for name, allowed in (
        ("application", Motor.Application.values),
        ("motor_type", Motor.MotorType.values),
        ("load_type", Motor.LoadType.values),
    ):
        problems.add(~frame[name].str.lower().isin(allowed), name, "must be one of " + ", ".join(allowed), of_cell=True)
    volts = numbers["rated_voltage_v"]
    # Every check constraint of a motor and the rulebook's bounds, by row and field, before any write.
    # Named beside the row's other faults, as for parts (check_parts); a check that reads other fields waits.
    for rows, name, message in motor_problems(*(numbers[name] for name in MOTOR_NUMBERS)):
        problems.add(rows, str(name), message, of_cell=not isinstance(name, ReadsOtherFields))
    kind = frame["motor_type"].str.lower()
    needs_run = kind.isin(["permanent_split", "two_value"])
    needs_start = kind.isin(["capacitor_start", "two_value"])
    problems.add(needs_run & frame["run_part_code"].eq(""), "run_part_code", "this motor type has a run capacitor")
    problems.add(
        needs_start & frame["start_part_code"].eq(""), "start_part_code", "this motor type has a start capacitor"
    )
    dielectrics = dict(CapacitorPart.objects.values_list("code", "dielectric"))
    part_voltages = dict(CapacitorPart.objects.values_list("code", "rated_voltage_v"))
    for name, role, has_role in (
        ("run_part_code", FittedCapacitor.Role.RUN, needs_run),
        ("start_part_code", FittedCapacitor.Role.START, needs_start),
    ):
        given = frame[name].ne("")
        problems.add(given & ~frame[name].isin(parts), name, _unknown("part code", frame[name], "add the part first"))
        problems.add(
            given & kind.isin(Motor.MotorType.values) & ~has_role,
            name,
            np.array([f"a {t.replace('_', '-')} motor has no {role} capacitor: leave it empty" for t in kind], object),
        )
        wrong, messages = _wrong_dielectric(np.full(len(frame), role), frame[name], dielectrics)
        problems.add(wrong, name, messages)
        # A capacitor sees at least the supply voltage (a run capacitor well above it, a start capacitor
        # over it during a start): one rated below the motor's supply is a wrong code or a dangerous fit
        # (common practice of the trade, no single source). Past fits in the history are what happened.
        part_volts = frame[name].map(part_voltages).to_numpy(float)
        _, under_voltage = fitting_problems(np.full(len(frame), role), "", part_volts, volts)
        problems.add(
            given.to_numpy(bool) & under_voltage,
            name,
            frame[name].astype(str).to_numpy(object)
            + " is rated "
            + pd.Series(part_volts).map("{:g}".format).to_numpy(object)
            + " V, below this motor's "
            + pd.Series(volts).map("{:g}".format).to_numpy(object)
            + " V "
            + UNDER_VOLTAGE_WORDS,
        )
    today = np.datetime64(timezone.localdate(), "D")
    dates = {}
    for name in ("fitted_on", "run_fitted_on", "start_fitted_on", "commissioned_on"):
        dates[name] = parse_dates(frame[name])
        problems.add(frame[name].ne("") & dates[name].isna(), name, "not a date (use 2026-03-14)", of_cell=True)
    no_removal = np.full(len(frame), np.datetime64("NaT"), "datetime64[D]")
    for name in ("fitted_on", "run_fitted_on", "start_fitted_on"):
        for rows, _, message in service_date_problems(dates[name].to_numpy("datetime64[D]"), no_removal, today):
            problems.add(rows, name, message, of_cell=True)
    for rows, name, message in commissioning_problems(dates["commissioned_on"].to_numpy("datetime64[D]"), today):
        problems.add(rows, name, message, of_cell=True)
    for name, part_column in (
        ("run_fitted_on", "run_part_code"),
        ("start_fitted_on", "start_part_code"),
        ("run_serial", "run_part_code"),
        ("start_serial", "start_part_code"),
    ):
        problems.add(
            frame[name].ne("") & frame[part_column].eq(""),
            name,
            f"no {part_column} on this row: leave it empty, or give the part fitted",
        )
    # The walking order a plant had (a round-trip audit found every motor's at 0 after a migration).
    order_given = frame["route_order"].str.strip().ne("")
    whole = frame["route_order"].str.strip().str.fullmatch(r"[0-9]{1,9}").fillna(False)
    problems.add(order_given & ~whole, "route_order", "not a whole number of 0 or more", of_cell=True)
    numbers["route_order"] = pd.to_numeric(frame["route_order"].str.strip().where(whole), errors="coerce").to_numpy()
    tags = frame["asset_tag"].str.upper()
    repeated_in_file(problems, tags.where(tags.ne("")), "asset_tag", "the same tag")
    already = tags.isin(existing).to_numpy() & ~problems.bad
    _refuse_changed_motors(problems, already, frame, tags, numbers)
    _refuse_changed_capacitors(problems, already & ~problems.bad, frame, tags, dates)
    already &= ~problems.bad
    good_mask = ~problems.bad & ~already
    good = frame[good_mask].copy()
    for name in REGISTER_NUMBERS:
        good[name] = numbers[name][good_mask]
    good["site_id"] = site_id[good_mask].astype("int64")
    if on_progress:
        on_progress(len(frame))
    return CheckResult(
        good=good.reset_index(drop=True), errors=sorted(problems.items), duplicates=int(already.sum()), total=len(frame)
    )


# A register row's motor fields, compared with the motor stored under its tag (its capacitors are not: a part
# replaced since differs from the file's by right).
MOTOR_COMPARED = [
    "site",
    "location",
    "application",
    "motor_type",
    "load_type",
    *MOTOR_NUMBERS,
    "commissioned_on",
    "route_order",
    "insulation_class",
]


def _refuse_changed_capacitors(problems: _Problems, already: np.ndarray, frame: pd.DataFrame, tags: pd.Series, dates):
    """A motor stored already whose row gives a capacitor it never had: a part, a fitting day or a serial that no
    capacitor of that motor in that role, in service or past, was stored with. A register row describes the motor
    as it was on some day, so any capacitor it had matches; another one is a change the import would drop unsaid
    (an audit of inputs: a new part code, fitting day or serial came back "already imported"). A replacement is
    recorded from the capacitor's page, a past capacitor by the history import."""
    if not already.any():
        return
    stored = pd.DataFrame.from_records(
        list(
            FittedCapacitor.objects.filter(
                motor__asset_tag__any_of=np.array(sorted(set(tags[already])), dtype=object)
            ).values_list("motor__asset_tag", "role", "part__code", "fitted_on", "serial")
        ),
        columns=["tag", "role", "part", "fitted_on", "serial"],
    )
    stored["tag"] = stored["tag"].str.upper()
    stored["fitted_on"] = pd.to_datetime(stored["fitted_on"]).dt.strftime("%Y-%m-%d")
    for role in (FittedCapacitor.Role.RUN, FittedCapacitor.Role.START):
        part = frame[f"{role}_part_code"].reset_index(drop=True)
        day = dates[f"{role}_fitted_on"].fillna(dates["fitted_on"]).dt.strftime("%Y-%m-%d").reset_index(drop=True)
        serial = frame[f"{role}_serial"].str.strip().reset_index(drop=True)
        given = already & part.ne("").to_numpy() & day.notna().to_numpy()
        if not given.any():
            continue
        held = stored[stored["role"] == role]
        keys = tags.reset_index(drop=True) + "|" + part + "|" + day.fillna("")
        held_keys = held["tag"] + "|" + held["part"] + "|" + held["fitted_on"]
        known = keys.isin(held_keys).to_numpy()
        words = (
            "motor " + frame["asset_tag"].reset_index(drop=True) + f" has had no {role} capacitor of part "
            + part + " fitted on " + day.fillna("") + ": a replacement is recorded from the capacitor's page, a "
            "past capacitor by the history import (an import never changes a stored motor's capacitors)"
        )  # fmt: skip
        problems.add(given & ~known, f"{role}_part_code", words.to_numpy(object))
        serial_of = pd.Series(held["serial"].to_numpy(object), index=held_keys.to_numpy(object))
        serial_of = serial_of[~serial_of.index.duplicated(keep="last")]
        stored_serial = serial_of.reindex(keys.to_numpy(object)).fillna("").to_numpy(object)
        other_serial = given & known & serial.ne("").to_numpy() & (serial.to_numpy(object) != stored_serial)
        problems.add(
            other_serial,
            f"{role}_serial",
            _messages(
                other_serial,
                "this capacitor is stored already with serial {s}, the file says {f}: an import never changes a "
                "stored capacitor; change it in the admin, or make the file agree",
                s=np.where(stored_serial == "", "(none)", stored_serial),
                f=serial.to_numpy(object),
            ),
        )


def _refuse_changed_motors(problems: _Problems, already: np.ndarray, frame: pd.DataFrame, tags: pd.Series, numbers):
    """A motor stored already that the file describes otherwise (`refuse_changed`)."""
    if not already.any():
        return
    fields = [name for name in MOTOR_COMPARED if name != "site"]
    stored = pd.DataFrame.from_records(
        list(
            Motor.objects.filter(asset_tag__any_of=np.array(sorted(set(tags[already])), dtype=object)).values_list(
                "asset_tag", "site__code", *fields
            )
        ),
        columns=["asset_tag", "site", *fields],
    )
    held = stored.set_index(stored["asset_tag"].str.upper()).reindex(tags.to_numpy())[MOTOR_COMPARED]
    given = frame.reindex(columns=MOTOR_COMPARED).assign(
        **{name: numbers[name] for name in [*MOTOR_NUMBERS, "route_order"] if name in numbers},
        insulation_class=frame["insulation_class"].str.strip(),
        site=frame["site"].str.upper(),
        application=frame["application"].str.lower(),
        motor_type=frame["motor_type"].str.lower(),
        load_type=frame["load_type"].str.lower(),
        commissioned_on=parse_dates(frame["commissioned_on"]) if "commissioned_on" in frame else None,
    )
    held = held.assign(site=held["site"].str.upper())
    refuse_changed(problems, already, given.reset_index(drop=True), held.reset_index(drop=True), "motor")


def insert_register(good: pd.DataFrame) -> list[int]:
    """Create motors and their fitted capacitors (caller holds the transaction)."""
    parts = dict(CapacitorPart.objects.values_list("code", "id"))
    motors = Motor.objects.bulk_create(
        [
            Motor(
                asset_tag=row.asset_tag,
                site_id=int(row.site_id),
                location=row.location,
                application=row.application.lower(),
                motor_type=row.motor_type.lower(),
                load_type=row.load_type.lower(),
                rated_voltage_v=row.rated_voltage_v,
                frequency_hz=int(row.frequency_hz),
                poles=int(row.poles),
                output_w=row.output_w,
                full_load_current_a=row.full_load_current_a,
                rated_speed_rpm=row.rated_speed_rpm,
                commissioned_on=dt.date.fromisoformat(row.commissioned_on[:10]) if row.commissioned_on else None,
                route_order=int(row.route_order.strip() or 0),
                insulation_class=row.insulation_class.strip(),
            )
            for row in good.itertuples(index=False)
        ],
        batch_size=2000,
    )
    fitted = []
    for motor, row in zip(motors, good.itertuples(index=False), strict=True):
        for role, code, own_day, serial in (
            (FittedCapacitor.Role.RUN, row.run_part_code, row.run_fitted_on, row.run_serial),
            (FittedCapacitor.Role.START, row.start_part_code, row.start_fitted_on, row.start_serial),
        ):
            if code:
                fitted_on = dt.date.fromisoformat((own_day or row.fitted_on)[:10])
                fitted.append(
                    FittedCapacitor(
                        motor=motor, role=role, part_id=parts[code], fitted_on=fitted_on, serial=serial.strip()
                    )
                )
    FittedCapacitor.objects.bulk_create(fitted, batch_size=2000)
    return [m.id for m in motors]


def check_sites(frame: pd.DataFrame, *, on_progress=None) -> CheckResult:
    """Sites: code, name and a time zone zoneinfo knows; codes already in the register are skipped."""
    problems = _Problems(frame)
    for name in SITE_REQUIRED:
        problems.add(frame[name].eq(""), name, "required", of_cell=True)
    code_problems(problems, frame["code"], "code")
    spelt = frame["time_zone"].map({name: site_time_zone(name) for name in set(frame["time_zone"])})
    frame["time_zone"] = spelt.fillna(frame["time_zone"])
    problems.add(
        spelt.isna(),
        "time_zone",
        "not a time zone name: use one like Europe/Madrid, America/Chicago or UTC",
        of_cell=True,
    )
    sites = pd.DataFrame.from_records(
        list(Site.objects.values_list("code", "name", "time_zone")), columns=["code", "name", "time_zone"]
    )
    already = codes_in_any_case(problems, frame["code"], sites["code"], "site code")
    held = sites.set_index(sites["code"].str.upper()).reindex(frame["code"].str.upper().to_numpy())
    refuse_changed(
        problems, already, frame[["name", "time_zone"]].reset_index(drop=True), held.reset_index(drop=True), "site"
    )
    return _result(frame, problems, already, on_progress)


def insert_sites(good: pd.DataFrame) -> int:
    Site.objects.bulk_create(
        [Site(code=row.code, name=row.name, time_zone=row.time_zone) for row in good.itertuples(index=False)],
        batch_size=2000,
    )
    return len(good)


def check_days_off(frame: pd.DataFrame, *, on_progress=None) -> CheckResult:
    """Days off at sites (local holidays, shutdowns): a known site code, a day from today to the plan's reach
    (`workorders.add_day_off`'s rule, the days-off page's), a name; a site's day given twice in the file is
    refused on the later row, one already stored is skipped as already imported."""
    problems = _Problems(frame)
    for name in DAY_OFF_REQUIRED:
        problems.add(frame[name].str.strip().eq(""), name, "required", of_cell=True)
    site_id = site_ids_in_any_case(frame["site"])
    problems.add(
        site_id.isna().to_numpy(),
        "site",
        _unknown("site code", frame["site"], "add the site first"),
        of_cell=True,
    )
    day = parse_dates(frame["day"])
    problems.add(
        day.isna().to_numpy(),
        "day",
        "not a day of the calendar: give it as year-month-day, e.g. 2027-03-29",
        of_cell=True,
    )
    today = timezone.localdate()
    said = day_off_problems(day.to_numpy("datetime64[D]"), today, PlanningSettings().working_days)
    problems.add(said != "", "day", said)
    keys = site_id.fillna(-1).astype("int64").astype(str) + " " + day.dt.strftime("%Y-%m-%d").fillna("")
    repeated_in_file(problems, keys.where(day.notna() & site_id.notna()), "day", "the same site and day")
    held = SiteDayOff.objects.filter(day__gte=today).values_list("site_id", "day")
    stored = {f"{site} {day_off.isoformat()}" for site, day_off in held}
    return _result(frame, problems, keys.isin(stored).to_numpy(bool), on_progress)


def insert_days_off(good: pd.DataFrame) -> int:
    site_ids = site_ids_in_any_case(good["site"]).astype("int64").tolist()
    SiteDayOff.objects.bulk_create(
        [
            SiteDayOff(site_id=site, day=dt.date.fromisoformat(row.day[:10]), name=row.name.strip())
            for site, row in zip(site_ids, good.itertuples(index=False), strict=True)
        ],
        batch_size=2000,
    )
    return len(good)


MARKED_RANGE = r"^\s*([0-9]+(?:[.,][0-9]+)?)\s*[-\u2013]\s*([0-9]+(?:[.,][0-9]+)?)\s*(?:[u\u00b5]F|MFD)?\s*$"


def _marked_ranges(rated_uf: pd.Series, problems: _Problems) -> None:
    """A start capacitor is marked with a range ("189-227 uF"); the catalogue takes its middle as the rating
    and half its width as the tolerances: say so with the numbers, not "not a number" (common practice of
    the trade, no single source: 189-227 uF is 208 uF -9.1/+9.1 %)."""
    bounds = rated_uf.astype(str).str.extract(MARKED_RANGE, flags=re.IGNORECASE)
    low = pd.to_numeric(bounds[0].str.replace(",", ".", regex=False), errors="coerce")
    high = pd.to_numeric(bounds[1].str.replace(",", ".", regex=False), errors="coerce")
    is_range = (low.notna() & high.notna() & (high > low) & (low > 0)).to_numpy(bool)
    middle = (low + high) / 2
    half_pct = (high - low) / 2 / middle * 100
    problems.add(
        is_range,
        "rated_uf",
        (
            "a marked range: give its middle as rated_uf ("
            + middle.map("{:.4g}".format).to_numpy(object)
            + ") and half its width as tolerance_minus_pct and tolerance_plus_pct ("
            + half_pct.map("{:.1f}".format).to_numpy(object)
            + ")"
        ),
    )


def check_parts(frame: pd.DataFrame, *, on_progress=None) -> CheckResult:
    """Capacitor parts with the catalogue's field names; the database's constraints checked first."""
    problems = _Problems(frame)
    _marked_ranges(frame["rated_uf"], problems)  # first: it also says what the tolerances should be
    for name in PART_REQUIRED:
        problems.add(frame[name].eq(""), name, "required", of_cell=True)
    code_problems(problems, frame["code"], "code")
    numbers = finite_numbers(frame, PART_NUMBERS, problems)
    dielectric = frame["dielectric"].str.lower().to_numpy(object)
    # The rulebook's words at a field, as the admin's form shows them at every field at once: named beside the
    # row's other faults, so a row is put right in one round (each check passes where a figure it reads is no
    # number: NaN compares false).
    for rows, name, message in part_problems(*(numbers[name] for name in PART_NUMBERS), dielectric=dielectric):
        problems.add(rows, name, message, of_cell=True)
    for name, choices in (
        ("dielectric", CapacitorPart.Dielectric.values),
        ("class_of_operation", CapacitorPart.OperationClass.values),
        ("safety_class", CapacitorPart.SafetyClass.values),
    ):
        given = frame[name].str.lower() if name == "dielectric" else frame[name].str.upper()
        problems.add(given.ne("") & ~given.isin(choices), name, "must be one of " + ", ".join(choices), of_cell=True)
    compared = [*PART_NUMBERS, "dielectric", "class_of_operation", "safety_class"]
    parts = pd.DataFrame.from_records(
        list(CapacitorPart.objects.values_list("code", *compared)), columns=["code", *compared]
    )
    already = codes_in_any_case(problems, frame["code"], parts["code"], "part code")
    good = frame.copy()
    for name in PART_NUMBERS:
        good[name] = numbers[name]
    given = good[compared].assign(
        dielectric=frame["dielectric"].str.lower(),
        class_of_operation=frame["class_of_operation"].str.upper(),
        safety_class=frame["safety_class"].str.upper(),
    )
    held = parts.set_index(parts["code"].str.upper()).reindex(frame["code"].str.upper().to_numpy())
    refuse_changed(problems, already, given.reset_index(drop=True), held[compared].reset_index(drop=True), "part")
    return _result(good, problems, already, on_progress)


def insert_parts(good: pd.DataFrame) -> int:
    def optional(value, default=None):
        return default if np.isnan(value) else float(value)

    CapacitorPart.objects.bulk_create(
        [
            CapacitorPart(
                code=row.code,
                description=row.description,
                rated_uf=float(row.rated_uf),
                tolerance_minus_pct=float(row.tolerance_minus_pct),
                tolerance_plus_pct=float(row.tolerance_plus_pct),
                rated_voltage_v=float(row.rated_voltage_v),
                frequency_hz=int(row.frequency_hz),
                dielectric=row.dielectric.lower(),
                class_of_operation=row.class_of_operation.upper(),
                duty=row.duty,
                safety_class=row.safety_class.upper(),
                max_case_temperature_c=optional(row.max_case_temperature_c, 70.0),
                max_dissipation_factor=optional(row.max_dissipation_factor),
                unit_cost=Decimal(f"{optional(row.unit_cost, 0.0):.2f}"),
            )
            for row in good.itertuples(index=False)
        ],
        batch_size=2000,
    )
    return len(good)


def check_history(frame: pd.DataFrame, *, on_progress=None) -> CheckResult:
    """Past (and present) fitted capacitors, the failures and suspensions of life data.

    Dates must hang together: removed on or after fitting, a reason exactly when
    removed, no overlap with another capacitor of the same motor and role (in the
    file or in the register), so at most one in service. A capacitor already in
    the register (same motor, role and fitting date) is skipped.
    """
    problems = _Problems(frame)
    for name in HISTORY_REQUIRED:
        problems.add(frame[name].eq(""), name, "required", of_cell=True)
    tags = frame["asset_tag"].str.upper()
    known = Motor.objects.filter(asset_tag__any_of=np.array(sorted(set(tags) - {""}), dtype=object))
    motors = pd.DataFrame.from_records(
        list(known.values_list("id", "asset_tag", "motor_type")),
        columns=["motor_id", "tag", "motor_type"],
    )
    motors["tag"] = motors["tag"].str.upper()
    motor = motors.drop_duplicates("tag").set_index("tag").reindex(tags)
    problems.add(
        motor["motor_id"].isna().to_numpy(),
        "asset_tag",
        _unknown("asset tag", frame["asset_tag"], "not in the register"),
    )
    role = frame["role"].str.lower()
    problems.add(~role.isin(FittedCapacitor.Role.values), "role", "must be start or run", of_cell=True)
    has_role = np.where(
        role.eq(FittedCapacitor.Role.RUN),
        motor["motor_type"].isin([Motor.MotorType.PERMANENT_SPLIT, Motor.MotorType.TWO_VALUE]).to_numpy(),
        motor["motor_type"].isin([Motor.MotorType.CAPACITOR_START, Motor.MotorType.TWO_VALUE]).to_numpy(),
    )
    problems.add(
        ~has_role,
        "role",
        np.array(
            [
                f"a {t} motor has no {r} capacitor"
                for t, r in zip(motor["motor_type"].fillna("").str.replace("_", "-"), role, strict=True)
            ],
            dtype=object,
        ),
    )
    parts = dict(CapacitorPart.objects.values_list("code", "id"))
    problems.add(
        ~frame["part_code"].isin(parts), "part_code", _unknown("part code", frame["part_code"], "add the part first")
    )
    dielectrics = dict(CapacitorPart.objects.values_list("code", "dielectric"))
    wrong, messages = _wrong_dielectric(role.to_numpy(object), frame["part_code"], dielectrics)
    problems.add(wrong, "part_code", messages)
    today = pd.Timestamp(timezone.localdate())
    fitted, removed = parse_dates(frame["fitted_on"]), parse_dates(frame["removed_on"])
    for name, parsed in (("fitted_on", fitted), ("removed_on", removed)):
        problems.add(frame[name].ne("") & parsed.isna(), name, "not a date (use 2026-03-14)", of_cell=True)
    for rows, name, message in service_date_problems(fitted.to_numpy(), removed.to_numpy(), today.to_datetime64()):
        problems.add(rows, name, message)
    reason = frame["removal_reason"].str.lower()
    problems.add(removed.notna() & reason.eq(""), "removal_reason", "required when removed_on is given")
    problems.add(
        removed.isna() & reason.ne(""), "removal_reason", "given for a capacitor still in service: add removed_on"
    )
    problems.add(
        reason.ne("") & ~reason.isin(FittedCapacitor.RemovalReason.values),
        "removal_reason",
        "must be failed, planned or other",
    )
    rows = pd.DataFrame(
        {
            "row": frame["row"].to_numpy(),
            "motor_id": motor["motor_id"].to_numpy(float),
            "role": role.to_numpy(),
            # a row refused above (a date in the future, before 1950) takes no part in the overlap tests, and
            # its date may be one nanosecond timestamps cannot hold (9999-12-31)
            "start": fitted.where(~problems.bad).astype("datetime64[ns]").to_numpy(),
            "end": removed.where(~problems.bad).astype("datetime64[ns]").fillna(OPEN_END).to_numpy(),
        }
    )
    keys = rows["motor_id"].astype(str) + "|" + rows["role"] + "|" + rows["start"].astype(str)
    repeated_in_file(problems, keys.where(~problems.bad), "fitted_on", "the same capacitor (motor, role, fitted_on)")
    register = pd.DataFrame.from_records(
        list(
            FittedCapacitor.objects.filter(motor_id__any_of=motors["motor_id"].to_numpy(np.int64)).values_list(
                "motor_id", "role", "fitted_on", "removed_on", "part__code", "removal_reason"
            )
        ),
        columns=["motor_id", "role", "start", "end", "part_code", "removal_reason"],
    )
    held = register.assign(removed_on=register["end"])
    register = register.astype({"motor_id": float})
    register["start"] = pd.to_datetime(register["start"]).astype("datetime64[ns]")
    register["end"] = pd.to_datetime(register["end"]).astype("datetime64[ns]").fillna(OPEN_END)
    register["row"] = 0  # not a row of the file
    keys_in_register = register[["motor_id", "role", "start"]].drop_duplicates().assign(found=True)
    already = rows.merge(keys_in_register, on=["motor_id", "role", "start"], how="left")["found"].notna().to_numpy()
    compared = ["part_code", "removed_on", "removal_reason"]
    held = (
        held.astype({"motor_id": float}).assign(start=register["start"]).drop_duplicates(["motor_id", "role", "start"])
    )
    held = rows[["motor_id", "role", "start"]].merge(held, on=["motor_id", "role", "start"], how="left")
    given = pd.DataFrame({"part_code": frame["part_code"], "removed_on": removed, "removal_reason": reason})
    refuse_changed(problems, already, given.reset_index(drop=True), held[compared], "capacitor")
    register = register[["motor_id", "role", "start", "end", "row"]]
    _refuse_overlaps(problems, rows[~problems.bad & ~already], register)
    good = frame.assign(
        motor_id=rows["motor_id"],
        role=role,
        part_id=frame["part_code"].map(parts),
        fitted_on=fitted.dt.date,
        removed_on=removed.dt.date,
        removal_reason=reason,
    )
    return _result(good, problems, already, on_progress)


def insert_history(good: pd.DataFrame) -> list[int]:
    """Create the fitted capacitors; returns their ids (their refits are queued by the caller)."""
    created = FittedCapacitor.objects.bulk_create(
        [
            FittedCapacitor(
                motor_id=int(row.motor_id),
                role=row.role,
                part_id=int(row.part_id),
                serial=row.serial,
                fitted_on=row.fitted_on,
                removed_on=None if pd.isna(row.removed_on) else row.removed_on,
                removal_reason=row.removal_reason,
                notes=row.notes,
            )
            for row in good.itertuples(index=False)
        ],
        batch_size=2000,
    )
    return [c.id for c in created]
