"""The index on a motor tag's capitals (0015) is the same as the unique one of 0039: one is dropped."""

from django.db import migrations


class Migration(migrations.Migration):

    dependencies = [
        ('fleet', '0039_codes_codes_unique_any_case'),
    ]

    operations = [
        migrations.RemoveIndex(
            model_name='motor',
            name='motor_tag_any_case',
        ),
    ]
