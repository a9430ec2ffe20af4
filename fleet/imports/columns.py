"""The columns of each import kind and the vectorised column rules (numbers, dates, times,
texts, repeats within the file): whole frames at once, no database. The ORM side is
fleet/services/import_checks.py."""

from __future__ import annotations

import datetime as dt
import difflib
import hashlib
import operator
import re
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from fleet.engineering.rules import (
    ACCEPTED_DAYS_WORDS,
    CONFIRMATION_CASES,
    FIRST_ACCEPTED_DAY,
    LAST_ACCEPTED_DAY,
    MSG_NOT_A_NUMBER,
    known_time_zone,
    parse_numbers,
)
from fleet.imports.files import TextColumns, row_numbers

READING_COLUMNS = {
    "asset_tag": "Motor asset tag (required)",
    "role": "start or run (required)",
    "taken_at": "Date and time, ISO 8601, e.g. 2026-03-14 09:30 (required; site time if no offset)",
    "method": "meter or in_circuit (default meter)",
    "capacitance_uf": "Capacitance in µF (meter readings)",
    "capacitor_current_a": "Capacitor current in A (in-circuit readings)",
    "capacitor_voltage_v": "Voltage across the capacitor in V (in-circuit readings)",
    "line_voltage_v": "Line voltage in V",
    "main_current_a": "Main winding current in A",
    "aux_current_a": "Auxiliary winding current in A",
    "line_current_a": "Line current in A",
    "case_temperature_c": "Capacitor case temperature in °C",
    "ambient_temperature_c": "Ambient temperature in °C",
    "esr_ohm": "ESR in Ω",
    "condition": "sound, bulged, leaking or vented (default sound)",
    "notes": "Free text",
    "fitted_capacitor_id": "The capacitor read, by its id in the readings export (optional: it must be this motor's "
    "capacitor in this role; empty: the one fitted that day); a column headed installation_id, as older exports "
    "wrote it, is read as this one",
    "capacitor_fitted_on": "The day the capacitor read was fitted, as the readings export writes it (optional): "
    "which capacitor of this motor in this role, the same in every installation where ids are not (on a replacement "
    "day, the new one or the removed one); with fitted_capacitor_id, the two must agree",
    "id": "The reading's id in the readings export it came from (optional): names it for a row that corrects it",
    "supersedes": "The id of the reading this row corrects, another row of the same file, as the readings export "
    "writes a correction (optional): both are imported, the corrected one kept as it was and out of the trend; a "
    "row naming no row of the file is imported as a reading of its own",
    "confirmed": "yes to keep a value the reading form would ask to confirm ("
    + "; ".join(CONFIRMATION_CASES.values())
    + "), as re-checked; no or empty: such a row is refused (also true/false, 1/0); a column headed "
    "outlier_confirmed, as older readings exports wrote it, is read as this one",
}
READING_REQUIRED = ("asset_tag", "role", "taken_at")
# A field's earlier headings, which older exports wrote: a file of theirs imports as it did. A file that has the
# field's own heading too is read from that one.
OLD_HEADINGS = {
    "confirmed": ("outlier_confirmed",),  # the readings export's until 2026-12-03
    "fitted_capacitor_id": ("installation_id",),  # the exports' before the fitted capacitor's rename
    "site": ("site_code",),  # the register and days-off imports' until 2026-12-05 (`site` in the API and exports)
}

SITE_HELP = (
    "Site code, as in the register, in any case (required); a column headed site_code, as files before 2026-12-05 "
    "named it, is read as this one"
)

