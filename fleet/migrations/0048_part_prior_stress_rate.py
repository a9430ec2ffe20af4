"""Each part's typical long-run stress rate, the spread of its capacitors' rates and of a reading's ageing
factor within a capacitor (`trends._borrowed_stress_rate`): a capacitor with a reading or two has no year of
seasons of its own, so its rate is drawn towards its part's, and its band carries what is still unknown of
it. Nullable: SQLite adds the columns without rebuilding the table; a part without them keeps each
capacitor's own rate.
"""

from django.db import migrations, models


class Migration(migrations.Migration):

    dependencies = [
        ('fleet', '0047_assessment_drop_current_risk_index'),
    ]

    operations = [
        migrations.AddField(
            model_name='partprior',
            name='reading_log_var',
            field=models.FloatField(blank=True, help_text="Variance of a reading's log ageing factor about its capacitor's mean (seasons, day, duty)", null=True),
        ),
        migrations.AddField(
            model_name='partprior',
            name='stress_rate',
            field=models.FloatField(blank=True, help_text="Typical long-run stress hours per calendar hour of the part's capacitors read over a year: a young capacitor's future runs mostly at it", null=True),
        ),
        migrations.AddField(
            model_name='partprior',
            name='stress_rate_log_var',
            field=models.FloatField(blank=True, help_text="Variance of the log long-run stress rates between the part's capacitors", null=True),
        ),
    ]
