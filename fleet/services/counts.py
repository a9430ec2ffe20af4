"""Counts of capacitors in service, read from the ledger the database's triggers keep on every write
(`InServiceCount`, migration 0023): one query over a few rows, whatever the fleet's size.

A capacitor in service counts at (site, part, month fitted); its current assessment at (site, part,
risk level, UTC day made). Capacitors in service without a current assessment are the difference.
"""

from __future__ import annotations

import datetime as dt
from collections import defaultdict
from dataclasses import dataclass

from django.db import connection, transaction
from django.db.models import Max, Sum

from fleet.models import DesignCount, InServiceCount, MotorReadCount
from fleet.roles import scope_to_user

KEY = ("site_id", "part_id", "risk", "fitted_month", "assessed_on")


@dataclass(frozen=True)
class InServiceCounts:
    """The ledger summed per key: `assessed` {(site_id, part_id, risk, assessed_on): n} counts current
    assessments of capacitors in service, `fitted` {(site_id, part_id, fitted_month): n} capacitors in service."""

    assessed: dict[tuple, int]
    fitted: dict[tuple, int]

    def by_risk(self) -> dict[str, int]:
        return _summed((risk, n) for (_, _, risk, _), n in self.assessed.items())

    def by_site_risk(self) -> dict[tuple[int, str], int]:
        return _summed(((site, risk), n) for (site, _, risk, _), n in self.assessed.items())

    def not_assessed_by_site(self) -> dict[int, int]:
        """Capacitors in service without a current assessment, per site (sites with none left out)."""
        left = _summed((site, n) for (site, _, _), n in self.fitted.items())
        for (site, _, _, _), n in self.assessed.items():
            left[site] = left.get(site, 0) - n
        return {site: n for site, n in left.items() if n}

    def by_part_fitted_month(self) -> dict[tuple[int, dt.date], int]:
        return _summed(((part, month), n) for (_, part, month), n in self.fitted.items())

    def assessed_since(self, day: dt.date) -> int:
        """Current assessments of capacitors in service made on `day` (UTC) or later."""
        return sum(n for (_, _, _, assessed_on), n in self.assessed.items() if assessed_on >= day)


def assessed_total(user=None, site_code: str | None = None, risk: str | None = None) -> int:
    """Current assessments of capacitors in service at the user's sites, of one site and one risk level
    when given: what `pages.in_service_assessments(user)` so filtered counts, summed from the ledger."""
    rows = scope_to_user(InServiceCount.objects.exclude(risk=""), user)
    if site_code:
        rows = rows.filter(site__code=site_code)
    if risk:
        rows = rows.filter(risk=risk)
    return rows.aggregate(total=Sum("n"))["total"] or 0


def _summed(pairs) -> dict:
    totals = defaultdict(int)
    for key, n in pairs:
        totals[key] += n
    return {key: n for key, n in totals.items() if n}


def in_service_counts(user=None, site=None) -> InServiceCounts:
    """The counts at the user's sites (None: every site), of one of them when `site` is given; one query."""
    rows = scope_to_user(InServiceCount.objects.all(), user)
    if site is not None:
        rows = rows.filter(site=site)
    rows = rows.values_list(*KEY).annotate(total=Sum("n")).exclude(total=0).order_by()
    assessed, fitted = {}, {}
    for site_id, part, risk, fitted_month, assessed_on, n in rows:
        if risk:
            assessed[(site_id, part, risk, assessed_on)] = n
        else:
            fitted[(site_id, part, fitted_month)] = n
    return InServiceCounts(assessed=assessed, fitted=fitted)


LEDGERS = (  # each ledger kept by triggers, with its key
    (InServiceCount, KEY),
    (MotorReadCount, ("site_id", "last_read_on", "commissioned_on")),
    (DesignCount, tuple(f.attname for f in DesignCount._meta.concrete_fields if f.name not in ("id", "n"))),
)


def compact_counts() -> int:
    """Replace the rows of each ledger (`InServiceCount`, `MotorReadCount`, `DesignCount`) by their sums per key (keys
    that sum to nought go); returns the rows left in both. Sums are unchanged, so readers never see a
    difference. On PostgreSQL one statement per ledger deletes the rows it can see and inserts their
    sums: rows a concurrent write adds meanwhile stay as they are, and two compactions at once each
    sum only the rows they deleted."""
    return sum(_compact(model, key) for model, key in LEDGERS)


def _compact(model, key) -> int:
    columns = ", ".join(key)
    if connection.vendor == "postgresql":
        with connection.cursor() as cursor:
            cursor.execute(
                f"WITH gone AS (DELETE FROM {model._meta.db_table} RETURNING {columns}, n)"
                f" INSERT INTO {model._meta.db_table} ({columns}, n)"
                f" SELECT {columns}, SUM(n) FROM gone GROUP BY {columns} HAVING SUM(n) <> 0"
            )
            return cursor.rowcount
    with transaction.atomic():
        last = model.objects.aggregate(last=Max("id"))["last"]
        if last is None:
            return 0
        sums = model.objects.filter(id__lte=last).values(*key).annotate(total=Sum("n")).exclude(total=0)
        rows = [model(**{k: row[k] for k in key}, n=row["total"]) for row in sums.order_by()]
        model.objects.filter(id__lte=last).delete()
        model.objects.bulk_create(rows)
        return len(rows)
