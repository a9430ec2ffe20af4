"""Assessments lose the index on (is_current, risk, replace_by), the first one they had: the partial
indexes on current assessments of capacitors in service serve the plan, the lists and the counts,
and the digest now reads those too. A refit wrote two entries a capacitor into it: the new
assessment and the new version of the one it replaces."""

from django.db import migrations


class Migration(migrations.Migration):
    dependencies = [
        ("fleet", "0046_newest_reading_without_index"),
    ]

    operations = [
        migrations.RemoveIndex(
            model_name="assessment",
            name="fleet_asses_is_curr_7f462f_idx",
        ),
    ]