REGISTER_COLUMNS = {
    "asset_tag": "Motor asset tag, unique (required)",
    "site": SITE_HELP,
    "location": "Where the motor is",
    "application": "fan, pump, compressor, conveyor or other (required)",
    "motor_type": "capacitor_start, permanent_split or two_value (required)",
    "load_type": "fan_law or constant (required)",
    "rated_voltage_v": "Nameplate voltage in V (required)",
    "frequency_hz": "50 or 60 (required)",
    "poles": "2, 4, 6, 8, 10 or 12 (required)",
    "output_w": "Rated output in W (required)",
    "full_load_current_a": "Full-load current in A (required)",
    "rated_speed_rpm": "Rated speed in rpm (required)",
    "commissioned_on": "Date commissioned, ISO 8601",
    "run_part_code": "Part code of the run capacitor fitted (PSC and two-value motors)",
    "start_part_code": "Part code of the start capacitor fitted (capacitor-start and two-value motors)",
    "fitted_on": "Date the capacitors were fitted, ISO 8601 (required)",
    "run_fitted_on": "Date the run capacitor was fitted, where it differs from fitted_on (a two-value motor "
    "whose capacitors were changed apart)",
    "start_fitted_on": "Date the start capacitor was fitted, where it differs from fitted_on",
    "route_order": "Place on the site's reading route, a whole number (empty: 0, the route then goes by tag)",
    "insulation_class": "Insulation class of the windings, e.g. B or F (up to 2 characters)",
    "run_serial": "Serial number or date code of the run capacitor fitted, up to 60 characters",
    "start_serial": "Serial number or date code of the start capacitor fitted, up to 60 characters",
}
REGISTER_REQUIRED = (
    "asset_tag",
    "site",
    "application",
    "motor_type",
    "load_type",
    "rated_voltage_v",
    "frequency_hz",
    "poles",
    "output_w",
    "full_load_current_a",
    "rated_speed_rpm",
    "fitted_on",
)
REGISTER_NUMBERS = ["rated_voltage_v", "frequency_hz", "poles", "output_w", "full_load_current_a", "rated_speed_rpm"]
CHUNK_ROWS = 50_000  # rows checked per step of the progress bar
MAX_REPORTED_ERRORS = 2000


@dataclass
class CheckResult:
    good: pd.DataFrame  # one row per good line, with resolved ids and parsed values
    errors: list[tuple[int, str, str]] = field(default_factory=list)  # (row, field, message)
    duplicates: int = 0  # rows already in the database (skipped, not errors)
    total: int = 0

    @property
    def error_rows(self) -> int:
        return len({row for row, _, _ in self.errors})


def _heading_key(name: str) -> str:
    """A heading as headings are matched to fields: its letters and digits, lower case ("Site Code" is site_code)."""
    return "".join(ch for ch in name.lower() if ch.isalnum())


def suggest_mapping(columns: list[str], ours: dict[str, str]) -> dict[str, str]:
    """Our field -> the file's column, matching names regardless of case, spaces, dashes; a field's earlier
    heading (`OLD_HEADINGS`) where the file has no column of its own name."""
    by_norm = {_heading_key(c): c for c in columns}
    mapping = {}
    for name in ours:
        found = [
            by_norm[_heading_key(heading)]
            for heading in (name, *OLD_HEADINGS.get(name, ()))
            if _heading_key(heading) in by_norm
        ]
        if found:
            mapping[name] = found[0]
    return mapping


def near_misses(columns: list[str], mapping: dict[str, str], ours: dict[str, str]) -> dict[str, str]:
    """The file's headings no field took that spell a field no heading took, all but a letter or two
    (`difflib`'s ratio at least 0.85): heading -> that field. Left out, the column's values would be lost."""
    taken = set(mapping.values())
    free = [name for name in ours if name not in mapping]
    found = {}
    for column in columns:
        if column in taken:
            continue
        close = difflib.get_close_matches(column.strip().lower().replace(" ", "_"), free, n=1, cutoff=0.85)
        if close:
            found[column] = close[0]
    return found


def missing_required_words(missing: list[str], header: list[str], remedy: str) -> str:
    """What a file without a column for each of `missing` (required fields) is told, with the columns it has:
    one sentence for the import page, the command and the worker."""
    fields = "field" + ("s " if len(missing) > 1 else " ") + ", ".join(missing)
    has = ", ".join(header) if header else "none"
    return f"No column holds the required {fields} (the file's columns: {has}): {remedy}."


