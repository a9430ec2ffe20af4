"""Each assessment keeps the band calibration's six terms its dates were worked out with, so the capacitor
page draws the same calibrated path (a later back-test may store other terms before the next refit).
Nullable and without a default, so SQLite adds the column without rebuilding the table (and its triggers).
"""

from django.db import migrations, models


class Migration(migrations.Migration):

    dependencies = [
        ('fleet', '0043_life_fit_without_estimate'),
    ]

    operations = [
        migrations.AddField(
            model_name='assessment',
            name='calibration_terms',
            field=models.JSONField(blank=True, help_text="The band calibration's six terms this forecast was made with (BandCalibration's fields), so the page draws the same calibrated path its dates come from", null=True),
        ),
    ]
