# Part priors: the bend of the ageing paths and its spread, the slope prior's age term, the typical capacitor voltage; the risk rule's alert quantile per family.

from django.db import migrations, models


class Migration(migrations.Migration):

    dependencies = [
        ("fleet", "0013_assessment_trend_columns"),
    ]

    operations = [
        migrations.AddField(
            model_name='bandcalibration',
            name='alert_quantile',
            field=models.FloatField(default=0.1, help_text='Crossing quantile the risk rule flags on, chosen by the back-test (0.1 = P10)'),
        ),
        migrations.AddField(
            model_name='partprior',
            name='curvature_per_h2',
            field=models.FloatField(default=0.0, help_text="Common bend c of the part's paths z = b0 + b1 tau + c tau^2, per stress hour squared"),
        ),
        migrations.AddField(
            model_name='partprior',
            name='curvature_var',
            field=models.FloatField(default=0.0, help_text="Variance of the bend between the part's capacitors"),
        ),
        migrations.AddField(
            model_name='partprior',
            name='slope_per_age',
            field=models.FloatField(default=0.0, help_text="Change of the prior slope b1 per stress hour of the readings' mean age"),
        ),
        migrations.AddField(
            model_name='partprior',
            name='voltage_ratio',
            field=models.FloatField(blank=True, help_text='Median measured capacitor voltage / rated, for capacitors never read in circuit', null=True),
        ),
        migrations.AddField(
            model_name="assessment",
            name="trend_curvature",
            field=models.FloatField(
                blank=True, help_text="Bend of the fitted path per stress hour squared (0: straight)", null=True
            ),
        ),
    ]