def _first_positions(header) -> dict:
    """Each heading's first column (a heading given twice refuses a file before this is asked)."""
    position = {}
    for number, heading in enumerate(header):
        position.setdefault(heading, number)
    return position


def mapped_frame(
    header: list[str], rows: list[list[str]] | TextColumns, mapping: dict[str, str], ours: dict[str, str]
) -> pd.DataFrame:
    """Our fields as text columns (stripped; "" where the file has no such column), and each row's number
    as the file shows it (`files.row_numbers`)."""
    position = _first_positions(header)
    out = {}
    for name in ours:
        column = position.get(mapping.get(name))
        if column is None:
            out[name] = pd.Series("", index=range(len(rows)), dtype=str)
        elif isinstance(rows, TextColumns):
            out[name] = rows.column(column).str.strip()
        else:
            out[name] = pd.Series(list(map(operator.itemgetter(column), rows)), dtype=str).str.strip()
    out["row"] = row_numbers(rows)
    return pd.DataFrame(out)


def shown(value, most: int = 40) -> str:
    """A stored or given value in a message: a number as %g, an empty one as "nothing", long text cut."""
    if value is None:
        return "nothing"
    if isinstance(value, float):
        return f"{value:g}" if np.isfinite(value) else "nothing"
    text = str(value) or "nothing"
    return text if len(text) <= most else text[: most - 1] + "…"


class _Problems:
    """Collects (row, field, message) from boolean masks over a chunk.

    A check that reads several fields, or looks a row up, is not run on a row with a problem already (its words
    would rest on a value known wrong). A cell's own problem (`of_cell`: unreadable, required, not one of the
    choices, the rulebook's message at a field, which the form shows at every field at once) is named beside the
    row's others, so a row with several faults is put right in one round; one message a field."""

    def __init__(self, chunk: pd.DataFrame):
        self.chunk = chunk
        self.bad = np.zeros(len(chunk), bool)
        self.bad_in: dict[str, np.ndarray] = {}
        self.items: list[tuple[int, str, str]] = []

    def add(self, mask, field_name: str, message, *, of_cell: bool = False):
        bad_here = self.bad_in.setdefault(field_name, np.zeros(len(self.chunk), bool))
        mask = np.asarray(mask, bool) & ~(bad_here if of_cell else self.bad)
        rows = self.chunk["row"].to_numpy()[mask]
        messages = message[mask] if isinstance(message, np.ndarray) else [message] * int(mask.sum())
        if field_name in self.chunk and any(m == MSG_NOT_A_NUMBER for m in messages):
            # A report of a file names what the cell held, which the form shows beside its message itself.
            typed = self.chunk[field_name].to_numpy(object)[mask]
            messages = [
                f"{str(t)[:20]} is not a number" if m == MSG_NOT_A_NUMBER else m
                for t, m in zip(typed, messages, strict=True)
            ]
        self.items += [(int(r), field_name, str(m)) for r, m in zip(rows, messages, strict=True)]
        self.bad |= mask
        bad_here |= mask


def _numbers(chunk, names, problems):
    """Numbers by the rulebook's one parser (decimal comma, finite only)."""
    values = {}
    for name in names:
        values[name], messages = parse_numbers(chunk[name])
        problems.add(messages != "", name, messages, of_cell=True)
    return values


YES_WORDS = ("yes", "true", "1")
NO_WORDS = ("no", "false", "0", "")


