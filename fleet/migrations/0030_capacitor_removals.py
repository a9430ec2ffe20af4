"""The dashboard's replacements this week read the few capacitors removed lately, not every one."""

from django.db import migrations, models


class Migration(migrations.Migration):
    dependencies = [
        ("fleet", "0029_assessment_facts_sent"),
    ]

    operations = [
        migrations.AddIndex(
            model_name="fittedcapacitor",
            index=models.Index(
                condition=models.Q(("removed_on__isnull", False)),
                fields=["removed_on", "removal_reason"],
                name="capacitor_removals",
            ),
        ),
    ]
