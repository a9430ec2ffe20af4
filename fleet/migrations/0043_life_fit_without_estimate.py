"""A part's stored life fit may hold no estimate, with the reason (`no_fit_reason`), and an estimate may
have no bounds (its covariance empty: an information matrix that could not be inverted).

A part whose two failures or more all fall at the oldest age has no maximum-likelihood Weibull: the
nightly refresh stored nothing for it (it stopped on it, and left every other part's fit as it was), and
the pages said "not fitted yet". Fits stored before 0023 had no covariance either; they are dropped here
(the next refresh stores them again), so an empty covariance now means "no bounds", never "old fit".
"""

from django.db import migrations, models


def drop_fits_stored_before_0023(apps, schema_editor):
    apps.get_model("fleet", "PartLifeFit").objects.filter(var_log_beta__isnull=True).delete()


class Migration(migrations.Migration):

    dependencies = [
        ('fleet', '0042_work_order_read_again'),
    ]

    operations = [
        migrations.RunPython(drop_fits_stored_before_0023, migrations.RunPython.noop),
        migrations.RemoveConstraint(
            model_name='partlifefit',
            name='life_fit_finite_positive',
        ),
        migrations.AddField(
            model_name='partlifefit',
            name='no_fit_reason',
            field=models.CharField(blank=True, help_text='Why the data hold no estimate', max_length=300),
        ),
        migrations.AlterField(
            model_name='partlifefit',
            name='beta',
            field=models.FloatField(blank=True, help_text='Weibull shape; empty when there is no estimate', null=True),
        ),
        migrations.AlterField(
            model_name='partlifefit',
            name='eta_years',
            field=models.FloatField(blank=True, help_text='Weibull scale, years', null=True),
        ),
        migrations.AddConstraint(
            model_name='partlifefit',
            constraint=models.CheckConstraint(condition=models.Q(models.Q(('beta__gt', 0), ('beta__lt', 1000000000.0), ('eta_years__gt', 0), ('eta_years__lt', 1000000000.0), ('no_fit_reason', '')), models.Q(('beta__isnull', True), ('eta_years__isnull', True), models.Q(('no_fit_reason', ''), _negated=True)), _connector='OR'), name='life_fit_finite_positive_or_why_not'),
        ),
    ]
