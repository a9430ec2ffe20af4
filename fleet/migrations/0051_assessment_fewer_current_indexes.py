"""Current assessments keep three partial indexes instead of six: every refit writes an entry a
capacitor into each (about 7 ms of server CPU a 2,000-capacitor chunk, a sixth of its COPY).

- `in_service_by_risk` and `in_service_by_site_risk` go: the risk counts of home, plan and dashboard
  are summed from the ledger of counts (migration 0023), and a list filtered by risk level (the API,
  the digest) walks the assessments by date instead (no page read them: `tests/load/pages.py` at
  100,000 motors, every page, no scan of either).
- `in_service_by_replace_by` (replace_by, fitted capacitor) goes into `in_service_totals`, which now
  has the capacitor in its key after the date: the plan and the API read their pages in that order
  from it, and the totals by date, site, part, risk and fitting date stay index-only.
"""

from django.db import migrations, models


class Migration(migrations.Migration):
    dependencies = [
        ("fleet", "0050_workorder_cancel_reason_and_visit_moved_from"),
    ]

    operations = [
        migrations.RemoveIndex(model_name="assessment", name="in_service_by_risk"),
        migrations.RemoveIndex(model_name="assessment", name="in_service_by_site_risk"),
        migrations.RemoveIndex(model_name="assessment", name="in_service_by_replace_by"),
        migrations.RemoveIndex(model_name="assessment", name="in_service_totals"),
        migrations.AddIndex(
            model_name="assessment",
            index=models.Index(
                condition=models.Q(("capacitor_in_service", True), ("is_current", True)),
                fields=["replace_by", "fitted_capacitor"],
                include=("site", "part", "risk", "fitted_on"),
                name="in_service_totals",
            ),
        ),
    ]