def yes_or_no(texts: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """A yes/no column, any case: (yes, unreadable) per row. yes, true or 1 is yes; no, false, 0 or an empty
    cell is no; anything else is unreadable, for a row-and-field message (never taken as no)."""
    words = texts.str.strip().str.lower()
    yes = words.isin(YES_WORDS).to_numpy(bool)
    return yes, ~(yes | words.isin(NO_WORDS).to_numpy(bool))


UNSAVED_FORMULA_WORDS = (
    "holds a formula with no saved value ({}): save the workbook in a spreadsheet program, which stores each "
    "formula's value, or type the value instead of the formula"
)


def unsaved_formulas(header: list[str], rows, mapping: dict[str, str], ours: dict[str, str]) -> dict[str, np.ndarray]:
    """Our field -> the rows whose cell holds a workbook formula with no saved value (`files.NumberedRows`), for
    the fields that have any."""
    cells = getattr(rows, "unsaved_formulas", ())
    if not cells:
        return {}
    position = _first_positions(header)
    found = {}
    for name in ours:
        column = position.get(mapping.get(name))
        marked = [row for row, j in cells if j == column]
        if column is not None and marked:
            found[name] = np.zeros(len(rows), bool)
            found[name][marked] = True
    return found


def text_problems(
    frame: pd.DataFrame, max_lengths: dict[str, int], formulas: dict[str, np.ndarray] | None = None
) -> _Problems:
    """Cells the database cannot hold: a workbook formula with no saved value (`unsaved_formulas`: its text is not
    its value), a NUL character in any field, text longer than its column."""
    problems = _Problems(frame)
    for name, mask in (formulas or {}).items():
        messages = np.array([UNSAVED_FORMULA_WORDS.format(shown(text)) for text in frame[name]], dtype=object)
        problems.add(mask, name, messages, of_cell=True)
    for name in frame.columns.drop("row"):
        problems.add(
            frame[name].str.contains("\x00", regex=False),
            name,
            "holds a NUL character (byte 0): remove it",
            of_cell=True,
        )
    for name, limit in max_lengths.items():
        problems.add(frame[name].str.len() > limit, name, f"longer than {limit} characters", of_cell=True)
    return problems


def older_heading_disagreements(
    frame: pd.DataFrame, header: list[str], rows, mapping: dict[str, str], problems: _Problems
) -> None:
    """A file with a field's heading and its older one too (`OLD_HEADINGS`: `site` and `site_code`) is read from
    the field's own; a row where the older column holds something else is refused at the field, naming both (the
    older column was reported as left out, and which of the two is right no one can tell)."""
    taken = set(mapping.values())
    for name, olds in OLD_HEADINGS.items():
        if mapping.get(name) not in header or name not in frame:
            continue
        older_keys = {_heading_key(old) for old in olds}
        for column in (c for c in header if c not in taken and _heading_key(c) in older_keys):
            older = mapped_frame(header, rows, {name: column}, {name: ""})[name]
            differ = frame[name].ne("") & older.ne("") & frame[name].str.casefold().ne(older.str.casefold())
            messages = (
                f"{mapping[name]} says "
                + frame[name].map(shown)
                + f" but {column}, its older heading, says "
                + older.map(shown)
                + ": keep one of the two columns"
            ).to_numpy(object)
            problems.add(differ.to_numpy(bool), name, messages, of_cell=True)


def finite_numbers(chunk: pd.DataFrame, names, problems: _Problems) -> dict[str, np.ndarray]:
    """Numbers (point or comma decimal mark); infinities refused. Blank cells are NaN."""
    values = _numbers(chunk, names, problems)
    for name in names:
        problems.add(np.isinf(values[name]), name, "not a finite number", of_cell=True)
    return values


def repeated_in_file(problems: _Problems, keys: pd.Series, field_name: str, what: str) -> None:
    """A key seen on an earlier row of the file: reported on the later row, naming the first. Where the rows of
    one key say different things, every one of them is refused, naming another: the file does not say which is
    right, and with good rows only the first was imported, whichever it was (an audit of inputs)."""
    keys = keys.reset_index(drop=True)
    rows = problems.chunk["row"].reset_index(drop=True)
    repeated = keys.duplicated(keep="first") & keys.notna()
    first_row = dict(zip(keys[~repeated], rows[~repeated], strict=True))
    messages = np.array([f"{what} as row {first_row.get(k)}" for k in keys], dtype=object)
    in_repeats = (keys.duplicated(keep=False) & keys.notna()).to_numpy()
    if in_repeats.any():  # only these rows' texts are joined: a file without repeats costs nothing more
        texts = problems.chunk.drop(columns="row").reset_index(drop=True)[in_repeats].astype(str)
        said = texts.apply(lambda row: "\x1f".join(row), axis=1).str.strip().str.casefold()  # "cst" is CST
        key_of = keys[in_repeats]
        differ = said.groupby(key_of).transform("nunique").gt(1)
        if differ.any():
            second_row = dict(zip(key_of[repeated[in_repeats]], rows[in_repeats][repeated[in_repeats]], strict=False))
            conflicting = np.zeros(len(keys), bool)
            conflicting[np.flatnonzero(in_repeats)[differ.to_numpy()]] = True
            for i in np.flatnonzero(conflicting):
                other = second_row.get(keys[i]) if not repeated[i] else first_row.get(keys[i])
                messages[i] = f"{what} as row {other}, which gives it otherwise: keep the right one of the rows"
            repeated = repeated | pd.Series(conflicting)
    problems.add(repeated.to_numpy(), field_name, messages)


# A day, and at most a time of day after it (a spreadsheet's or an export's "2026-03-14 00:00", its offset too):
# anything else after the day ("2026-03-14xyz", "2026-03-14 99:99", words) makes it no date, not a day with the
# rest dropped unsaid.
_DAY_THEN_TIME = (
    r"[0-9]{4}-[0-9]{2}-[0-9]{2}"
    r"(?:[T ](?:[01][0-9]|2[0-3]):[0-5][0-9](?::[0-5][0-9](?:[.,][0-9]+)?)?"
    r"(?:[zZ]|[+-](?:[01][0-9]|2[0-3]):?[0-5][0-9])?)?"
)


def parse_dates(texts: pd.Series) -> pd.Series:
    """ISO 8601 dates (a time of day after one is ignored); blanks and bad values are NaT."""
    day = texts.str.slice(0, 10).where(texts.str.fullmatch(_DAY_THEN_TIME).fillna(False).astype(bool))
    return pd.to_datetime(day, errors="coerce", format="%Y-%m-%d")


# Python's \s for text (the characters str.isspace() finds), spelt out: pyarrow's regular expressions know
# no \s of that meaning, so pandas sends a pattern with \s through Python's re, a call per row.
SPACE = "[\t\n\x0b\x0c\r\x1c-\x1f \x85\xa0\u1680\u2000-\u200a\u2028\u2029\u202f\u205f\u3000]"

# A time of day followed by an offset or Z: "09:30+02:00", "09:30:15.5 -0500", "09:30Z".
_OFFSET_AT_END = r"\d{2}:\d{2}(?::\d{2}(?:[.,]\d+)?)?" + SPACE + r"*(?:[zZ]|[+-]\d{2}(?::?\d{2})?)$"


# A day with no time of day: "2026-11-30", "20261130", "2026-11-30Z".
_DAY_ALONE = r"^\d{4}-?\d{2}-?\d{2}" + SPACE + r"*(?:[zZ]|[+-]\d{2}(?::?\d{2})?)?$"
DAY_ALONE_WORDS = "a date alone: give the time of day too, e.g. 2026-03-14 09:30 (site time)"


def parse_times(texts: pd.Series, zones: pd.Series) -> tuple[pd.Series, np.ndarray]:
    """ISO 8601 date-times as UTC, and a message for each row whose time cannot be placed ("" if fine).

    A time with an offset (or Z) is taken as given; offsets may differ from row to row (a file
    across a daylight-saving change), hence one parse with utc=True. A time without one is
    wall-clock time in the row's zone (`zones`: its site's), localised one zone at a time; a
    local time the clocks skip or repeat there, or a zone nobody knows, gets a message. A date
    without a time of day gets one too: midnight is not a time anyone measured at; so does a time outside the
    rulebook's accepted span (year 0001 at +14:00 is in year 0 at UTC).
    """
    texts = texts.reset_index(drop=True)
    zones = zones.reset_index(drop=True)
    parsed = pd.to_datetime(texts, errors="coerce", format="ISO8601", utc=True)
    messages = np.full(len(texts), "", dtype=object)
    day_alone = texts.str.strip().str.contains(_DAY_ALONE, regex=True).to_numpy() & parsed.notna().to_numpy()
    parsed[day_alone] = pd.NaT
    messages[day_alone] = DAY_ALONE_WORDS
    local = (~texts.str.contains(_OFFSET_AT_END, regex=True)).to_numpy() & parsed.notna().to_numpy()
    wall = parsed.dt.tz_localize(None)
    for zone in pd.unique(zones[local]):
        rows = local & zones.eq(zone).to_numpy()
        try:
            placed = wall[rows].dt.tz_localize(zone, ambiguous="NaT", nonexistent="NaT")
        except (KeyError, ValueError):  # the site's zone is not a known name (zoneinfo raises a KeyError subclass)
            parsed[rows] = pd.NaT
            messages[rows] = f"the site's time zone {zone!r} is unknown: add the offset, e.g. +01:00, or fix the site"
            continue
        parsed[rows] = placed.dt.tz_convert("UTC")
        unplaced = rows & parsed.isna().to_numpy()
        if unplaced.any():
            before, after = (_offsets(wall[unplaced] + pd.Timedelta(hours=h), zone) for h in (-3, 3))
            messages[unplaced] = [
                f"this local time is skipped or repeated in {zone} (clocks changed): add its offset, {b} or {a}"
                for b, a in zip(before, after, strict=True)
            ]
    first, after_last = (pd.Timestamp(day, tz="UTC") for day in (FIRST_ACCEPTED_DAY, LAST_ACCEPTED_DAY + 1))
    outside = (parsed.notna() & ((parsed < first) | (parsed >= after_last))).to_numpy()
    parsed[outside] = pd.NaT
    messages[outside] = f"the date is outside the span accepted, {ACCEPTED_DAYS_WORDS} (UTC): check the year"
    # A time on a day the calendar does not hold (2026-02-30 10:00) is named so, not sent to the pattern.
    day = texts.str.extract(r"^\s*([0-9]{4}-[0-9]{2}-[0-9]{2})", expand=False)
    impossible = (
        parsed.isna() & day.notna() & pd.to_datetime(day, format="%Y-%m-%d", errors="coerce").isna()
    ).to_numpy() & (messages == "")
    messages[impossible] = (day[impossible] + " is not a day of the calendar").to_numpy(object)
    return parsed, messages


def parse_site_time(text: str, zone: str) -> dt.datetime:
    """One reading time typed or sent (the form's and the API's), read by `parse_times`'s rule: an aware
    UTC datetime, or ValueError with the sentence to show at `taken_at`."""
    moments, problems = parse_times(pd.Series([text], dtype=object), pd.Series([zone], dtype=object))
    if problems[0]:
        raise ValueError(problems[0][:1].upper() + problems[0][1:] + ".")
    if pd.isna(moments.iloc[0]):
        raise ValueError("Not a date and time: use 2026-03-14 09:30 (site time), or add an offset.")
    return moments.iloc[0].to_pydatetime()


def clock_change_offsets(text: str, zone: str) -> tuple[str, str] | None:
    """The UTC offsets in force just before and just after the clocks changed, for a wall-clock time without an
    offset that the clocks of `zone` skip or repeat ("2026-10-25T01:30" in Europe/Dublin: "+01:00", "+00:00");
    None for any other text. The reading form offers the two, as `parse_site_time`'s message names them."""
    wall = pd.to_datetime(pd.Series([text], dtype=object), errors="coerce", format="ISO8601")
    if wall.isna().iloc[0] or wall.dt.tz is not None or re.search(_OFFSET_AT_END, text.strip()):
        return None
    try:
        placed = wall.dt.tz_localize(zone, ambiguous="NaT", nonexistent="NaT")
    except (KeyError, ValueError):
        return None
    if placed.notna().iloc[0]:
        return None
    before, after = (_offsets(wall + pd.Timedelta(hours=h), zone)[0] for h in (-3, 3))
    return before, after


def _offsets(wall: pd.Series, zone: str) -> list[str]:
    """The UTC offset ("-06:00") in force at each wall-clock time in `zone` (times the clocks keep)."""
    placed = wall.dt.tz_localize(zone)
    minutes = (placed.dt.tz_localize(None) - placed.dt.tz_convert("UTC").dt.tz_localize(None)).dt.total_seconds() // 60
    return [f"{'-' if m < 0 else '+'}{int(abs(m)) // 60:02d}:{int(abs(m)) % 60:02d}" for m in minutes]


def local_days(taken_utc, zones, fallback: str = "UTC") -> np.ndarray:
    """Each instant's calendar day in its row's time zone (datetime64[D], NaT where the instant is): the day
    a person at the site calls it, which a fitting or removal date names. Converted one zone at a time; a
    zone nobody knows counts as `fallback`."""
    taken = pd.Series(np.asarray(taken_utc, "datetime64[s]")).dt.tz_localize("UTC")
    zones = pd.Series(np.asarray(zones, object))
    days = np.full(len(taken), np.datetime64("NaT"), "datetime64[D]")
    for zone in pd.unique(zones):
        rows = zones.eq(zone).to_numpy()
        name = zone if known_time_zone(zone) else fallback
        local = taken[rows].dt.tz_convert(name).dt.tz_localize(None)
        days[rows] = local.to_numpy("datetime64[s]").astype("datetime64[D]")
    return days


def reading_keys(fitted_capacitor_ids, taken_at_utc: pd.Series, methods, capacitance_uf) -> np.ndarray:
    """Each reading's content key (capacitor, UTC time, method, value): a file imported twice adds nothing.

    The key text is "id|time|method|value" with the time as `Timestamp.isoformat()` writes it,
    so keys stay those of the readings imported before.
    """
    if not len(taken_at_utc):
        return np.array([], dtype=object)
    times = pd.Series(taken_at_utc).reset_index(drop=True)
    whole = times.dt.tz_localize(None).to_numpy("datetime64[ns]")
    text = np.datetime_as_string(whole.astype("datetime64[s]"), unit="s").astype(object) + "+00:00"
    fractional = whole != whole.astype("datetime64[s]")
    if fractional.any():
        text[fractional] = [moment.isoformat() for moment in times[fractional]]
    columns = (
        np.asarray(fitted_capacitor_ids, np.int64).tolist(),
        text.tolist(),
        np.asarray(methods, object).tolist(),
        np.asarray(capacitance_uf, float).tolist(),
    )
    keys = (f"{i}|{moment}|{method}|{uf:.4f}" for i, moment, method, uf in zip(*columns, strict=True))
    return np.array([hashlib.sha256(key.encode()).hexdigest()[:40] for key in keys], dtype=object)


SITE_COLUMNS = {
    "code": "Site code, unique, up to 20 characters (required)",
    "name": "Site name, up to 120 characters (required)",
    "time_zone": (
        "Time zone name, e.g. Europe/Madrid or UTC, in any case (stored as the tz database spells it); "
        "readings without an offset are in this zone (required)"
    ),
}
SITE_REQUIRED = ("code", "name", "time_zone")
PART_COLUMNS = {
    "code": "Part code, unique, up to 40 characters (required)",
    "rated_uf": "Rated capacitance in µF (required): about 20 to 1,500 for an electrolytic, 0.4 to 150 for film",
    "tolerance_minus_pct": "Tolerance below rated, in %, e.g. 5 (required)",
    "tolerance_plus_pct": "Tolerance above rated, in %, e.g. 5 (required)",
    "rated_voltage_v": "Rated voltage in V AC (required)",
    "dielectric": "film (run capacitors) or electrolytic (start capacitors) (required)",
    "frequency_hz": "Rated frequency, 50 or 60 Hz (required)",
    "description": "Free text, up to 200 characters",
    "class_of_operation": "A, B, C or D: rated life 30,000, 10,000, 3,000 or 1,000 h (IEC 60252-1)",
    "duty": "Duty, up to 80 characters, e.g. continuous, or 20 starts/h of 3 s",
    "safety_class": "S0, S1, S2 or S3 (older markings P0, P1, P2)",
    "max_case_temperature_c": "Highest permitted case temperature in °C (default 70)",
    "max_dissipation_factor": "Highest dissipation factor (tan delta) as a fraction, e.g. 0.002",
    "unit_cost": "Price of one, in the plant's currency, at most two decimals (default 0)",
}
PART_REQUIRED = (
    "code",
    "rated_uf",
    "tolerance_minus_pct",
    "tolerance_plus_pct",
    "rated_voltage_v",
    "dielectric",
    "frequency_hz",
)
PART_NUMBERS = [
    "rated_uf",
    "tolerance_minus_pct",
    "tolerance_plus_pct",
    "rated_voltage_v",
    "frequency_hz",
    "max_case_temperature_c",
    "max_dissipation_factor",
    "unit_cost",
]
HISTORY_COLUMNS = {
    "asset_tag": "Motor asset tag, as in the register (required)",
    "role": "start or run (required)",
    "part_code": "Part code of the capacitor, as in the parts catalogue (required)",
    "fitted_on": "Date fitted, ISO 8601, e.g. 2019-05-02 (required)",
    "removed_on": "Date removed, ISO 8601; empty while the capacitor is in service",
    "removal_reason": "failed, planned or other: given exactly when removed_on is",
    "serial": "Serial number or date code, up to 60 characters",
    "notes": "Free text",
}
HISTORY_REQUIRED = ("asset_tag", "role", "part_code", "fitted_on")
DAY_OFF_COLUMNS = {
    "site": SITE_HELP,
    "day": "The day off, ISO 8601, e.g. 2027-03-29: today or later, within the plan's two years (required)",
    "name": "What the day is: a public holiday's name, shutdown, ..., up to 80 characters (required)",
}
DAY_OFF_REQUIRED = ("site", "day", "name")
OPEN_END = pd.Timestamp("2200-01-01")  # the end of a capacitor still in service, for overlap tests


def _result(frame: pd.DataFrame, problems: _Problems, already: np.ndarray, on_progress) -> CheckResult:
    good_mask = ~problems.bad & ~already
    if on_progress:
        on_progress(len(frame))
    return CheckResult(
        good=frame[good_mask].reset_index(drop=True),
        errors=sorted(problems.items),
        duplicates=int((already & ~problems.bad).sum()),
        total=len(frame),
    )


def _refuse_overlaps(problems: _Problems, rows: pd.DataFrame, register: pd.DataFrame) -> None:
    """Each row whose time on the motor overlaps another capacitor's in the same role, naming that one."""
    everyone = pd.concat([register, rows], ignore_index=True)  # a clash with the register is named first
    pairs = rows.merge(everyone, on=["motor_id", "role"], suffixes=("", "_other"))
    pairs = pairs[
        (pairs["row"] != pairs["row_other"])
        & (pairs["start"] < pairs["end_other"])
        & (pairs["start_other"] < pairs["end"])
    ].drop_duplicates("row")
    if pairs.empty:
        return

    def described(pair) -> str:
        where = f"row {pair.row_other}" if pair.row_other else "the register"
        until = "in service" if pair.end_other == OPEN_END else f"removed {pair.end_other.date()}"
        return f"the {pair.role} capacitor fitted {pair.start_other.date()} ({until}, {where})"

    both_open = ((pairs["end"] == OPEN_END) & (pairs["end_other"] == OPEN_END)).to_numpy()
    found = pd.DataFrame(
        {
            "field": np.where(both_open, "removed_on", "fitted_on"),
            "message": [
                f"another {pair.role} capacitor is in service on this motor: {described(pair)}"
                if open_ended
                else f"overlaps {described(pair)}"
                for pair, open_ended in zip(pairs.itertuples(index=False), both_open, strict=True)
            ],
        },
        index=pairs["row"].to_numpy(),
    ).reindex(problems.chunk["row"].to_numpy())
    for field_name in ("fitted_on", "removed_on"):
        problems.add(found["field"].eq(field_name).to_numpy(), field_name, found["message"].to_numpy(dtype=object))
