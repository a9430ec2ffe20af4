"""Asset tags, site codes and part codes unique whatever their case (CST-0093 and cst-0093 are one motor).

Before the unique indexes are built, the register is searched for codes that differ only in case; if any
exist the migration stops and names them, so a person decides which to rename: nothing is merged or lost.
"""

import django.db.models.functions.text
from django.db import migrations, models
from django.db.models import Count
from django.db.models.functions import Upper

CODES = (("Motor", "asset_tag", "asset tags"), ("Site", "code", "site codes"), ("CapacitorPart", "code", "part codes"))


def refuse_codes_differing_only_in_case(apps, schema_editor):
    found = []
    for model_name, field_name, what in CODES:
        model = apps.get_model("fleet", model_name)
        clashing = (
            model.objects.annotate(key=Upper(field_name))
            .values("key")
            .annotate(count=Count("id"))
            .filter(count__gt=1)
            .values_list("key", flat=True)
        )
        for key in clashing:
            codes = sorted(
                model.objects.annotate(key=Upper(field_name)).filter(key=key).values_list(field_name, flat=True)
            )
            found.append(f"{what}: " + ", ".join(codes))
    if found:
        raise RuntimeError(
            "Codes that differ only in case must be renamed before this migration (codes become unique in "
            "any case; nothing was changed): " + "; ".join(found)
        )


class Migration(migrations.Migration):

    dependencies = [
        ('fleet', '0038_codes_constraint_messages'),
    ]

    operations = [
        migrations.RunPython(refuse_codes_differing_only_in_case, migrations.RunPython.noop),
        migrations.AddConstraint(
            model_name='capacitorpart',
            constraint=models.UniqueConstraint(django.db.models.functions.text.Upper('code'), name='part_code_unique_any_case', violation_error_message='The part code is taken already, in another case: codes are unique in any case.'),
        ),
        migrations.AddConstraint(
            model_name='motor',
            constraint=models.UniqueConstraint(django.db.models.functions.text.Upper('asset_tag'), name='motor_tag_unique_any_case', violation_error_message='The asset tag is taken already, in another case: codes are unique in any case.'),
        ),
        migrations.AddConstraint(
            model_name='site',
            constraint=models.UniqueConstraint(django.db.models.functions.text.Upper('code'), name='site_code_unique_any_case', violation_error_message='The site code is taken already, in another case: codes are unique in any case.'),
        ),
    ]
